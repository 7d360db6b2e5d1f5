"""Rectifier DC output against its AC supply: which pattern does the reading match?

With ideal diodes the mean DC output is ``sqrt(2)/pi * Vrms`` (0.4502)
for a half-wave rectifier and ``2*sqrt(2)/pi * Vrms`` (0.9003) for a bridge;
the same holds for an inductive coil load with a freewheeling path, which is
how brake rectifiers are built. A reading is compared with the patterns a
fault or a mix-up produces, each within :data:`PATTERN_TOLERANCE` (15 %,
for diode drops and meters that do not average pulsating DC well):

* **matches**: about the expected mean for the type fitted;
* **half_wave**: a bridge is fitted but the reading is half its output
  (an open diode in the bridge, or a half-wave unit fitted by mistake);
* **full_wave**: a half-wave unit is fitted but the reading is twice its
  output (a bridge fitted by mistake; the coil is over-driven);
* **no_output**: below :data:`NO_OUTPUT_FRACTION` (5 %) of expected;
* **failed_diode**: well below expected and fitting neither pattern.

A reading above the expected mean that fits no pattern counts as
**matches** on a bridge (a smoothing capacitor or an unloaded output can lift
the mean towards the peak) and as **full_wave** on a half-wave unit when it
is nearer twice the expected value than once (in ratio).

References:
    Rashid, Power Electronics (any edition), chapter on diode rectifiers:
    mean output of single-phase half-wave and bridge rectifiers (textbook).
"""

from __future__ import annotations

import math
from typing import Any, Mapping

from diagnose.physics.inputs import read_inputs
from diagnose.physics.verdict import Verdict, make_figures, quantity_text

#: Mean DC output per volt rms, ideal diodes (textbook).
MEAN_PER_VRMS = {"half-wave": math.sqrt(2) / math.pi, "bridge": 2 * math.sqrt(2) / math.pi}
#: A reading fits a pattern when within this share of it.
PATTERN_TOLERANCE = 0.15
#: Below this share of the expected mean the rectifier gives no output.
NO_OUTPUT_FRACTION = 0.05


def expected_dc(ac_volts: float, kind: str) -> float:
    """Ideal mean DC output (V) of a ``kind`` rectifier fed ``ac_volts`` rms.

    >>> round(expected_dc(230, "half-wave"), 2), round(expected_dc(230, "bridge"), 2)
    (103.54, 207.07)
    """
    return MEAN_PER_VRMS[kind] * ac_volts


def judge_rectifier(measured: float, expected: float, kind: str) -> str:
    """The pattern ``measured`` fits, for a ``kind`` rectifier expected to give ``expected``.

    >>> judge_rectifier(103, 207.07, "bridge")
    'half_wave'
    """
    ratio = abs(measured) / expected
    if ratio < NO_OUTPUT_FRACTION:
        return "no_output"
    patterns = {"matches": 1.0}
    patterns["half_wave" if kind == "bridge" else "full_wave"] = 0.5 if kind == "bridge" else 2.0
    for name, share in patterns.items():
        if abs(ratio / share - 1) <= PATTERN_TOLERANCE:
            return name
    if ratio > 1:
        return "full_wave" if kind == "half-wave" and ratio > math.sqrt(2) else "matches"
    return "failed_diode"


_MEANING = {
    "matches": "matches a working {kind} rectifier",
    "half_wave": "looks like half-wave output: an open diode in the bridge, "
                 "or a half-wave unit fitted",
    "full_wave": "looks like full-wave output: a bridge fitted where a half-wave unit belongs",
    "failed_diode": "well below expected and fits no pattern: a failed diode",
    "no_output": "no output: the rectifier or its supply has failed",
}


def evaluate_rectifier(values: Mapping[str, Any]) -> Verdict:
    """Judge a rectifier's measured mean DC output against its AC input.

    Inputs: ``ac_volts`` (rms at the rectifier input), ``type`` (half-wave or
    bridge), ``measured_dc`` (its sign is ignored: the leads may be either way).

    References:
        Rashid, Power Electronics, diode rectifiers (textbook, ideal diodes,
        resistive or freewheeling inductive load).
    """
    v = read_inputs("rectifier", values, positive=("ac_volts",), negative=("measured_dc",))
    kind, measured = v["type"], v["measured_dc"]
    expected = expected_dc(v["ac_volts"], kind)
    verdict = judge_rectifier(measured, expected, kind)
    figures = make_figures((
        ("ac_volts", "AC volts at the input (rms)", v["ac_volts"], "V"),
        ("expected", f"expected mean DC, {kind}", expected, "V"),
        ("half_wave", "a half-wave rectifier would give", expected_dc(v["ac_volts"], "half-wave"),
         "V"),
        ("bridge", "a bridge would give", expected_dc(v["ac_volts"], "bridge"), "V"),
        ("measured", "measured DC", measured, "V"),
        ("ratio", "share of expected", abs(measured) / expected * 100, "%"),
    ))
    summary = (f"expected {quantity_text(expected, 'V')} from "
               f"{quantity_text(v['ac_volts'], 'V')} AC through a {kind} rectifier, measured "
               f"{quantity_text(measured, 'V')}: {_MEANING[verdict].format(kind=kind)}")
    return Verdict("rectifier", verdict, figures, summary)
