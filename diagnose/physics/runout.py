"""Total indicator runout (TIR) from dial-indicator readings over one turn.

TIR is the largest minus the smallest reading. A round part turning with an
eccentricity ``e`` shows a TIR of ``2e``. Readings may be negative (an
indicator zeroed mid-travel). Figures are shown in the unit the readings
were typed in.

Typical limits (common practice): mounting-face perpendicularity
0.002-0.004 in TIR; pilot concentricity 0.006 in TIR (0.008 or 0.012 in on
larger units).

References:
    ASME Y14.5 (total runout, from memory); NIST SP 811: 1 in = 25.4 mm exactly.
"""

from __future__ import annotations

from typing import Any, Mapping, Sequence

from diagnose.physics import units
from diagnose.physics.inputs import read_inputs, typed_unit
from diagnose.physics.verdict import Verdict, make_figures, quantity_text


def total_indicator_runout(readings: Sequence[float]) -> float:
    """Largest minus smallest reading.

    >>> round(total_indicator_runout([0.000, 0.004, 0.007, 0.002]), 6)
    0.007
    """
    return max(readings) - min(readings)


def evaluate_runout(values: Mapping[str, Any]) -> Verdict:
    """Judge dial-indicator readings over one turn against a TIR limit.

    Inputs: ``readings`` (two or more, may be negative), ``limit``.

    References:
        ASME Y14.5 (from memory): total indicator runout.
    """
    v = read_inputs("runout", values, positive=("limit",), negative=("readings",),
                    at_least={"readings": 2})
    tir, limit = total_indicator_runout(v["readings"]), v["limit"]
    verdict = "out_of_tolerance" if units.above(tir, limit) else "ok"

    unit = typed_unit(values.get("readings"), "mm")
    rows: list[tuple[str, str, float | None, str]] = [
        ("tir", "total indicator runout", tir, "mm"),
        ("limit", "largest allowed", limit, "mm"),
        ("smallest_reading", "smallest reading", min(v["readings"]), "mm"),
        ("largest_reading", "largest reading", max(v["readings"]), "mm"),
    ]
    if unit != "mm":
        rows = [(key, label, units.convert(mm, "mm", unit), unit) for key, label, mm, _ in rows]
        rows.insert(1, ("tir_mm", "total indicator runout in mm", tir, "mm"))
    figures = make_figures(rows)
    tir_text = figures["tir"].text() + (f" ({quantity_text(tir, 'mm')})" if unit != "mm" else "")
    summary = (f"TIR {tir_text} against a limit of {figures['limit'].text()}: "
               + ("out of tolerance" if verdict != "ok" else "within tolerance"))
    return Verdict("runout", verdict, figures, summary)
