"""The result of an evaluator: a verdict and the figures behind it."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Iterable

#: Verdicts that mean "nothing wrong here"; the rest are shown as findings.
GOOD_VERDICTS = frozenset({"ok", "matches", "releases", "within_rating", "off"})


def format_number(value: float) -> str:
    """A number for people: four significant digits, no exponent for everyday sizes.

    >>> format_number(31.0637), format_number(28.8), format_number(0.007), format_number(207.07)
    ('31.06', '28.8', '0.007', '207.1')
    """
    if value == 0 or not math.isfinite(value):
        return "0" if value == 0 else ("inf" if value > 0 else "-inf")
    if 1e-4 <= abs(value) < 1e4:
        return f"{value:.4g}"
    if abs(value) >= 1e4 and abs(value) < 1e9:
        return f"{value:,.0f}"
    return f"{value:.3e}"


def unit_text(text: str) -> str:
    """A unit (or a value with its unit) as people write it: the one place that says how.

    >>> unit_text("0.5 mm**2"), unit_text("10 N*m"), unit_text("20 degC"), unit_text("J/(kg*K)")
    ('0.5 mm²', '10 N·m', '20 °C', 'J/(kg·K)')
    """
    return (str(text).replace("**2", "²").replace("**3", "³").replace("*", "·")
            .replace("degC", "°C").replace("degF", "°F"))


def quantity_text(value: float, unit: str = "", units: str = "metric") -> str:
    """A number and its unit for a sentence: ``quantity_text(31.06, "ohm") == "31.06 ohm"``.

    ``units`` is the technician's preference (``"metric"`` or ``"inch"``); under
    ``"inch"`` a small length is shown in inches with millimetres beside it
    (:func:`preferred_figure`). Metric text is the same as without it.

    >>> quantity_text(0.5, "mm**2"), quantity_text(12, "%"), quantity_text(0.4572, "mm", "inch")
    ('0.5 mm²', '12%', '0.018 in (0.46 mm)')
    """
    beside = ""
    if units != "metric":
        value, unit, beside = preferred_figure(value, unit, units)
    number = format_number(value)
    if not unit:
        return number
    shown = unit_text(unit)
    text = f"{number}{shown}" if shown in ("%", "°") else f"{number} {shown}"
    return f"{text} ({beside})" if beside else text


#: The largest unit of length, in mm, whose figures are shown in inches under the inch
#: preference: mm, µm, in, thou (gaps, runouts, wear); a cable run in metres stays in metres.
SMALL_LENGTH_MM = 25.4


def preferred_figure(value: float, unit: str, units: str = "metric") -> tuple[float, str, str]:
    """``(value, unit, beside)``: a figure in the preferred unit, and its metric text beside it.

    Under ``"inch"`` a length in a unit of at most an inch (mm, µm, in, thou)
    is given in inches, with the millimetres beside it ("0.46 mm": to a hundredth
    of a millimetre, two significant digits below 0.1 mm); everything else,
    and everything under ``"metric"``, comes back as it was with ``beside`` "".

    References:
        NIST SP 811 (2008), appendix B: 1 in = 25.4 mm exactly.

    >>> preferred_figure(0.4572, "mm", "inch")
    (0.018, 'in', '0.46 mm')
    >>> preferred_figure(0.4572, "mm"), preferred_figure(24.0, "V", "inch")
    ((0.4572, 'mm', ''), (24.0, 'V', ''))
    """
    if units != "inch" or not unit or not math.isfinite(value):
        return value, unit, ""
    from diagnose.physics import units as u

    if not u.fits(unit, "mm") or u.above(u.convert(1.0, unit, "mm"), SMALL_LENGTH_MM):
        return value, unit, ""
    mm = u.convert(value, unit, "mm")
    inches = float(f"{u.convert(mm, 'mm', 'in'):.6g}") + 0.0
    return inches, "in", f"{_mm_text(mm)} mm"


def preferred_rows(rows: Iterable[tuple[str, str, Any, str]], units: str = "metric"
                   ) -> list[tuple[str, Any, str, str]]:
    """``(label, value, unit, beside)`` for figures given as ``(key, label, value, unit)``.

    Under ``"metric"`` the figures as they are (``beside`` ""). Under ``"inch"``
    each length is given by :func:`preferred_figure`, and a figure keyed
    ``X_mm`` that only repeats figure ``X`` in millimetres is left out (its
    value is the one beside ``X`` now). A value that is not a number stays as
    it is.

    >>> preferred_rows([("tir", "runout", 0.007, "in"), ("tir_mm", "in mm", 0.1778, "mm"),
    ...                 ("used", "share", 12.5, "%")], "inch")
    [('runout', 0.007, 'in', '0.18 mm'), ('share', 12.5, '%', '')]
    >>> preferred_rows([("tir", "runout", 0.1778, "mm")])
    [('runout', 0.1778, 'mm', '')]
    """
    rows = list(rows)
    keys = {row[0] for row in rows}
    out: list[tuple[str, Any, str, str]] = []
    for key, label, value, unit in rows:
        if units != "metric" and isinstance(key, str) and key.endswith("_mm") \
                and key[:-3] in keys:
            continue
        number = _finite(value) if units != "metric" and isinstance(unit, str) else None
        if number is None:
            out.append((label, value, unit, ""))
        else:
            out.append((label, *preferred_figure(number, unit, units)))
    return out


def _finite(value: Any) -> float | None:
    """``value`` as a finite float, or None: not a number (a bool is none), too large, NaN."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    try:
        number = float(value)
    except OverflowError:
        return None
    return number if math.isfinite(number) else None


