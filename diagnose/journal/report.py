"""The repair log of one session, as Markdown, one self-contained HTML file or JSON.

The content is the session's :class:`~diagnose.journal.record.Record`; the
Markdown and HTML come from the Jinja2 templates ``templates/report.md.j2``
and ``templates/report.html.j2``, never from string concatenation. The HTML
environment escapes every value (autoescape), so a note holding ``<script>``
is shown as text; the Markdown environment escapes the Markdown punctuation
of every value (:func:`diagnose.text.md`), so that a Markdown viewer shows it
as typed: no link, image, emphasis or HTML, and no broken table. Control
characters are shown as placeholders in all three. The output holds no time of its own making: the
same session gives the same report.
"""

from __future__ import annotations

from datetime import datetime
from functools import lru_cache
from pathlib import Path
from typing import Any

from diagnose.errors import InputError
from diagnose.journal import REPORT_FORMATS
from diagnose.journal.record import Record

FORMATS = REPORT_FORMATS
REPORT_FORMAT = 1  # version of the JSON layout
_TEMPLATES = Path(__file__).resolve().parent.parent / "templates"
DEFERENCE = ("This repair log records what was entered during the diagnosis; it does not "
             "certify the work. Local codes, the manufacturer's instructions and licensed "
             "practice take precedence over anything it says.")


def report_data(record: Record) -> dict[str, Any]:
    """The report as plain data: what ``--format json`` prints and the templates read."""
    data = record.to_dict()
    data["format"] = REPORT_FORMAT
    data["deference"] = DEFERENCE
    return data


def render_report(record: Record, fmt: str = "md") -> str:
    """The repair log of ``record`` in ``fmt`` (md, html or json).

    Raises:
        InputError: an unknown format.
    """
    if fmt not in FORMATS:
        raise InputError("--format", f"unknown report format {fmt!r}; use "
                                     f"{', '.join(FORMATS)}")
    data = report_data(record)
    if fmt == "json":
        from diagnose.text import json_text

        return json_text(data, indent=2) + "\n"
    text = _environment(fmt).get_template(f"report.{fmt}.j2").render(r=data)
    return text.rstrip("\n") + "\n"


# --- formatting helpers the templates use ---------------------------------------------------


def when(value: Any) -> str:
    """An ISO time as people read it: ``2025-01-14 09:01:05 UTC``.

    >>> when("2025-01-14T09:01:05+00:00"), when("2025-01-14T10:01:05+01:00"), when("soon")
    ('2025-01-14 09:01:05 UTC', '2025-01-14 10:01:05 +01:00', 'soon')
    """
    try:
        t = datetime.fromisoformat(str(value))
    except ValueError:
        return str(value)
    stamp = t.strftime("%Y-%m-%d %H:%M:%S")
    if t.tzinfo is None:
        return stamp
    offset = t.utcoffset()
    if offset is not None and offset.total_seconds() == 0:
        return f"{stamp} UTC"
    return f"{stamp} {t.isoformat()[-6:]}"


def number(value: Any) -> str:
    """A figure with four significant digits (as the screen shows it)."""
    from diagnose.physics.verdict import format_number

    try:
        return format_number(float(value))
    except (TypeError, ValueError):
        return str(value)


def percent(value: Any) -> str:
    """A probability as every face shows it (:func:`diagnose.text.percent`)."""
    from diagnose.text import percent as shown

    try:
        return shown(float(value))
    except (TypeError, ValueError):
        return str(value)


def minutes(value: Any) -> str:
    if value is None:
        return "not known"
    m = float(value)
    return f"{m:g} min" if m < 120 else f"{m:g} min ({m / 60:.1f} h)"


@lru_cache(maxsize=2)
def _environment(fmt: str) -> Any:
    from diagnose.physics.verdict import unit_text
    from diagnose.text import templates

    return templates(str(_TEMPLATES), fmt, when=when, number=number, percent=percent,
                     minutes=minutes, unit=unit_text)
