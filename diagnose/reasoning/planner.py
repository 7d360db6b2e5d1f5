"""The next action: the check or repair that lowers the expected minutes to a cure.

:func:`plan` weighs every check and repair for the evidence so far and
chooses one; it is built from four rooms:

* :mod:`diagnose.reasoning.eligibility`: which checks and repairs can be
  proposed now (answers, states and setup, hazards withheld, prerequisites,
  phone mode), with their minutes including what must come first;
* :mod:`diagnose.reasoning.repair_cost`: the expected cost of repair (ECR)
  of the repairs in p/c order;
* :mod:`diagnose.reasoning.lookahead`: the expected information and the
  expected cost of observation (ECO) of every check, one step ahead;
* :mod:`diagnose.reasoning.policy`: the decision rule (:class:`Settings`).

The values it returns (:class:`Action`, :class:`Plan`, :class:`ChecksTable`)
live in :mod:`diagnose.reasoning.actions`; they are re-exported here with
the functions of the rooms that other modules use.

When no answer points at a known cause yet (:mod:`diagnose.reasoning.openworld`),
no repair may follow an outcome that points at no cause: the ECR after such
an outcome is an escalation.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from diagnose.errors import InputError
from diagnose.kb.model import Model
from diagnose.reasoning.actions import Action, CheckScore, ChecksTable, Plan, RepairScore
from diagnose.reasoning.eligibility import (
    check_standing,
    check_status,
    missing_prerequisites,
    repair_standing,
)
from diagnose.reasoning.evidence import MODES, Evidence
from diagnose.reasoning.lookahead import lookahead
from diagnose.reasoning.nameplate import nameplate_value, only_if_matches
from diagnose.reasoning.openworld import SUPPORT_MARGIN, any_support
from diagnose.reasoning.policy import DEFAULT, Settings, decide
from diagnose.reasoning.posterior import Posterior, posterior
from diagnose.reasoning.repair_cost import (
    assign_repairs,
    expected_cost_of_repair,
    repair_order,
    sequence_cost,
)
from diagnose.reasoning.tables import Tables, tables_for

__all__ = ["DEFAULT", "Action", "CheckScore", "ChecksTable", "Plan", "RepairScore", "Settings",
           "assign_repairs", "check_status", "checks_table", "expected_cost_of_repair",
           "lookahead", "missing_prerequisites", "nameplate_value", "next_action",
           "only_if_matches", "plan", "repair_order", "sequence_cost"]


def plan(model: Model, evidence: Evidence, *, max_faults: int = 1,
         settings: Settings = DEFAULT, post: Posterior | None = None) -> Plan:
    """Weigh every check and repair, and choose the next action.

    The rule that chooses is :func:`diagnose.reasoning.policy.decide`.

    Raises:
        InputError: an unknown mode, ids unknown to the model, a bad ``max_faults``.

    >>> from diagnose.reasoning.synthetic import tiny_model
    >>> m = tiny_model()
    >>> plan(m, Evidence(complaints=("will_not_release",))).action.kind
    'check'
    """
    if evidence.mode not in MODES:
        raise InputError("mode", f"expected site or phone, got {evidence.mode!r}")
    tables = tables_for(model, max_faults)
    post = post if post is not None else posterior(model, evidence, max_faults=max_faults)
    p = post.p
    checks = check_standing(model, evidence, tables)
    repairs, p_fix = repair_standing(model, evidence, tables, p)
    code, cmin, rmin = checks.code, checks.minutes, repairs.minutes

    cand = np.flatnonzero(code == 0)
    assign = assign_repairs(tables, repairs.code == 0, rmin)
    supported = any_support(model, evidence, post.excluded)
    detail: list[np.ndarray] = []
    bits_c, eco_c, ecr_now = lookahead(tables, p, cand, cmin[cand], assign, rmin,
                                       escalation=settings.escalation_minutes, detail=detail)
    if not supported and len(cand):
        # no answer points at a known cause yet, so no repair may follow a normal answer:
        # after an outcome that supports no cause the cost is an escalation
        z, ecr_after = detail
        neutral = _neutral_outcomes(model, tables, cand, z.shape[1], post.excluded)
        ecr_after = np.where(neutral, settings.escalation_minutes, ecr_after)
        eco_c = cmin[cand] + (z * ecr_after).sum(axis=1)
    bits = np.zeros(len(code))
    eco = np.full(len(code), np.nan)
    bits[cand], eco[cand] = bits_c, eco_c
    result = Plan(Action("done"), post.ranking(limit=1).top, ecr_now, model, tables.check_ids,
                  cmin, bits, eco, code, checks.needs, checks.blocked, tables.repair_ids, rmin,
                  p_fix, tables.success * p_fix, repairs.code, repairs.needs, repairs.blocked,
                  supported)
    action = decide(model, evidence, post, settings, result)
    return replace(result, action=action)


def _neutral_outcomes(model: Model, tables: Tables, cand: np.ndarray, width: int,
                      excluded: frozenset[str]) -> np.ndarray:
    """(candidates × outcomes): True where the outcome points at no cause still possible."""
    out = np.ones((len(cand), width), dtype=bool)
    for row, k in enumerate(cand):
        chk = model.checks[tables.check_ids[k]]
        for j, o in enumerate(chk.outcomes):
            base = chk.normal.get(o, 0.0) * SUPPORT_MARGIN
            out[row, j] = not any(r.get(o, 0.0) > base for c, r in chk.effects.items()
                                  if c not in excluded)
    return out


def next_action(model: Model, evidence: Evidence, *, max_faults: int = 1,
                settings: Settings = DEFAULT) -> Action:
    """The proposed next action (see :func:`plan`)."""
    return plan(model, evidence, max_faults=max_faults, settings=settings).action


def checks_table(model: Model, evidence: Evidence, *, max_faults: int = 1,
                 settings: Settings = DEFAULT) -> ChecksTable:
    """Every check with minutes, expected information, ECO and why it is not offered."""
    pl = plan(model, evidence, max_faults=max_faults, settings=settings)
    return ChecksTable(pl.checks(), pl.ecr, evidence.mode)
