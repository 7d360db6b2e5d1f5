"""Air gap from feeler-gauge readings around the circumference.

At least three readings, evenly spread around the armature. Verdicts, in
this order:

* **worn**: the mean gap is above the largest allowed (``max``, the wear
  limit): the lining has worn and the coil may no longer pull the armature in;
* **too_small**: the mean gap is below the smallest allowed (``min``); with
  no ``min`` given, below half the nominal gap (this tool's assumption, not
  a maker's figure): the brake may drag while released;
* **uneven**: the readings differ by more than ``spread`` (default 0.5 mm,
  common practice): a tilted armature, a bent flange or dirt under a foot.
  A single point just past a limit while the mean is inside is not uneven
  (three readings at 0.49, 0.50 and 0.51 mm are an even gap at its limit);
  give a tighter ``spread`` where the maker allows less;
* **ok** otherwise.

Figures are shown in the unit the readings were typed in (mm or in).

References:
    Common practice of brake makers' manuals: measure the gap at three
    points 120 degrees apart; readings agree within 0.5 mm.
"""

from __future__ import annotations

from typing import Any, Mapping

from diagnose.physics import units
from diagnose.physics.inputs import read_inputs, require, typed_unit
from diagnose.physics.verdict import Verdict, make_figures, quantity_text

#: Without a given minimum, the smallest allowed gap as a share of nominal (assumption).
DEFAULT_MIN_SHARE = 0.5


def judge_gap(readings: list[float], nominal: float, smallest: float | None, largest: float,
              spread: float) -> str:
    """ok, too_small, worn or uneven for ``readings`` (all in one unit).

    >>> judge_gap([0.62, 0.65, 0.60], 0.25, None, 0.5, 0.5)
    'worn'
    """
    least = smallest if smallest is not None else DEFAULT_MIN_SHARE * nominal
    mean = sum(readings) / len(readings)
    if units.above(mean, largest):
        return "worn"
    if units.below(mean, least):
        return "too_small"
    if units.above(max(readings) - min(readings), spread):
        return "uneven"
    return "ok"


_MEANING = {
    "ok": "within limits",
    "worn": "worn: the gap is beyond the wear limit",
    "too_small": "too small: the faces may touch and drag while the armature is pulled in",
    "uneven": "uneven: the readings differ too much around the circumference",
}


def evaluate_gap(values: Mapping[str, Any]) -> Verdict:
    """Judge an air gap measured at three or more points.

    Inputs: ``readings`` (three or more), ``nominal``, optional ``min``,
    ``max`` (wear limit), ``spread`` (default 0.5 mm).

    Raises:
        InputError: fewer than three readings; max not above nominal; min not
            below nominal.

    References:
        Brake makers' manuals (common practice): three-point feeler check.
    """
    v = read_inputs("gap", values, positive=("nominal", "max", "spread"),
                    at_least={"readings": 3})
    nominal, largest, smallest = v["nominal"], v["max"], v["min"]
    require(largest > nominal, "max", "the largest allowed gap must be above the nominal gap")
    require(smallest is None or smallest < nominal, "min",
            "the smallest allowed gap must be below the nominal gap")
    readings = v["readings"]
    verdict = judge_gap(readings, nominal, smallest, largest, v["spread"])
    mean = sum(readings) / len(readings)
    used = max(0.0, (mean - nominal) / (largest - nominal))

    unit = typed_unit(values.get("readings"), "mm")
    shown = (lambda mm: units.convert(mm, "mm", unit)) if unit != "mm" else (lambda mm: mm)
    least = smallest if smallest is not None else DEFAULT_MIN_SHARE * nominal
    figures = make_figures((
        ("mean", "mean gap", shown(mean), unit),
        ("smallest_reading", "smallest reading", shown(min(readings)), unit),
        ("largest_reading", "largest reading", shown(max(readings)), unit),
        ("spread", "spread (largest minus smallest)", shown(max(readings) - min(readings)), unit),
        ("nominal", "nominal gap", shown(nominal), unit),
        ("min", "smallest allowed" + ("" if smallest is not None else " (half nominal)"),
         shown(least), unit),
        ("max", "largest allowed (wear limit)", shown(largest), unit),
        ("wear_used", "share of the wear reserve used", used * 100, "%"),
    ))
    summary = (f"mean gap {quantity_text(shown(mean), unit)} (nominal "
               f"{quantity_text(shown(nominal), unit)}, limit {quantity_text(shown(largest), unit)}"
               f", spread {quantity_text(shown(max(readings) - min(readings)), unit)}): "
               f"{_MEANING[verdict]}")
    return Verdict("gap", verdict, figures, summary)
