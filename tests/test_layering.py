"""The package graph, read from the code: which of our top-level packages may import which.

Every module of every package is parsed with :mod:`ast`; each ``import``, ``from ... import``
(relative ones resolved) and ``importlib.import_module("constant")`` names a module, and the
table below says which of ours a package may reach. A second table pins the outside libraries
of the pure packages (STYLE: the engine is numpy, scipy, PyWavelets and the standard library).
Imports inside functions count the same as those at the top: a lazy import is still a
dependency. A fresh interpreter then proves that ``import features`` loads neither flask nor
marshmallow, and that ``import simulation`` loads nothing of the engine.
"""

from __future__ import annotations

import ast
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]

#: Which of our packages each package may import. Data flows one way: service -> schemas ->
#: features; the simulator, the client and the engine stand alone. schemas reads
#: fileformats (schemas/file_input.py turns a read trace into a request body).
ALLOWED: dict[str, frozenset[str]] = {
    "features": frozenset(),
    "simulation": frozenset(),
    "client": frozenset(),
    "fileformats": frozenset({"features"}),
    "schemas": frozenset({"features", "fileformats"}),
    # client: `heartsway submit` sends a night to a running service through it
    "service": frozenset({"client", "features", "schemas", "fileformats", "simulation"}),
    "validation": frozenset({"features", "simulation"}),
    "benchmarks": frozenset({"client", "features", "fileformats", "schemas", "service",
                             "simulation"}),
}

#: The modules of ``service`` that another package may import: the application factory, the
#: body parser and the one road through the engine (benchmarks/service_load.py times parsing,
#: the analysis and the dump as the service does them), and the pictures with the demo body
#: they are timed on (benchmarks/pictures.py), and the allocator settings of the service's
#: processes (benchmarks/suite.py times the engine under them, as the workers run it). The
#: blueprints, problem mapping, CLI and the rest are the service's own business.
SERVICE_ENTRY_POINTS = frozenset({"service", "service.allocator", "service.analysis",
                                  "service.bodies", "service.demo", "service.night_report",
                                  "service.report"})

#: Outside libraries a pure package may import besides the standard library.
EXTERNAL: dict[str, frozenset[str]] = {
    "features": frozenset({"numpy", "scipy", "pywt"}),
    # edfio only to write a simulated night as an EDF file (simulation/night.py, lazily)
    "simulation": frozenset({"numpy", "scipy", "edfio"}),
    "client": frozenset(),
}


