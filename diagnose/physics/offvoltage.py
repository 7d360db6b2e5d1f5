"""Coil volts with the coil commanded off: is the supply really gone?

A spring-applied brake holds only when its coil is de-energised. Volts left
on the coil after the control has switched it off keep the armature pulled
in, or let it drop late, and the brake slips or does not hold. The reading
(either sign: the leads may be either way) is compared with the rated coil
voltage:

* **off**: below ``off_share`` of rated (default 5 %): off, as it should be;
* **present**: at or above ``present_share`` of rated (default 50 %): the
  supply is still on the coil (a welded contact, or wiring that bypasses
  the switch);
* **residual**: in between: leakage through a semiconductor output or a
  suppression part, or voltage induced on a long cable run, which can hold
  a released brake open: with the air gap closed, a coil holds its armature
  at far less voltage than it needs to pull it in.

References:
    No published table was at hand for either threshold; both are common
    practice, chosen for this tool. 5 % of rated is meant to sit well below
    the drop-out voltage of a DC brake coil (the volts at which a pulled-in
    armature lets go: a maker's figure, so a pack should set ``off_share``
    from the maker's data where it has them); 50 % of rated is more than
    leakage or induction gives on a coil load (from memory), so such a
    reading means the supply itself.
"""

from __future__ import annotations

from typing import Any, Mapping

from diagnose.physics.inputs import read_inputs, require
from diagnose.physics.units import below
from diagnose.physics.verdict import Verdict, make_figures, quantity_text


def judge_off_voltage(rated: float, volts: float, off_share: float, present_share: float) -> str:
    """off, residual or present for ``volts`` read on a coil rated ``rated`` that is commanded off.

    The sign of ``volts`` is ignored. ``off_share`` and ``present_share``
    are fractions of ``rated``, with ``0 < off_share < present_share``.

    >>> [judge_off_voltage(24, v, 0.05, 0.5) for v in (0.3, 4, 23.6, -23.6)]
    ['off', 'residual', 'present', 'present']

    References:
        Thresholds: common practice (see the module).
    """
    ratio = abs(volts) / rated
    if below(ratio, off_share):
        return "off"
    if below(ratio, present_share):
        return "residual"
    return "present"


_MEANING = {
    "off": "off, as it should be",
    "residual": "leakage or induced voltage that can keep the armature pulled in",
    "present": "the supply is still on the coil (a welded contact or wiring past the switch)",
}


def evaluate_off_voltage(values: Mapping[str, Any]) -> Verdict:
    """Judge the volts measured at the coil terminals while the coil is commanded off.

    Inputs: ``rated_voltage``, ``volts`` (may be negative), optional
    ``off_share`` (default 0.05) and ``present_share`` (default 0.5),
    fractions of rated.

    Raises:
        InputError: a share outside 0..1, or ``off_share`` not below
            ``present_share``.

    References:
        Thresholds: common practice (see the module).
    """
    v = read_inputs("off_voltage", values, positive=("rated_voltage", "off_share",
                                                      "present_share"), negative=("volts",))
    rated, volts = v["rated_voltage"], v["volts"]
    off_share, present_share = v["off_share"], v["present_share"]
    for name in ("off_share", "present_share"):
        require(v[name] <= 1, name, f"expected a fraction of rated between 0 and 1 such as 0.05 "
                                    f"(or 5 %), got {v[name]:g}")
    require(off_share < present_share, "off_share",
            f"the off limit {off_share:g} must be below the present limit {present_share:g}")
    verdict = judge_off_voltage(rated, volts, off_share, present_share)
    ratio = abs(volts) / rated
    figures = make_figures((
        ("measured", "measured at the coil, commanded off", volts, "V"),
        ("rated", "rated voltage", rated, "V"),
        ("ratio", "share of rated", ratio * 100, "%"),
        ("off_limit", "off below", off_share * rated, "V"),
        ("present_limit", "supply present from", present_share * rated, "V"),
    ))
    summary = (f"with the coil commanded off {quantity_text(volts, 'V')} is {ratio:.0%} of rated "
               f"{quantity_text(rated, 'V')}: {_MEANING[verdict]}")
    return Verdict("off_voltage", verdict, figures, summary)
