"""Function length in the engine and the service, read from the code.

Issue 10's acceptance: no function in ``features/`` or ``service/`` is longer than 100 lines
without its docstring (STYLE: public functions validate, call private kernels and assemble the
result; kernels read in one screen). Every module is parsed with :mod:`ast`; a function's
length is its last line minus its first (decorators and signature included) plus one, less
the lines of its docstring. Nested functions and methods are measured on their own as well
as inside their parent. The limit of 100 lines is the project's own rule, not a standard.
"""

from __future__ import annotations

import ast
import textwrap
from collections.abc import Iterator
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PACKAGES = ("features", "service")
MAX_LINES = 100
#: Functions still over the limit, each with why it stays for now. The test below fails
#: when one of them comes under the limit, so the list only shrinks.
PENDING: dict[str, str] = {}


def _functions(tree: ast.AST) -> Iterator[ast.FunctionDef | ast.AsyncFunctionDef]:
    for node in ast.walk(tree):
        if isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef):
            yield node


def _length_without_docstring(fn: ast.FunctionDef | ast.AsyncFunctionDef) -> int:
    first = min([fn.lineno, *(d.lineno for d in fn.decorator_list)])
    assert fn.end_lineno is not None
    total = fn.end_lineno - first + 1
    body0 = fn.body[0]
    if (isinstance(body0, ast.Expr) and isinstance(body0.value, ast.Constant)
            and isinstance(body0.value.value, str)):
        assert body0.end_lineno is not None
        total -= body0.end_lineno - body0.lineno + 1
    return total


def _long_functions(source: str, filename: str) -> list[str]:
    tree = ast.parse(source, filename=filename)
    return [f"{filename}:{fn.lineno} {fn.name} ({n} lines)" for fn in _functions(tree)
            if (n := _length_without_docstring(fn)) > MAX_LINES]


def _key(hit: str) -> str:
    """``"path:line name (n lines)"`` -> ``"path name"``."""
    where, name = hit.split(" ")[:2]
    return f"{where.rsplit(':', 1)[0]} {name}"


@pytest.mark.parametrize("package", PACKAGES)
def test_no_function_longer_than_100_lines_without_its_docstring(package: str) -> None:
    files = sorted((ROOT / package).rglob("*.py"))
    assert files, f"no modules found under {package}/"
    long = [hit for path in files
            for hit in _long_functions(path.read_text(encoding="utf-8"),
                                       str(path.relative_to(ROOT)))]
    new = [hit for hit in long if _key(hit) not in PENDING]
    assert not new, "functions over 100 lines (docstring not counted):\n" + "\n".join(new)
    pending = {k for k in PENDING if k.startswith(f"{package}/")}
    done = pending - {_key(hit) for hit in long}
    assert not done, f"now under {MAX_LINES} lines, remove from PENDING: {sorted(done)}"


def test_the_measure_counts_code_and_not_the_docstring() -> None:
    # The scan itself must be able to fail: a 101-line body is caught, a 100-line one and
    # a long docstring over a short body are not.
    def make(body_lines: int, doc_lines: int) -> str:
        doc = '    """' + "\n" * doc_lines + '    """\n' if doc_lines else ""
        body = "".join(f"    x{i} = {i}\n" for i in range(body_lines))
        return "def f():\n" + doc + body

    assert _long_functions(make(100, 0), "m.py") == ["m.py:1 f (101 lines)"]  # def line + 100
    assert _long_functions(make(99, 0), "m.py") == []
    assert _long_functions(make(20, 300), "m.py") == []
    # a method is measured too, its decorator counted as one of its lines
    method = "class C:\n" + textwrap.indent("@staticmethod\n" + make(100, 0), "    ")
    assert _long_functions(method, "m.py") == ["m.py:3 f (102 lines)"]
