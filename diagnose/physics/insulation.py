"""Insulation resistance, coil to housing, and its value corrected to 40 degC.

* **failed**: the reading is below the minimum (1 megohm at 500 V DC,
  IEC 60204-1); the minimum applies to the reading as taken.
* **low**: passes the minimum, but the reading corrected to 40 degC is below
  the recommended value (default 5 megohm, the IEEE Std 43 recommendation
  for windings rated below 1 kV): moisture or ageing; dry and test again.
* **ok** otherwise. An over-range reading (OL, inf) is ok.

The correction halves the resistance for every 10 K of temperature rise
(``R40 = R_T * 0.5 ** ((40 - T) / 10)``). IEEE Std 43 gives it as
*guidance only*: real insulation follows it roughly, and only over a modest
range of temperature; a reading taken far from 40 degC is better repeated
near it.

References:
    IEC 60204-1:2016, 18.3 (insulation resistance test: 500 V DC, at least
    1 megohm).
    IEEE Std 43-2013, clause 6.4 and table 3 (from memory): temperature
    correction halving per 10 K; recommended minimum 5 megohm below 1 kV.
"""

from __future__ import annotations

from typing import Any, Mapping

from diagnose.physics import units
from diagnose.physics.inputs import read_inputs
from diagnose.physics.verdict import Verdict, make_figures, quantity_text

#: Test voltage IEC 60204-1 asks for, V.
IEC_TEST_VOLTS = 500.0


def corrected_to_40(megohms: float, temperature: float) -> float:
    """The reading at ``temperature`` (degC) corrected to 40 degC, halving per 10 K (guidance only).

    >>> corrected_to_40(200.0, 20.0)
    50.0
    """
    return megohms * 0.5 ** ((40.0 - temperature) / 10.0)


def evaluate_insulation(values: Mapping[str, Any]) -> Verdict:
    """Judge an insulation resistance reading, coil to housing.

    Inputs: ``megohms`` (OL/inf for over range), ``test_volts`` (default
    500 V), ``temperature`` of the winding (default 40 degC), ``minimum``
    (default 1 megohm), ``recommended`` (default 5 megohm at 40 degC).

    References:
        IEC 60204-1, 18.3; IEEE Std 43 (correction to 40 degC, guidance only).
    """
    v = read_inputs("insulation", values, positive=("test_volts", "minimum", "recommended"),
                    negative=("temperature",), open_ok=("megohms",))
    measured, temp = v["megohms"], v["temperature"]
    r40 = corrected_to_40(measured, temp)
    if units.below(measured, v["minimum"]):
        verdict = "failed"
    elif units.below(r40, v["recommended"]):
        verdict = "low"
    else:
        verdict = "ok"
    figures = make_figures((
        ("measured", f"measured at {temp:g} °C", measured, "Mohm"),
        ("corrected", "corrected to 40 °C (guidance)", r40, "Mohm"),
        ("minimum", "least acceptable (as measured)", v["minimum"], "Mohm"),
        ("recommended", "recommended at 40 °C", v["recommended"], "Mohm"),
        ("test_volts", "test voltage", v["test_volts"], "V"),
    ))
    shown = "over range" if measured == float("inf") else quantity_text(measured, "Mohm")
    summary = {
        "failed": f"{shown} is below the minimum of {quantity_text(v['minimum'], 'Mohm')}: "
                  "insulation failed",
        "low": f"{shown} at {temp:g} °C"
               + (f" is {quantity_text(r40, 'Mohm')} at 40 °C" if temp != 40 else "")
               + f", below the recommended {quantity_text(v['recommended'], 'Mohm')} at 40 °C: "
               "low (moisture or ageing)",
        "ok": f"{shown} at {temp:g} °C passes the minimum of "
              f"{quantity_text(v['minimum'], 'Mohm')}: ok",
    }[verdict]
    if v["test_volts"] != IEC_TEST_VOLTS:
        summary += (f" (tested at {quantity_text(v['test_volts'], 'V')}; IEC 60204-1 asks "
                    f"{quantity_text(IEC_TEST_VOLTS, 'V')})")
    return Verdict("insulation", verdict, figures, summary)
