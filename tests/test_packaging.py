"""What the wheel holds, read from pyproject.toml the way setuptools reads it."""

from __future__ import annotations

import tomllib
from pathlib import Path

import setuptools
from test_layering import ALLOWED

ROOT = Path(__file__).resolve().parents[1]

#: Repository-only packages: the offline validation harness, the benchmarks and the tests.
NOT_SHIPPED = {"validation", "benchmarks", "tests"}


def _packaged() -> set[str]:
    """Top-level packages of the wheel, by the rules of [tool.setuptools.packages.find].

    setuptools' own finder on the configured include/exclude patterns (its documented
    behaviour for pyproject.toml: ``namespaces`` defaults to true there).
    """
    config = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    find = config["tool"]["setuptools"]["packages"]["find"]
    finder = (setuptools.find_namespace_packages if find.get("namespaces", True)
              else setuptools.find_packages)
    found = finder(where=str(ROOT / find.get("where", ["."])[0]),
                   include=find.get("include", ["*"]), exclude=find.get("exclude", []))
    return {name.split(".")[0] for name in found}


def test_validation_benchmarks_and_tests_stay_out_of_the_wheel() -> None:
    assert _packaged() & NOT_SHIPPED == set()


def test_every_package_a_shipped_package_imports_is_shipped() -> None:
    # The layering table says which packages each one may import; `heartsway demo` (service)
    # runs the simulator, so simulation must ship with the service.
    shipped = _packaged()
    needed = set().union(*(ALLOWED[name] for name in shipped))
    assert "simulation" in needed
    assert needed <= shipped
    assert shipped == set(ALLOWED) - NOT_SHIPPED


def test_the_image_build_context_holds_exactly_the_shipped_packages() -> None:
    # The Dockerfile copies the build context and pip-installs it: a package the wheel
    # ships but .dockerignore keeps out would be missing from the image (the demo needs
    # simulation), and a repository-only one let in would be dead weight.
    lines = (ROOT / ".dockerignore").read_text(encoding="utf-8").split()
    let_in = {line[1:].strip("/") for line in lines if line.startswith("!") and
              line.endswith("/")}
    assert let_in == _packaged()
