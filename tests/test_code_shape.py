"""The shape of the code in ``diagnose/``: short functions with few positional parameters.

A function's length is counted from its ``def`` line to the last line of its
body (decorators excluded). Positional parameters are the positional-only and
ordinary ones, without a leading ``self`` or ``cls``; keyword-only parameters
(after ``*``) and ``*args``/``**kwargs`` do not count.
"""

from __future__ import annotations

import ast
from collections.abc import Callable
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parent.parent / "diagnose"
MAX_LINES = 80
MAX_POSITIONAL = 6

Function = ast.FunctionDef | ast.AsyncFunctionDef


def _functions(path: Path) -> list[Function]:
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    return [n for n in ast.walk(tree) if isinstance(n, (ast.FunctionDef, ast.AsyncFunctionDef))]


def _length(fn: Function) -> int:
    """Lines from ``def`` to the end of the body, decorators excluded."""
    return (fn.end_lineno or fn.lineno) - fn.lineno + 1


def _positional(fn: Function) -> int:
    """Positional parameters, not counting a leading ``self`` or ``cls``."""
    names = [a.arg for a in fn.args.posonlyargs + fn.args.args]
    if names and names[0] in ("self", "cls"):
        names = names[1:]
    return len(names)


def _offenders(root: Path, measure: Callable[[Function], int], limit: int) -> list[str]:
    """``file:line name value`` of every function in ``root`` whose measure exceeds ``limit``."""
    out = []
    for path in sorted(root.rglob("*.py")):
        for fn in _functions(path):
            value = measure(fn)
            if value > limit:
                out.append(f"{path.relative_to(root.parent)}:{fn.lineno} {fn.name} {value}")
    return out


def test_the_package_is_there():
    assert len(list(PACKAGE.rglob("*.py"))) > 10


def test_no_function_is_longer_than_80_lines():
    long = _offenders(PACKAGE, _length, MAX_LINES)
    assert not long, (f"functions longer than {MAX_LINES} lines (file:line name lines); "
                      "split them:\n  " + "\n  ".join(long))


def test_no_function_takes_more_than_6_positional_parameters():
    many = _offenders(PACKAGE, _positional, MAX_POSITIONAL)
    assert not many, (f"functions with more than {MAX_POSITIONAL} positional parameters "
                      "(file:line name count); make some keyword-only (after *) or group "
                      "them:\n  " + "\n  ".join(many))


@pytest.mark.parametrize("source,lines,positional", [
    ("def f(a, b):\n    return a\n", 2, 2),
    ("class C:\n    def m(self, a, /, b, *, c, d):\n        pass\n", 2, 2),
    ("class C:\n    @classmethod\n    def m(cls, *args, **kw):\n        pass\n", 2, 0),
    ("async def f(a, b, c, d, e, f, g):\n" + "    x = 1\n" * 80, 81, 7),
])
def test_the_measures(source, lines, positional):
    fn = next(n for n in ast.walk(ast.parse(source))
              if isinstance(n, (ast.FunctionDef, ast.AsyncFunctionDef)))
    assert (_length(fn), _positional(fn)) == (lines, positional)


def test_an_offender_is_reported_with_file_line_name_and_size(tmp_path):
    pkg = tmp_path / "pkg"
    pkg.mkdir()
    (pkg / "long.py").write_text("\n\ndef too_long(a, b, c, d, e, f, g):\n"
                                 + "    x = 1\n" * 80, encoding="utf-8")
    assert _offenders(pkg, _length, MAX_LINES) == ["pkg/long.py:3 too_long 81"]
    assert _offenders(pkg, _positional, MAX_POSITIONAL) == ["pkg/long.py:3 too_long 7"]
