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

The Markdown and HTML logs are a document a customer can sign: page one (the
outcome, the unit, the complaint, the finding, the work done, the parts
fitted, the time, and the signature lines), then the readings that decided
it, the cautions (once each, with the cards they applied to), the
attachments, and an appendix with the full step-by-step record. The HTML
appendix is a ``<details>`` element, open in the file itself so that every
way of printing it (a browser without scripts included) prints it whole; a
small inline script, allowed by the file's content security policy by its
hash and by nothing else, folds it on screen and opens it again before
printing.
"""

from __future__ import annotations

import base64
import hashlib
import re
from collections.abc import Iterable, Mapping
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
#: The outcome of a session in words, by the result of its end (None: still open).
OUTCOMES = {"resolved": "Cured", "visit": "Site visit recommended", "escalated": "Escalated",
            "abandoned": "Abandoned", None: "Open"}
#: Attachments the HTML log shows as thumbnails (what the attachment store recognises).
IMAGE_TYPES = ("image/png", "image/jpeg", "image/gif", "image/webp")
#: The HTML log's only script: the appendix folded on screen, opened to print.
PRINT_SCRIPT = (
    '(function () {\n'
    '  var d = document.getElementById("appendix"), was = null;\n'
    '  if (!d || !("open" in d)) return;\n'
    '  d.open = false;\n'
    '  function show() { if (was === null) { was = d.open; d.open = true; } }\n'
    '  function back() { if (was !== null) { d.open = was; was = null; } }\n'
    '  addEventListener("beforeprint", show);\n'
    '  addEventListener("afterprint", back);\n'
    '})();')
_SHA256 = re.compile(r"[0-9a-f]{64}")
_IDENTITY_FIRST = ("site", "machine", "axis", "serial")


def report_data(record: Record) -> dict[str, Any]:
    """The report as plain data: what ``--format json`` prints and the templates read."""
    data = record.to_dict()
    data["format"] = REPORT_FORMAT
    data["deference"] = DEFERENCE
    return data


def render_report(record: Record, fmt: str = "md", *,
                  attachments_dir: str | Path | None = None, units: str = "metric") -> str:
    """The repair log of ``record`` in ``fmt`` (md, html or json).

    ``attachments_dir``: the journal's attachment store (``attachments`` beside
    the journal), where each attached file is kept under its SHA-256. The
    HTML log embeds the images found there as thumbnails; a file that is
    missing (or no longer matches its digest) is a line saying so.

    ``units``: the technician's preference ("metric" or "inch"). Under "inch"
    the Markdown and HTML logs show the readings' lengths in inches with the
    millimetres beside them ("0.018 in (0.46 mm)"); the JSON is data and
    keeps every figure as it was recorded.

    Raises:
        InputError: an unknown format or preference.
    """
    from diagnose.physics.units import PREFERENCES

    if fmt not in FORMATS:
        raise InputError("--format", f"unknown report format {fmt!r}; use "
                                     f"{', '.join(FORMATS)}")
    if units not in PREFERENCES:
        raise InputError("--units", f"unknown units {units!r}; use {', '.join(PREFERENCES)}")
    data = report_data(record)
    if fmt == "json":
        from diagnose.text import json_text

        return json_text(data, indent=2) + "\n"
    doc = document(data, attachments_dir, embed=fmt == "html", units=units)
    text = _environment(fmt).get_template(f"report.{fmt}.j2").render(r=data, d=doc)
    return text.rstrip("\n") + "\n"


# --- what the document shows beside the record ----------------------------------------------


def document(data: Mapping[str, Any], attachments_dir: str | Path | None = None, *,
             embed: bool = False, units: str = "metric") -> dict[str, Any]:
    """What the Markdown and HTML logs show beside the report's data ``data``.

    The outcome in words, the unit's identity (site, machine, axis, serial
    first), the figures of each step in the preferred ``units`` (by step
    number, see :func:`shown_figures`), the parts fitted over every repair,
    the cautions once each, the attachments (with their files read from
    ``attachments_dir`` and, with ``embed``, images as ``data:`` URIs) and,
    for the HTML log, its script and content security policy.
    """
    from markupsafe import Markup

    identity = dict(data.get("identity") or {})
    ordered = [(k, identity.pop(k)) for k in _IDENTITY_FIRST if k in identity]
    digest = base64.b64encode(hashlib.sha256(PRINT_SCRIPT.encode()).digest()).decode()
    return {
        "outcome": OUTCOMES.get(data.get("result"), str(data.get("result") or "Open")),
        "identity": ordered + sorted(identity.items()),
        "figures": {s["n"]: shown_figures(s.get("figures", ()), units)
                    for s in data.get("steps", ())},
        "parts": [{**p, "repair": s["title"]} for s in data.get("steps", ())
                  if s["kind"] == "repair" for p in s.get("parts", ())],
        "cautions": cautions_once(data.get("cautions", ())),
        "attachments": [_attachment(a, attachments_dir, embed)
                        for a in data.get("attachments", ())],
        "script": Markup(PRINT_SCRIPT),
        "policy": ("default-src 'none'; img-src data:; style-src 'unsafe-inline'; "
                   f"script-src 'sha256-{digest}'; base-uri 'none'; form-action 'none'"),
    }


def shown_figures(figures: Iterable[Mapping[str, Any]], units: str = "metric"
                  ) -> list[dict[str, Any]]:
    """A step's figures as the log shows them: label, value, unit, and the metric ``beside``.

    Under "metric" the figures as recorded (``beside`` ""); under "inch" a
    length in inches with its millimetres beside it
    (:func:`diagnose.physics.verdict.preferred_rows`).

    >>> shown_figures([{"key": "mean", "label": "mean gap", "value": 0.018, "unit": "in"}],
    ...               "inch")
    [{'label': 'mean gap', 'value': 0.018, 'unit': 'in', 'beside': '0.46 mm'}]
    """
    from diagnose.physics.verdict import preferred_rows

    rows = preferred_rows(((f.get("key"), f.get("label"), f.get("value"), f.get("unit"))
                           for f in figures), units)
    return [{"label": label, "value": value, "unit": unit, "beside": beside}
            for label, value, unit, beside in rows]


def cautions_once(cautions: Iterable[Mapping[str, Any]]) -> list[dict[str, Any]]:
    """The cautions acknowledged, once each (in the order first met), with the cards they were on.

    >>> once = cautions_once([
    ...     {"id": "lockout", "level": "DANGER", "text": "Isolate.", "time": "t1", "who": "Ana",
    ...      "item": "fuse_state", "item_title": "Look at the fuse"},
    ...     {"id": "lockout", "level": "DANGER", "text": "Isolate.", "time": "t2", "who": "Ana",
    ...      "item": "replace_coil", "item_title": "Replace the coil"},
    ...     {"id": "lockout", "level": "DANGER", "text": "Isolate.", "time": "t3", "who": "Ana",
    ...      "item": "fuse_state", "item_title": "Look at the fuse"}])
    >>> [(c["id"], c["cards"], c["times"]) for c in once]
    [('lockout', ['Look at the fuse', 'Replace the coil'], 3)]
    """
    groups: dict[str, dict[str, Any]] = {}
    for c in cautions:
        group = groups.setdefault(str(c["id"]), {
            "id": c["id"], "level": c.get("level") or "", "text": c.get("text") or "",
            "first": c.get("time"), "who": c.get("who"), "cards": [], "times": 0})
        group["times"] += 1
        card = c.get("item_title") or c.get("item")
        if card and card not in group["cards"]:
            group["cards"].append(card)
    return list(groups.values())


def _attachment(a: Mapping[str, Any], folder: str | Path | None, embed: bool) -> dict[str, Any]:
    """One attachment as the log shows it: where it is kept, whether its file is at hand."""
    sha = str(a.get("sha256", ""))
    kind = str(a.get("media_type", ""))
    data = _stored(folder, sha)
    image = kind in IMAGE_TYPES
    uri = f"data:{kind};base64,{base64.b64encode(data).decode('ascii')}" \
        if embed and image and data is not None else None
    return {**a, "path": f"attachments/{sha}" if _SHA256.fullmatch(sha) else "",
            "present": data is not None, "image": image, "uri": uri}


def _stored(folder: str | Path | None, sha256: str) -> bytes | None:
    """The bytes kept under ``sha256`` in ``folder``, or None: no folder, no file, or altered."""
    if folder is None or not _SHA256.fullmatch(sha256):
        return None
    try:
        data = (Path(folder) / sha256).read_bytes()
    except OSError:
        return None
    return data if hashlib.sha256(data).hexdigest() == sha256 else None


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
    return t.strftime("%Y-%m-%d %H:%M:%S") + _zone(t)


def span(start: Any, end: Any) -> str:
    """From the first entry to the last, in local time with its offset (as :func:`when`).

    >>> span("2025-01-14T09:00:00+01:00", "2025-01-14T10:05:30+01:00")
    '2025-01-14 09:00 to 10:05 +01:00'
    >>> span("2025-01-14T22:00:00+00:00", "2025-01-15T01:00:00+00:00")
    '2025-01-14 22:00 UTC to 2025-01-15 01:00 UTC'
    >>> span("", "")
    'not known'
    """
    try:
        t0, t1 = datetime.fromisoformat(str(start)), datetime.fromisoformat(str(end))
    except ValueError:
        return when(start) if start else "not known"
    if t0.date() == t1.date() and t0.utcoffset() == t1.utcoffset():
        return f"{t0:%Y-%m-%d %H:%M} to {t1:%H:%M}{_zone(t1)}"
    return f"{t0:%Y-%m-%d %H:%M}{_zone(t0)} to {t1:%Y-%m-%d %H:%M}{_zone(t1)}"


def _zone(t: datetime) -> str:
    """The offset of ``t`` as :func:`when` writes it (" UTC", " +01:00"; nothing if naive)."""
    offset = t.utcoffset()
    if offset is None:
        return ""
    return " UTC" if offset.total_seconds() == 0 else f" {t.isoformat()[-6:]}"


def likelihood(p: Any) -> str:
    """How likely a cause is, in words, with the figure: "likely (62%)".

    >>> likelihood(0.95), likelihood(0.62), likelihood(0.3), likelihood(0.12), likelihood(0.01)
    ('almost certain (95%)', 'likely (62%)', 'possible (30%)', 'less likely (12%)', 'unlikely (1%)')
    """
    try:
        p = float(p)
    except (TypeError, ValueError):
        return str(p)
    words = next(w for bound, w in ((0.9, "almost certain"), (0.6, "likely"), (0.25, "possible"),
                                    (0.1, "less likely"), (-1.0, "unlikely")) if p >= bound)
    return f"{words} ({percent(p)})"


def size(value: Any) -> str:
    """A file size as people read it.

    >>> size(512), size(34_000), size(2_400_000)
    ('512 bytes', '34 kB', '2.4 MB')
    """
    try:
        n = int(value)
    except (TypeError, ValueError):
        return str(value)
    if n < 1000:
        return f"{n} bytes"
    return f"{n / 1000:.0f} kB" if n < 1_000_000 else f"{n / 1_000_000:.1f} MB"


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
                     minutes=minutes, unit=unit_text, span=span, likelihood=likelihood,
                     size=size)
