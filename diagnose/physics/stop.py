"""A dynamic stop: stopping time and angle, the heat in the brake, its temperature rise.

With inertia ``J``, speed ``omega``, brake torque ``T`` and a load torque
``T_L`` that opposes (+) or helps (-) the stop, the deceleration torque is
``T_d = T +/- T_L`` and

    t = J * omega / T_d            stopping time
    phi = omega * t / 2            stopping angle (constant deceleration)
    E = T * phi                    energy the brake turns into heat

With no load torque, ``E = J * omega**2 / 2``. A helping load (a hoist
lowering) adds its work, so the brake takes more than the kinetic energy.
The temperature rise of a mass ``m`` of specific heat ``c`` that takes up
all of it (no cooling during the stop) is ``E / (m * c)``.

Verdicts: **over** when the brake heat exceeds the rated energy per stop,
or when a helping load is at least the brake torque (the brake cannot stop
it); **within_rating** otherwise (also when no rated energy is given: the
summary says so).

References:
    Shigley's Mechanical Engineering Design, chapter "Clutches, Brakes,
    Couplings, and Flywheels" (from memory): energy considerations,
    E = J*omega**2/2 and t = J*omega/T for constant torque.
"""

from __future__ import annotations

import math
from typing import Any, Mapping

from diagnose.physics import units
from diagnose.physics.inputs import read_inputs
from diagnose.physics.verdict import Verdict, make_figures, quantity_text


def stop_figures(inertia: float, rpm: float, torque: float,
                 load_torque: float = 0.0) -> tuple[float, float, float]:
    """(time s, angle rad, brake heat J) of a stop from ``rpm`` under ``torque``.

    ``load_torque`` is signed: positive opposes the motion, negative helps.
    Infinite when the deceleration torque is not positive.

    >>> t, phi, e = stop_figures(0.01, 3000, 10); round(t, 3), round(e, 2)
    (0.314, 493.48)
    """
    omega = rpm * 2 * math.pi / 60
    decel = torque + load_torque
    if decel <= 0:
        return math.inf, math.inf, math.inf
    time = inertia * omega / decel
    angle = omega * time / 2
    return time, angle, torque * angle


def evaluate_stop(values: Mapping[str, Any]) -> Verdict:
    """Work out a dynamic stop and judge its heat against the rated energy.

    Inputs: ``inertia``, ``speed``, ``torque``, ``load_torque`` (default 0),
    ``load`` (opposes or helps), optional ``mass``, ``specific_heat``
    (default 460 J/(kg*K), steel), optional ``rated_energy``.

    References:
        Shigley's Mechanical Engineering Design, clutches and brakes (from memory).
    """
    v = read_inputs("stop", values,
                    positive=("inertia", "torque", "mass", "specific_heat", "rated_energy"))
    signed_load = v["load_torque"] if v["load"] == "opposes" else -v["load_torque"]
    time, angle, heat = stop_figures(v["inertia"], v["speed"], v["torque"], signed_load)
    rise = heat / (v["mass"] * v["specific_heat"]) if v["mass"] is not None else None
    kinetic = 0.5 * v["inertia"] * (v["speed"] * 2 * math.pi / 60) ** 2
    if math.isinf(heat):
        verdict = "over"
        summary = (f"the helping load torque {quantity_text(v['load_torque'], 'N·m')} is at "
                   f"least the brake torque {quantity_text(v['torque'], 'N·m')}: "
                   "the brake cannot stop it")
    else:
        rated = v["rated_energy"]
        verdict = "over" if rated is not None and units.above(heat, rated) else "within_rating"
        judged = ("no rated energy given" if rated is None else
                  ("over" if verdict == "over" else "within") + " the rated "
                  + quantity_text(rated, "J"))
        summary = (f"stops in {quantity_text(time, 's')} over "
                   f"{quantity_text(angle / math.tau, 'rev')}, "
                   f"turning {quantity_text(heat, 'J')} into heat"
                   + (f" (+{quantity_text(rise, 'K')})" if rise is not None else "")
                   + f": {judged}")
    figures = make_figures((
        ("time", "stopping time", time, "s"),
        ("angle", "stopping angle", math.degrees(angle) if math.isfinite(angle) else None, "°"),
        ("revolutions", "stopping angle in turns", angle / math.tau, "rev"),
        ("kinetic_energy", "kinetic energy at the start", kinetic, "J"),
        ("heat", "energy turned into heat in the brake", heat, "J"),
        ("temperature_rise", "temperature rise of the mass", rise, "K"),
        ("rated_energy", "rated energy per stop", v["rated_energy"], "J"),
    ))
    return Verdict("stop", verdict, figures, summary)
