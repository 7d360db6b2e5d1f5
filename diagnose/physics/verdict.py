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


def quantity_text(value: float, unit: str = "") -> str:
    """A number and its unit for a sentence: ``quantity_text(31.06, "ohm") == "31.06 ohm"``.

    >>> quantity_text(0.5, "mm**2"), quantity_text(12, "%")
    ('0.5 mm²', '12%')
    """
    number = format_number(value)
    if not unit:
        return number
    shown = unit_text(unit)
    return f"{number}{shown}" if shown in ("%", "°") else f"{number} {shown}"


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

    def text(self) -> str:
        """The value and unit as a person reads them: "31.06 ohm"."""
        return quantity_text(self.value, self.unit)


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
