"""The next action: the check or repair that lowers the expected minutes to a cure.

:func:`plan` weighs every check and repair for the evidence so far and
chooses one; it is built from these rooms:

* :mod:`diagnose.reasoning.eligibility`: which checks and repairs can be
  proposed now (answers, states and setup, hazards withheld, prerequisites,
  phone mode), with their minutes including what must come first;
* :mod:`diagnose.reasoning.repair_cost`: the expected cost of repair (ECR)
  of the repairs in p/c order;
* :mod:`diagnose.reasoning.lookahead`: the expected information of every
  check and the expected cost of observation (ECO) of those that can be
  chosen, one step ahead (:mod:`~diagnose.reasoning.lookahead_dense` for a
  small model);
* :mod:`diagnose.reasoning.policy`: the decision rule (:class:`Settings`),
  with ties between checks broken by :mod:`diagnose.reasoning.ties`.

What does not change during a session is kept per model in
:mod:`diagnose.reasoning.plancache`. ``plan(..., reference=True)`` weighs
with the planner's first, straightforward version instead
(:mod:`diagnose.reasoning.lookahead_reference`, nothing memoised, every ECO at
once): the same choices and, to 1e-9 relative, the same costs, slower; the
tests and the benchmark compare the two.

The values it returns (:class:`Action`, :class:`Plan`, :class:`ChecksTable`)
live in :mod:`diagnose.reasoning.actions`; they are re-exported here with
the functions of the rooms that other modules use.

When no answer points at a known cause yet (:mod:`diagnose.reasoning.openworld`),
no repair may follow an outcome that points at no cause: the ECR after such
an outcome is an escalation.
"""

from __future__ import annotations

import numpy as np

from diagnose.errors import InputError
from diagnose.kb.model import UNKNOWN_CAUSE, Model
from diagnose.reasoning.actions import Action, CheckScore, ChecksTable, Plan, RepairScore
from diagnose.reasoning.eligibility import (
    check_standing,
    check_status,
    missing_prerequisites,
    repair_standing,
)
from diagnose.reasoning.evidence import MODES, Evidence
from diagnose.reasoning.lookahead import Lookahead, lookahead
from diagnose.reasoning.lookahead_reference import lookahead_reference
from diagnose.reasoning.nameplate import nameplate_value, only_if_matches
from diagnose.reasoning.openworld import SUPPORT_MARGIN, any_support
from diagnose.reasoning.plancache import PlanCache, plan_cache
from diagnose.reasoning.policy import DEFAULT, Settings, decide
from diagnose.reasoning.posterior import Posterior, RankEntry, posterior
from diagnose.reasoning.repair_cost import (
    assign_repairs,
    expected_cost_of_repair,
    repair_order,
    sequence_cost,
)
from diagnose.reasoning.tables import Tables, tables_for

__all__ = ["DEFAULT", "Action", "CheckScore", "ChecksTable", "Plan", "RepairScore", "Settings",
           "assign_repairs", "check_status", "checks_table", "expected_cost_of_repair",
           "lookahead", "lookahead_reference", "missing_prerequisites", "nameplate_value",
           "next_action", "only_if_matches", "plan", "repair_order", "sequence_cost", "top_entry"]


def plan(model: Model, evidence: Evidence, *, max_faults: int = 1,
         settings: Settings = DEFAULT, post: Posterior | None = None,
         reference: bool = False) -> Plan:
    """Weigh every check and repair, and choose the next action.

    The rule that chooses is :func:`diagnose.reasoning.policy.decide`. With
    ``reference`` the planner's first, straightforward version weighs them
    (:func:`~diagnose.reasoning.lookahead_reference.lookahead_reference`, no
    memos, the ECO of every candidate at once); it gives the same choices and
    costs (to rounding) and is kept for the tests and the benchmark.

    Raises:
        InputError: an unknown mode, ids unknown to the model, a bad ``max_faults``.

    >>> from diagnose.reasoning.synthetic import tiny_model
    >>> m = tiny_model()
    >>> plan(m, Evidence(complaints=("will_not_release",))).action.kind
    'check'
    """
    if evidence.mode not in MODES:
        raise InputError("mode", f"expected site or phone, got {evidence.mode!r}")
    tables = tables_for(model, max_faults, evidence)  # pairs pruned at scale
    if reference:
        post = posterior(model, evidence, max_faults=max_faults) if post is None else post
        result = _weigh_reference(model, evidence, tables, post, settings)
    else:
        cache = plan_cache(tables)
        post = cache.posterior(model, evidence) if post is None else post
        result = _weigh(model, evidence, tables, post, settings, cache=cache)
    return result.with_action(decide(model, evidence, post, settings, result))


