"""Every function in the package stays short enough to read in one screen.

The rule (the project's own, DEVELOPERS.md "Style"): a function's code, from its
``def`` line to its last line and leaving out its docstring, is at most
:data:`MAX_LINES` lines. A numpy-style docstring documents parameters at length, so it
does not count; nested functions count within the function that holds them, and on
their own.
"""

from __future__ import annotations

import ast
from pathlib import Path

PACKAGE = Path(__file__).resolve().parents[1] / "reconcile"
MAX_LINES = 80


def _docstring_lines(node: ast.FunctionDef | ast.AsyncFunctionDef) -> int:
    first = node.body[0]
    if isinstance(first, ast.Expr) and isinstance(first.value, ast.Constant) \
            and isinstance(first.value.value, str):
        return first.end_lineno - first.lineno + 1
    return 0


def code_lines(node: ast.FunctionDef | ast.AsyncFunctionDef) -> int:
    """Lines from the ``def`` (decorators left out) to the end, less the docstring."""
    return node.end_lineno - node.lineno + 1 - _docstring_lines(node)


def long_functions(source: str, name: str) -> list[str]:
    """``name:line function (N lines)`` for each function over :data:`MAX_LINES`."""
    found = []
    for node in ast.walk(ast.parse(source, filename=name)):
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
            n = code_lines(node)
            if n > MAX_LINES:
                found.append(f"{name}:{node.lineno} {node.name} ({n} lines)")
    return found


def test_the_count_leaves_out_the_docstring_and_nothing_else():
    body = "\n".join(f"    x{i} = {i}" for i in range(MAX_LINES - 1))
    fits = f'def f():\n    """Doc\n\n    more doc\n    """\n{body}\n'
    assert long_functions(fits, "fits.py") == []
    over = f"def g():\n{body}\n    y = 1\n"
    assert long_functions(over, "over.py") == [f"over.py:1 g ({MAX_LINES + 1} lines)"]


def test_no_function_is_longer_than_the_limit():
    found = []
    for path in sorted(PACKAGE.rglob("*.py")):
        rel = path.relative_to(PACKAGE.parent).as_posix()
        found += long_functions(path.read_text(encoding="utf-8"), rel)
    assert found == [], "split these functions:\n" + "\n".join(found)
