"""The state of the unit: power, covers, brake mounted or removed... as the steps leave it.

A pack declares a few state variables (``states:``), each with its values,
the value when the technician arrives (``initial``) and, per value, the
minutes a plain setup step takes to bring the unit there (isolating, opening
a cover, removing the brake). Checks say what state they need
(``requires``) and what they leave (``leaves``; by default the state they
needed stays). A repair leaves the unit put back as it was found, ready to
test the cure, unless it says otherwise.

The state is a fold over the steps done, in order (``Evidence.steps``):
the initial values, then each check's ``requires`` and ``leaves``, each
repair's ``leaves``, and what the technician said (``state var=value``).

The planner charges the setup minutes of a check only for the state
variables that must change (cost clusters: one isolation, one removal of the
brake, serves every check done in that state), and never proposes a check
whose state cannot be reached by a setup step (it is meaningless now).

References:
    H. Langseth, F. V. Jensen, "Heuristics for two extensions of basic
    troubleshooting", Proc. SCAI 2001 (cost clusters: a shared setup cost).
    D. Heckerman, J. S. Breese, K. Rommelse, "Decision-theoretic
    troubleshooting", CACM 38(3), 1995 (observations with a setup cost).
"""

from __future__ import annotations

import math
from collections.abc import Mapping

from diagnose.kb.model import Model
from diagnose.reasoning.evidence import Evidence


def initial_state(model: Model) -> dict[str, str]:
    """The state when the technician arrives."""
    return {sid: s.initial for sid, s in model.states.items()}


def unit_state(model: Model, evidence: Evidence) -> dict[str, str]:
    """The state of the unit after the steps of ``evidence``, in order.

    >>> from diagnose.reasoning.synthetic import tiny_model
    >>> unit_state(tiny_model(), Evidence())
    {}
    """
    state = initial_state(model)
    if not state:
        return state
    for step in evidence.steps:
        apply_step(model, state, step)
    return state


def apply_step(model: Model, state: dict[str, str], step: tuple[str, str]) -> None:
    """Fold one step of ``Evidence.steps`` into ``state``, in place (see :func:`unit_state`)."""
    kind, ident = step
    if kind == "check":
        chk = model.checks.get(ident)
        if chk is not None:
            _update(state, chk.requires, model)
            _update(state, chk.leaves, model)
    elif kind == "repair":
        rep = model.repairs.get(ident)
        if rep is not None:
            _update(state, rep.requires, model)
            _update(state, rep.leaves or initial_state(model), model)
    elif kind == "state" and "=" in ident:
        var, value = ident.split("=", 1)
        _update(state, {var: value}, model)


def _update(state: dict[str, str], new: Mapping[str, str], model: Model) -> None:
    for var, value in new.items():
        s = model.states.get(var)
        if s is not None and value in s.values:
            state[var] = value


def setup_minutes(model: Model, state: Mapping[str, str], requires: Mapping[str, str]) -> float:
    """Minutes of setup to bring the unit from ``state`` to ``requires``; inf when unreachable.

    >>> from diagnose.kb.model import StateVar
    >>> from dataclasses import replace
    >>> from diagnose.reasoning.synthetic import tiny_model
    >>> m = replace(tiny_model(), states={"power": StateVar("power", "Power",
    ...     {"on": "on", "isolated": "isolated"}, "on", {"on": 3.0, "isolated": 5.0})})
    >>> setup_minutes(m, {"power": "on"}, {"power": "isolated"})
    5.0
    >>> setup_minutes(m, {"power": "isolated"}, {"power": "isolated"})
    0.0
    """
    total = 0.0
    for var, value in requires.items():
        s = model.states.get(var)
        if s is None or state.get(var, s.initial) == value:
            continue
        cost = s.setup.get(value)
        if cost is None:
            return math.inf
        total += float(cost)
    return total


def setup_steps(model: Model, state: Mapping[str, str], requires: Mapping[str, str],
                ) -> tuple[tuple[str, str], ...]:
    """The (state, value) changes a step needs first, in the pack's order of states."""
    out = []
    for var, s in model.states.items():
        if var in requires and state.get(var, s.initial) != requires[var]:
            out.append((var, requires[var]))
    return tuple(out)
