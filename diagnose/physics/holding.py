"""Holding torque margin: does the rated torque cover the load with the safety factor?

**ok** when ``rated_torque >= safety_factor * load_torque``, otherwise
**insufficient**. The default factor 2 is common practice for holding
brakes on vertical axes; a machine's own risk assessment or code may ask
for another.

References:
    Common practice (brake makers' selection guides): holding torque at
    least twice the static load torque on gravity-loaded axes.
    EN ISO 13849 / the machine's risk assessment set the factor for safety
    functions.
"""

from __future__ import annotations

from typing import Any, Mapping

from diagnose.physics import units
from diagnose.physics.inputs import read_inputs
from diagnose.physics.verdict import Verdict, make_figures, quantity_text


def evaluate_holding(values: Mapping[str, Any]) -> Verdict:
    """Judge the rated holding torque against the static load torque.

    Inputs: ``load_torque``, ``rated_torque``, ``safety_factor`` (default 2).

    References:
        Brake makers' selection guides (common practice).
    """
    v = read_inputs("holding", values, positive=("rated_torque", "safety_factor"))
    load, rated, factor = v["load_torque"], v["rated_torque"], v["safety_factor"]
    required = factor * load
    verdict = "insufficient" if units.below(rated, required) else "ok"
    figures = make_figures((
        ("load_torque", "static load torque", load, "N·m"),
        ("rated_torque", "rated holding torque", rated, "N·m"),
        ("required", f"required (x{factor:g})", required, "N·m"),
        ("margin", "rated over load", rated / load if load > 0 else None, ""),
    ))
    summary = (f"rated {quantity_text(rated, 'N·m')} against {quantity_text(load, 'N·m')} load "
               f"needs {quantity_text(required, 'N·m')} at a factor of {factor:g}: "
               + ("ok" if verdict == "ok" else "insufficient holding torque"))
    return Verdict("holding", verdict, figures, summary)