def _module_name(path: Path, root: Path) -> str:
    parts = list(path.relative_to(root).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _imported_names(path: Path, root: Path) -> Iterator[tuple[int, str]]:
    """(line, absolute dotted name) of every import in one file.

    ``from a.b import c`` gives both ``a.b`` and ``a.b.c`` (``c`` may be a module);
    relative imports are resolved against the file's package.
    """
    module = _module_name(path, root)
    package = module if path.name == "__init__.py" else module.rpartition(".")[0]
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for alias in node.names:
                yield node.lineno, alias.name
        elif isinstance(node, ast.ImportFrom):
            base = package.split(".")[: len(package.split(".")) - node.level + 1]
            target = ".".join(base + [node.module or ""]) if node.level else node.module or ""
            target = target.strip(".")
            yield node.lineno, target
            for alias in node.names:
                yield node.lineno, f"{target}.{alias.name}"
        elif (
            isinstance(node, ast.Call)
            and getattr(node.func, "attr", getattr(node.func, "id", None)) == "import_module"
            and node.args
            and isinstance(node.args[0], ast.Constant)
            and isinstance(node.args[0].value, str)
        ):
            yield node.lineno, node.args[0].value


def _module_of(root: Path, name: str) -> str:
    """The longest prefix of ``name`` that is a module or package under ``root``."""
    parts = name.split(".")
    for end in range(len(parts), 0, -1):
        path = root.joinpath(*parts[:end])
        if path.with_suffix(".py").is_file() or (path / "__init__.py").is_file():
            return ".".join(parts[:end])
    return name


def forbidden_imports(
    root: Path,
    allowed: dict[str, frozenset[str]],
    *,
    entry_points: dict[str, frozenset[str]] | None = None,
    external: dict[str, frozenset[str]] | None = None,
) -> list[str]:
    """Every import under ``root`` that the tables forbid, as ``file:line: a -> b`` lines.

    ``allowed`` maps each package (a folder of ``root``) to the packages of ours it may
    import; ``entry_points`` optionally limits, per package, which of its modules the others
    may import; ``external`` optionally lists, per package, the outside libraries it may
    import beside the standard library.
    """
    entry_points = entry_points or {}
    external = external or {}
    found = set()
    for package in sorted(allowed):
        for path in sorted((root / package).rglob("*.py")):
            for line, name in _imported_names(path, root):
                top = name.split(".")[0]
                if top in (package, "__future__"):
                    continue
                target = _module_of(root, name) if top in allowed else top
                where = f"{path.relative_to(root).as_posix()}:{line}: {package} -> {target}"
                if top in allowed:
                    if top not in allowed[package]:
                        found.add(where)
                    elif top in entry_points and target not in entry_points[top]:
                        found.add(where + " (not an entry point)")
                elif package in external and top not in sys.stdlib_module_names:
                    if top not in external[package]:
                        found.add(where + " (outside library)")
    return sorted(found)


def test_every_import_follows_the_package_table() -> None:
    found = forbidden_imports(
        ROOT, ALLOWED, entry_points={"service": SERVICE_ENTRY_POINTS}, external=EXTERNAL
    )
    assert found == []


def test_the_table_names_every_package_of_ours() -> None:
    # A new top-level package must take its place in the table, or it escapes the check.
    packages = {
        p.name for p in ROOT.iterdir()
        if (p / "__init__.py").exists() and p.name != "tests"
    }
    assert packages == set(ALLOWED)


# ----------------------------------------------------------------------- the checker itself


def _tree(tmp_path: Path, files: dict[str, str]) -> Path:
    for name, text in files.items():
        path = tmp_path / name
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(text, encoding="utf-8")
    for package in {name.split("/")[0] for name in files}:
        (tmp_path / package / "__init__.py").touch()
    return tmp_path


FAKE_TABLE = {"core": frozenset(), "web": frozenset({"core"})}


@pytest.mark.parametrize(
    "source",
    [
        "import web\n",
        "from web import app\n",
        "import web.app as a\n",
        "def lazy():\n    from web.app import handler\n",
        "import importlib\nm = importlib.import_module('web.app')\n",
    ],
)
def test_checker_finds_an_upward_import(tmp_path: Path, source: str) -> None:
    root = _tree(tmp_path, {"core/engine.py": source, "web/app.py": "import core\n"})
    found = forbidden_imports(root, FAKE_TABLE)
    assert found and all(line.startswith("core/engine.py:") for line in found)
    assert " core -> web" in found[0]


def test_checker_accepts_an_allowed_tree(tmp_path: Path) -> None:
    root = _tree(tmp_path, {"core/engine.py": "import json\nimport numpy\n",
                            "web/app.py": "from core.engine import run\nfrom . import views\n",
                            "web/views.py": ""})
    assert forbidden_imports(root, FAKE_TABLE) == []


def test_checker_limits_others_to_the_entry_points(tmp_path: Path) -> None:
    table = {"core": frozenset(), "web": frozenset(), "bench": frozenset({"web"})}
    root = _tree(tmp_path, {"web/bodies.py": "def parse(): ...\n", "web/views.py": "",
                            "bench/ok.py": "import web\nfrom web.bodies import parse\n"
                                           "from web import bodies\n",
                            "bench/bad.py": "from web.views import x\n"})
    found = forbidden_imports(root, table, entry_points={"web": frozenset({"web", "web.bodies"})})
    assert [line.split(":")[0] for line in found] == ["bench/bad.py"]


def test_checker_pins_the_outside_libraries(tmp_path: Path) -> None:
    root = _tree(tmp_path, {"core/engine.py": "import math\nimport numpy\nimport flask\n",
                            "web/app.py": "import flask\n"})
    found = forbidden_imports(root, FAKE_TABLE, external={"core": frozenset({"numpy"})})
    assert found == ["core/engine.py:3: core -> flask (outside library)"]


# ----------------------------------------------------------------------- what really loads

PROBE = """
import sys
import {modules}
leaked = sorted(
    name for name in sys.modules
    if name.split(".")[0] in {{{banned}}}
)
print(",".join(leaked))
"""


@pytest.mark.parametrize(
    ("modules", "banned"),
    [
        # The engine stays a pure library: no web framework, no schema library.
        ("features, features.engine",
         '"flask", "marshmallow", "werkzeug", "apispec", "gunicorn"'),
        # The simulator needs nothing of the engine (nor of the service).
        ("simulation", '"features", "schemas", "service", "flask", "marshmallow"'),
    ],
)
def test_importing_a_pure_package_pulls_in_nothing_it_should_not(modules: str,
                                                                  banned: str) -> None:
    # A fresh interpreter: the test process itself has flask loaded already.
    done = subprocess.run(
        [sys.executable, "-c", PROBE.format(modules=modules, banned=banned)],
        cwd=ROOT, capture_output=True, text=True, timeout=60,
    )
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == ""
