"""Voltage drop on the two-wire coil cable, and the supply verdict left at the coil.

The loop is twice the one-way length. Standard cross-sections take the
maximum conductor resistance of IEC 60228 class 5 (flexible, plain copper)
at 20 degC, corrected with the standard's own 0.004 /K; other sizes take
annealed copper (1/58 ohm*mm2/m, 0.00393 /K, IEC 60028). The two
corrections are kept apart on purpose.

Given a current, it is taken as fixed (a worst case for a coil fed from a
current-regulated or over-excitation circuit). Given rated voltage and power
instead, the coil is a resistor ``V**2 / P`` behind the loop, so the current
falls a little as the loop grows.

The verdict is **too_much_drop** when the coil end is judged low or absent
by the supply bands (:mod:`diagnose.physics.supply`) and the cable drops at
least :data:`NOTICEABLE_DROP` (1 %) of rated; a supply that is low at its
own end is not the cable's fault, and is said so in the summary.

References:
    IEC 60228:2004, table 3 (class 5, plain copper), maximum resistance at
    20 degC; the standard's temperature correction uses 0.004 /K.
    IEC 60028: annealed copper resistivity 1/58 ohm*mm2/m.
"""

from __future__ import annotations

from typing import Any, Mapping

from diagnose.physics.copper import conductor_resistance
from diagnose.physics.inputs import read_inputs, require
from diagnose.physics.supply import judge_supply, supply_band
from diagnose.physics.verdict import Verdict, make_figures, quantity_text

#: IEC 60228 class 5 plain copper, maximum resistance at 20 degC, ohm/km.
CLASS5_OHM_PER_KM: dict[float, float] = {
    0.5: 39.0,  # IEC 60228 table 3
    0.75: 26.0,  # IEC 60228 table 3
    1.0: 19.5,  # IEC 60228 table 3
    1.5: 13.3,  # IEC 60228 table 3
    2.5: 7.98,  # IEC 60228 table 3
    4.0: 4.95,  # from memory
    6.0: 3.30,  # from memory
    10.0: 1.91,  # from memory
    16.0: 1.21,  # from memory
    25.0: 0.780,  # from memory
    35.0: 0.554,  # from memory
}
#: Temperature coefficient IEC 60228 uses to correct its table values, 1/K.
IEC60228_ALPHA = 0.004
#: The least drop, as a share of rated, that makes the cable the cause of a low coil end.
NOTICEABLE_DROP = 0.01


def loop_resistance(length_m: float, area_mm2: float,
                    temperature: float = 20.0) -> tuple[float, str]:
    """Resistance (ohm) of the two-wire loop of one-way ``length_m``, and where its value came from.

    >>> r, basis = loop_resistance(50, 0.5); round(r, 6), basis
    (3.9, 'IEC 60228 class 5')
    """
    for size, ohm_per_km in CLASS5_OHM_PER_KM.items():
        if abs(area_mm2 - size) <= 1e-6 * size:
            r = ohm_per_km * 2 * length_m / 1000 * (1 + IEC60228_ALPHA * (temperature - 20.0))
            return r, "IEC 60228 class 5"
    return conductor_resistance(2 * length_m, area_mm2, temperature), "annealed copper"


def evaluate_cable(values: Mapping[str, Any]) -> Verdict:
    """The drop on the coil cable and the voltage left at the coil.

    Inputs: ``current`` (fixed) or ``rated_voltage`` with ``rated_power``
    (coil as a resistor); ``supply_volts`` (default: rated voltage),
    ``length`` (one way), ``area``, ``temperature`` of the conductor,
    ``source`` (band at the coil).

    Raises:
        InputError: neither a current nor rated voltage and power; no
            voltage to judge the coil end against.

    References:
        IEC 60228 (class 5 table), IEC 60028 (annealed copper),
        IEC 60204-1 4.3.3 (supply band, from memory).
    """
    v = read_inputs("cable", values,
                    positive=("rated_voltage", "rated_power", "supply_volts", "area"),
                    negative=("temperature",))
    rated = v["rated_voltage"] if v["rated_voltage"] is not None else v["supply_volts"]
    require(rated is not None, "rated_voltage",
            "give the rated voltage (or the supply volts) to judge the volts left at the coil")
    require(v["current"] is not None or v["rated_power"] is not None, "current",
            "give the coil current, or the rated voltage and power")
    supply = v["supply_volts"] if v["supply_volts"] is not None else rated
    loop, basis = loop_resistance(v["length"], v["area"], v["temperature"])
    coil = None
    if v["current"] is not None:
        current = v["current"]
    else:
        coil = rated**2 / v["rated_power"]
        current = supply / (coil + loop)
    drop = current * loop
    at_coil = supply - drop
    band = supply_band(v["source"])
    coil_end = judge_supply(rated, at_coil, band)
    supply_end = judge_supply(rated, supply, band)
    noticeable = drop >= NOTICEABLE_DROP * rated
    verdict = "too_much_drop" if coil_end in ("low", "absent") and noticeable else "ok"

    figures = make_figures((
        ("loop_resistance", f"loop resistance ({basis})", loop, "ohm"),
        ("coil_resistance", "coil as a resistor, V²/P", coil, "ohm"),
        ("current", "current" + (" (fixed)" if coil is None else ""), current, "A"),
        ("drop", "voltage drop on the cable", drop, "V"),
        ("supply_volts", "volts at the supply end", supply, "V"),
        ("coil_volts", "volts left at the coil", at_coil, "V"),
        ("coil_supply", f"supply verdict at the coil: {coil_end} (share of rated)",
         at_coil / rated * 100, "%"),
    ))
    summary = (f"{quantity_text(loop, 'ohm')} loop drops {quantity_text(drop, 'V')} at "
               f"{quantity_text(current, 'A')}, leaving {quantity_text(at_coil, 'V')} "
               f"({at_coil / rated:.0%} of rated) at the coil: supply {coil_end} at the coil")
    if coil_end != "ok" and not noticeable:
        summary += f"; the cable drops little, the supply end itself is {supply_end}"
    return Verdict("cable", verdict, figures, summary)
