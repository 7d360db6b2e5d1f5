"""Coil resistance against the nameplate: open, short, shorted turns, ok, high.

The expected resistance at 20 degC is ``V**2 / P`` (or the rated resistance),
corrected to the coil temperature with annealed copper's 0.00393 /K. The
reading is then judged against that:

* **open**: an open reading (OL, inf) or more than :data:`OPEN_RATIO` (10)
  times the expected resistance. No hot winding reaches ten times its cold
  resistance, so such a reading is a broken wire, a burnt lead or a loose
  terminal rather than a wrong coil.
* **short**: below :data:`SHORT_RATIO` (10 %) of the expected resistance:
  the leads touch or most of the winding is bridged.
* **low**: below ``1 - tolerance`` of expected: shorted turns.
* **high**: above ``1 + tolerance`` of expected: a coil for a higher voltage,
  a poor connection, or a coil hotter than stated.
* **ok**: in between.

References:
    IEC 60028: annealed copper, alpha = 0.00393 /K at 20 degC.
    IEC 60034-1 (from memory): the resistance method for winding temperature.
"""

from __future__ import annotations

import math
from typing import Any, Mapping

from diagnose.physics.copper import resistance_at, winding_temperature
from diagnose.physics.inputs import read_inputs, require
from diagnose.physics.units import above, below
from diagnose.physics.verdict import Verdict, make_figures, quantity_text

#: Above this multiple of the expected resistance a reading counts as open.
OPEN_RATIO = 10.0
#: Below this share of the expected resistance a reading counts as a short.
SHORT_RATIO = 0.10


def judge_coil(measured: float, expected: float, tolerance: float) -> str:
    """The coil verdict for ``measured`` ohms against ``expected`` ohms at the same temperature.

    >>> judge_coil(31.1, 31.06, 0.1), judge_coil(0.4, 31.06, 0.1), judge_coil(math.inf, 31.06, 0.1)
    ('ok', 'short', 'open')
    """
    ratio = measured / expected
    if ratio > OPEN_RATIO:
        return "open"
    if ratio < SHORT_RATIO:
        return "short"
    if below(ratio, 1 - tolerance):
        return "low"
    if above(ratio, 1 + tolerance):
        return "high"
    return "ok"


_MEANING = {
    "open": "the winding or a lead is broken",
    "short": "the coil or its leads are shorted",
    "low": "shorted turns",
    "high": "higher than the nameplate: a coil for another voltage, a poor connection "
            "or a hotter coil than stated",
    "ok": "within tolerance",
}


def evaluate_coil(values: Mapping[str, Any]) -> Verdict:
    """Judge a coil resistance reading against the nameplate.

    Inputs (see the registry): ``rated_voltage``, ``rated_power`` or
    ``rated_resistance``, ``ohms`` (OL/inf for open), ``temperature`` (default
    20 degC), ``tolerance`` (default 0.10), optional ``reference_ohms`` and
    ``reference_temperature`` for the winding temperature by the resistance
    method (information; the verdict uses the stated temperature).

    Returns a Verdict with figures: expected resistance at 20 degC and at the
    coil temperature, measured, deviation, current and power at rated
    voltage (expected and with the measured resistance), winding temperature.

    Raises:
        InputError: neither rated power nor rated resistance; a tolerance
            outside 0..1; a negative or malformed reading.

    References:
        IEC 60028 (annealed copper); IEC 60034-1 (resistance method, 235).
    """
    v = read_inputs("coil", values,
                    positive=("rated_voltage", "rated_power", "rated_resistance", "reference_ohms"),
                    negative=("temperature", "reference_temperature"), open_ok=("ohms",))
    require(v["rated_power"] is not None or v["rated_resistance"] is not None, "rated_power",
            "give the rated power (or the rated resistance) to know the expected resistance")
    require(0 < v["tolerance"] < 1, "tolerance",
            f"expected a fraction between 0 and 1 such as 0.1, got {v['tolerance']:g}")
    volts, temp, measured = v["rated_voltage"], v["temperature"], v["ohms"]
    r20 = v["rated_resistance"]
    if r20 is None:
        r20 = volts**2 / v["rated_power"]
    expected = resistance_at(r20, temp)
    require(expected > 0, "temperature", f"{temp:g} degC is far below any working coil temperature")
    verdict = judge_coil(measured, expected, v["tolerance"])

    theta = None
    if v["reference_ohms"] is not None and math.isfinite(measured):
        theta = winding_temperature(measured, v["reference_ohms"], v["reference_temperature"])
    finite = math.isfinite(measured) and measured > 0
    figures = make_figures((
        ("expected_20", "expected resistance at 20 °C", r20, "ohm"),
        ("expected", f"expected resistance at {temp:g} °C", expected, "ohm"),
        ("measured", "measured resistance", measured, "ohm"),
        ("deviation", "deviation from expected", (measured / expected - 1) * 100, "%"),
        ("expected_current", "expected current at rated voltage", volts / expected, "A"),
        ("current", "current at rated voltage, measured resistance",
         volts / measured if finite else (0.0 if math.isinf(measured) else None), "A"),
        ("power", "power at rated voltage, measured resistance",
         volts**2 / measured if finite else (0.0 if math.isinf(measured) else None), "W"),
        ("winding_temperature", "winding temperature by the resistance method", theta, "°C"),
    ))
    shown = "open (OL)" if math.isinf(measured) else quantity_text(measured, "ohm")
    summary = (f"expected {quantity_text(expected, 'ohm')} at {temp:g} °C, "
               f"measured {shown}: {_MEANING[verdict]}")
    return Verdict("coil", verdict, figures, summary)