def _mm_text(mm: float) -> str:
    """Millimetres beside an inch figure: 0.46, 12.7, 0.051."""
    if abs(mm) >= 0.1:
        return f"{mm:.2f}".rstrip("0").rstrip(".")
    return format_number(float(f"{mm:.2g}"))


def make_figures(rows: Iterable[tuple[str, str, float | None, str]]) -> dict[str, Figure]:
    """Figures from ``(key, label, value, unit)`` rows, in order.

    Rows whose value is None or not finite are left out (JSON has no infinity);
    values are rounded to 6 significant digits so that 0.1778 mm shown in
    inches reads 0.007 and not 0.007000000000000001.
    """
    out: dict[str, Figure] = {}
    for key, label, value, unit in rows:
        if value is None or not math.isfinite(value):
            continue
        out[key] = Figure(label, float(f"{value:.6g}") + 0.0, unit)
    return out


@dataclass(frozen=True)
class Figure:
    """One computed or measured number with its unit and a label for people."""

    label: str
    value: float
    unit: str = ""

    def to_dict(self) -> dict[str, Any]:
        return {"label": self.label, "value": self.value, "unit": self.unit}

    def text(self, units: str = "metric") -> str:
        """The value and unit as a person reads them: "31.06 ohm" (``units``: the preference)."""
        return quantity_text(self.value, self.unit, units)


@dataclass(frozen=True)
class Verdict:
    """What a reading means: ``verdict`` is one of the evaluator's verdict names.

    ``figures`` keeps insertion order (the order they are shown in);
    ``summary`` is one plain sentence for the screen and the repair log.
    ``weights`` is filled only for soft evidence near a band edge: verdict
    name -> weight, summing to 1. ``fallback`` is the plain verdict when
    ``verdict`` is a signature (a sharper verdict, see
    :class:`~diagnose.physics.registry.Signature`), and "" otherwise.
    ``unjudged`` names the signatures that this reading could be but that the
    inputs given could not tell (no AC volts known, no supply voltage known):
    the plain verdict stands for "this, or one of those".
    """

    evaluator: str
    verdict: str
    figures: dict[str, Figure] = field(default_factory=dict)
    summary: str = ""
    weights: dict[str, float] = field(default_factory=dict)
    fallback: str = ""
    unjudged: tuple[str, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        out: dict[str, Any] = {
            "evaluator": self.evaluator,
            "verdict": self.verdict,
            "figures": {k: f.to_dict() for k, f in self.figures.items()},
            "summary": self.summary,
        }
        if self.weights:
            out["weights"] = dict(self.weights)
        if self.unjudged:
            out["unjudged"] = list(self.unjudged)
        if self.fallback:
            out["fallback"] = self.fallback
        return out

    @property
    def label(self) -> str:
        """The verdict name for people: "too_much_drop" -> "too much drop"."""
        return self.verdict.replace("_", " ")
