"""Coil voltage at the terminals against the rated voltage and the allowed band.

Bands, as fractions of the rated voltage:

* DC from a converter (power supply) or rectified AC: 0.90 to 1.10;
* DC from a battery: 0.85 to 1.15;
* a window defined by the pack overrides both (permanent-magnet brakes
  release only in a narrow window: too much voltage re-engages them).

A reading below :data:`ABSENT_FRACTION` (10 %) of rated is **absent**: no
brake coil releases there, and such a reading is induced or leakage voltage
rather than supply. A negative reading is **reversed** only when
``polarity_known`` (the meter's + lead is on the coil's + terminal);
otherwise it is judged by its magnitude.

References:
    IEC 60204-1:2016, 4.3.3 "DC supplies" (from memory): converting
    equipment 0.9 to 1.1 of nominal, batteries 0.85 to 1.15 of nominal.
"""

from __future__ import annotations

from typing import Any, Mapping

from diagnose.physics.inputs import read_inputs, require
from diagnose.physics.units import above, below
from diagnose.physics.verdict import Verdict, make_figures, quantity_text

#: Allowed band per kind of source, as fractions of rated (IEC 60204-1, from memory).
BANDS: dict[str, tuple[float, float]] = {
    "converter": (0.90, 1.10),
    "rectified": (0.90, 1.10),
    "battery": (0.85, 1.15),
}
#: Below this fraction of rated the supply counts as absent.
ABSENT_FRACTION = 0.10


def supply_band(source: str, window_low: float | None = None,
                window_high: float | None = None) -> tuple[float, float]:
    """(low, high) fractions of rated allowed for ``source``; a pack window overrides.

    >>> supply_band("battery"), supply_band("converter", window_low=0.95)
    ((0.85, 1.15), (0.95, 1.1))
    """
    low, high = BANDS[source]
    return (window_low if window_low is not None else low,
            window_high if window_high is not None else high)


def judge_supply(rated: float, volts: float, band: tuple[float, float],
                 polarity_known: bool = False) -> str:
    """absent, reversed, low, ok or high for ``volts`` measured on a coil rated ``rated``.

    >>> judge_supply(24, 21.1, (0.9, 1.1)), judge_supply(24, -24, (0.9, 1.1), True)
    ('low', 'reversed')
    """
    ratio = abs(volts) / rated
    if ratio < ABSENT_FRACTION:
        return "absent"
    if volts < 0 and polarity_known:
        return "reversed"
    if below(ratio, band[0]):
        return "low"
    if above(ratio, band[1]):
        return "high"
    return "ok"


def _meaning(verdict: str, band: tuple[float, float], source: str, window: bool) -> str:
    allowed = f"allowed {band[0]:.0%} to {band[1]:.0%}" + (
        " (pack window)" if window else f" for a {source} supply")
    return {
        "absent": "no supply reaches the coil",
        "reversed": "polarity reversed",
        "low": f"low ({allowed})",
        "high": f"high ({allowed})",
        "ok": f"ok ({allowed})",
    }[verdict]


def evaluate_supply(values: Mapping[str, Any]) -> Verdict:
    """Judge the DC volts measured at the coil terminals with the coil energised.

    Inputs: ``rated_voltage``, ``volts`` (may be negative), ``source``
    (converter, battery, rectified), optional ``window_low`` / ``window_high``
    (fractions of rated, a pack-defined window), ``polarity_known``.

    Raises:
        InputError: a window outside 0..5 or with low above high.

    References:
        IEC 60204-1, 4.3.3 (from memory).
    """
    v = read_inputs("supply", values, positive=("rated_voltage",), negative=("volts",))
    for name in ("window_low", "window_high"):
        if v[name] is not None:
            require(0 < v[name] < 5, name, f"expected a fraction of rated such as 0.9 "
                                           f"(or 90 %), got {v[name]:g}")
    band = supply_band(v["source"], v["window_low"], v["window_high"])
    require(band[0] < band[1], "window_low",
            f"the window's low end {band[0]:g} is not below its high end {band[1]:g}")
    rated, volts = v["rated_voltage"], v["volts"]
    verdict = judge_supply(rated, volts, band, v["polarity_known"])
    window = v["window_low"] is not None or v["window_high"] is not None
    figures = make_figures((
        ("measured", "measured at the coil", volts, "V"),
        ("rated", "rated voltage", rated, "V"),
        ("ratio", "share of rated", abs(volts) / rated * 100, "%"),
        ("band_low", "lowest allowed", band[0] * rated, "V"),
        ("band_high", "highest allowed", band[1] * rated, "V"),
    ))
    summary = (f"{quantity_text(volts, 'V')} is {abs(volts) / rated:.0%} of rated "
               f"{quantity_text(rated, 'V')}: {_meaning(verdict, band, v['source'], window)}")
    return Verdict("supply", verdict, figures, summary)
