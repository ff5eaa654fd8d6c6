"""A small Dockerfile reader for the container tests (no container engine here)."""

from __future__ import annotations

import json
import shlex
from dataclasses import dataclass
from pathlib import Path


@dataclass(frozen=True)
class Instruction:
    keyword: str
    arguments: str


def read_dockerfile(path: Path) -> list[Instruction]:
    """Instructions in order, continuation lines joined, comments dropped."""
    instructions: list[Instruction] = []
    pending = ""
    for raw in path.read_text(encoding="utf-8").splitlines():
        line = raw.strip()
        if not pending and (not line or line.startswith("#")):
            continue
        if line.startswith("#"):
            continue
        if line.endswith("\\"):
            pending += line[:-1] + " "
            continue
        whole = (pending + line).strip()
        pending = ""
        keyword, _, arguments = whole.partition(" ")
        instructions.append(Instruction(keyword.upper(), arguments.strip()))
    return instructions


def exec_form(arguments: str) -> list[str]:
    """The JSON array of an exec-form CMD/ENTRYPOINT (raises if it is shell form)."""
    value = json.loads(arguments)
    assert isinstance(value, list) and all(isinstance(v, str) for v in value)
    return value


def env_pairs(arguments: str) -> dict[str, str]:
    """``ENV A=1 B=2`` as a dict."""
    return dict(item.split("=", 1) for item in shlex.split(arguments))
