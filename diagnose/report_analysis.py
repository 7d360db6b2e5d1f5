"""The knowledge analysis as a Markdown or HTML report for trainers.

Renders ``PackAnalysis.to_dict()`` with the Jinja2 templates
``templates/analysis.md.j2`` and ``templates/analysis.html.j2`` (HTML with
autoescape on), so that the report says what ``--json`` says.
"""

from __future__ import annotations

import math
from functools import lru_cache
from pathlib import Path
from typing import Any

from diagnose.errors import InputError

FORMATS = ("md", "html")
_TEMPLATES = Path(__file__).parent / "templates"


def render_analysis(analysis: Any, fmt: str = "md") -> str:
    """The report text of a ``PackAnalysis`` (or of its ``to_dict()``) in ``fmt``.

    Raises:
        InputError: ``fmt`` is not "md" or "html".
    """
    if fmt not in FORMATS:
        raise InputError("--format", f"unknown report format {fmt!r}; use md or html")
    data = analysis if isinstance(analysis, dict) else analysis.to_dict()
    return _environment(fmt).get_template(f"analysis.{fmt}.j2").render(a=data)


def write_analysis(analysis: Any, path: str | Path, fmt: str | None = None, *,
                   force: bool = False) -> Path:
    """Write the report to ``path``; the format defaults to the file's suffix (.md, .html).

    Written as every file of the program is (a temporary file renamed into
    place; an existing file only with ``force``; never the journal or a path
    through a symbolic link).

    Raises:
        InputError: unknown format, or the file is refused or cannot be written.
    """
    from diagnose.paths import writable_target, write_text_atomically

    path = Path(path)
    if fmt is None:
        fmt = {".htm": "html", ".html": "html"}.get(path.suffix.lower(), "md")
    text = render_analysis(analysis, fmt)
    target = writable_target(path, force=force)
    write_text_atomically(target, text)
    return Path(target)


@lru_cache(maxsize=2)
def _environment(fmt: str) -> Any:
    from diagnose.text import templates

    return templates(str(_TEMPLATES), fmt, num=_num, pct=_pct, minutes=_minutes)


def _num(x: Any) -> str:
    """A probability or importance for people: four significant digits."""
    if x is None:
        return "inf"  # an infinite risk reduction worth is written null in the data
    x = float(x)
    if math.isinf(x):
        return "inf"
    return "0" if x == 0 else f"{x:.4g}"


def _pct(x: Any) -> str:
    return "n/a" if x is None else f"{100 * float(x):.0f}%"


def _minutes(x: Any) -> str:
    return "n/a" if x is None else f"{float(x):.1f}"