def _weigh(model: Model, evidence: Evidence, tables: Tables, post: Posterior,
           settings: Settings, *, cache: PlanCache) -> Plan:
    """The scores of a plan, fast: memos per model, the ECO only of checks that can be chosen.

    A check can be chosen when it is available and informative (expected
    information at least ``settings.min_bits``); the ECO of the other
    available checks is computed when the plan's :meth:`~Plan.ecos` is asked.
    """
    p = post.p
    st = cache.standings(model, evidence, p)
    checks, repairs, p_fix, assign = st.checks, st.repairs, st.p_fix, st.assign
    code, cmin, rmin = st.check_code, checks.minutes, repairs.minutes
    cand = (code == 0).nonzero()[0]
    supported = cache.any_support(model, evidence, post.excluded)
    escalation = settings.escalation_minutes
    la = Lookahead(tables, p, cand, assign, rmin, escalation=escalation,
                   neutral=None if supported else cache.neutral(model, post.excluded))
    bits = np.zeros(len(code))
    eco = np.empty(len(code))
    eco.fill(np.nan)
    bits[cand] = la.bits
    chosen = la.bits >= settings.min_bits
    now = cand[chosen]
    eco[now] = la.eco(now, cmin[now])

    def fill() -> None:
        later = cand[~chosen]
        if len(later) and np.isnan(eco[later[0]]):
            eco[later] = la.eco(later, cmin[later])

    top = top_entry(post, cache if post.tables is tables else None)
    return Plan(Action("done"), top, la.ecr_now, model, tables.check_ids,
                cmin, bits, eco, code, checks.needs, checks.blocked, tables.repair_ids, rmin,
                p_fix, tables.success * p_fix, st.repair_code, repairs.needs, repairs.blocked,
                supported, fill_eco=fill)


def top_entry(post: Posterior, cache: PlanCache | None = None) -> RankEntry:
    """The top of the posterior's ranking, ``post.ranking(limit=1).top``, without the ranking.

    When the top value is shared (an exact tie), the ranking itself decides.
    ``cache``: the plan cache of ``post.tables``, when the caller has it.
    """
    t = post.tables
    # one fault: hypothesis i is cause i, and "unknown" comes last, as in the ranking
    values = post.p if t.max_faults == 1 else \
        np.concatenate([post.causes(), [post.unknown]])
    if post.excluded:
        gone = (cache or plan_cache(t)).cause_indices(post.excluded)
        if len(gone):
            values = values.copy()
            values[gone] = -np.inf
    i = int(values.argmax())
    if np.count_nonzero(values == values[i]) > 1:
        return post.ranking(limit=1).top
    model = t.model
    cid = t.causes[i] if i < t.n_causes else UNKNOWN_CAUSE
    title = model.causes[cid].title if cid in model.causes else "None of the known causes"
    return RankEntry(cid, title, float(values[i]))


def _weigh_reference(model: Model, evidence: Evidence, tables: Tables, post: Posterior,
                     settings: Settings) -> Plan:
    """The scores of a plan, the reference way: every candidate's ECO, nothing memoised."""
    p = post.p
    checks = check_standing(model, evidence, tables)
    repairs, p_fix = repair_standing(model, evidence, tables, p)
    code, cmin, rmin = checks.code, checks.minutes, repairs.minutes

    cand = np.flatnonzero(code == 0)
    assign = assign_repairs(tables, repairs.code == 0, rmin)
    supported = any_support(model, evidence, post.excluded)
    detail: list[np.ndarray] = []
    bits_c, eco_c, ecr_now = lookahead_reference(tables, p, cand, cmin[cand], assign, rmin,
                                                 escalation=settings.escalation_minutes,
                                                 detail=detail)
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
    return Plan(Action("done"), post.ranking(limit=1).top, ecr_now, model, tables.check_ids,
                cmin, bits, eco, code, checks.needs, checks.blocked, tables.repair_ids, rmin,
                p_fix, tables.success * p_fix, repairs.code, repairs.needs, repairs.blocked,
                supported)


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
                settings: Settings = DEFAULT, reference: bool = False) -> Action:
    """The proposed next action (see :func:`plan`)."""
    return plan(model, evidence, max_faults=max_faults, settings=settings,
                reference=reference).action


def checks_table(model: Model, evidence: Evidence, *, max_faults: int = 1,
                 settings: Settings = DEFAULT, reference: bool = False) -> ChecksTable:
    """Every check with minutes, expected information, ECO and why it is not offered."""
    pl = plan(model, evidence, max_faults=max_faults, settings=settings, reference=reference)
    return ChecksTable(pl.checks(), pl.ecr, evidence.mode)
