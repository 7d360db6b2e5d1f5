"""What the planner keeps per model between steps: facts that do not change during a session.

The compiled :class:`~diagnose.kb.model.Model` is frozen and stays so; this
cache lives beside it, one per :class:`~diagnose.reasoning.tables.Tables`
(a ``weakref.WeakKeyDictionary``: it goes when they go). It holds, memoised:

* the standing of the checks and repairs before the answers are marked
  (:func:`~diagnose.reasoning.eligibility.check_base` and
  :func:`~diagnose.reasoning.eligibility.repair_base`), by what they depend
  on: the mode, the nameplate, the state of the unit and which prerequisites
  are done or skipped (:func:`~diagnose.reasoning.eligibility.standing_key`);
  and, by that and the repairs that can be proposed, which repair serves
  each hypothesis;
* the state of the unit (:func:`~diagnose.reasoning.unitstate.unit_state`)
  by the steps done, each folded on from the state before its last step;
* the indices of a set of causes (those the nameplate rules out), for the top
  of the ranking;
* the causes each answer points at (:func:`~diagnose.reasoning.openworld.supported_causes`,
  one finding at a time);
* the outcomes that point at no cause still possible, per set of causes the
  nameplate rules out (one flag per (check, outcome) pair of the
  look-ahead's :class:`~diagnose.reasoning.lookahead.Layout`);
* for the posterior (:meth:`PlanCache.posterior`): the last one, for the same
  evidence (the same object, an immutable value) asked again; the causes the nameplate
  rules out, by nameplate; the causes no available check observes, by
  nameplate, the checks skipped or answered "unsure" and the checks not for
  this unit answered all the same; the probabilities from the complaints
  alone that the open-world rule caps them at.

Each memo holds at most ``MEMO`` entries (those that keep one number per
hypothesis, at most ``MEMO_NUMBERS`` numbers in all) and starts afresh when
full. The values are the ones the plain functions give; the tests compare
them.
"""

from __future__ import annotations

import weakref
from collections.abc import Mapping
from types import MappingProxyType
from typing import Any, NamedTuple

import numpy as np

from diagnose.kb.model import Model
from diagnose.reasoning.eligibility import (
    Standing,
    check_base,
    mark_answered,
    mark_repairs,
    repair_base,
    standing_key,
)
from diagnose.reasoning.evidence import Evidence
from diagnose.reasoning.nameplate import excluded_causes
from diagnose.reasoning.openworld import (
    SUPPORT_MARGIN,
    supported_causes,
    unobservable_causes,
)
from diagnose.reasoning.posterior import (
    Posterior,
    complaints_only,
    log_posterior,
    log_posterior_after,
    settle,
)
from diagnose.reasoning.repair_cost import assign_repairs
from diagnose.reasoning.tables import Tables
from diagnose.reasoning.unitstate import apply_step, unit_state

__all__ = ["MEMO", "MEMO_NUMBERS", "PlanCache", "Standings", "plan_cache"]

MEMO = 4096  # entries of one memo before it starts afresh
MEMO_NUMBERS = 1 << 22  # numbers a memo of per-hypothesis vectors keeps (32 MB of floats)


def _remember(memo: dict[Any, Any], key: Any, value: Any, limit: int = MEMO) -> Any:
    if len(memo) >= limit:
        memo.clear()
    memo[key] = value
    return value


def _frozen(st: Standing) -> Standing:
    """The standing with read-only arrays: a cached value must not change under its users."""
    st.minutes.flags.writeable = False
    st.code.flags.writeable = False
    return st


class Standings(NamedTuple):
    """The standing of the checks and repairs now (see :meth:`PlanCache.standings`)."""

    checks: Standing
    check_code: np.ndarray
    repairs: Standing
    repair_code: np.ndarray
    p_fix: np.ndarray
    assign: np.ndarray


class PlanCache:
    """The per-model memos of the planner (see the module docstring)."""

    def __init__(self, tables: Tables) -> None:
        model = tables.model
        needs = [n for c in model.checks.values() for n in c.needs]
        needs += [n for r in model.repairs.values() for n in r.needs]
        self.prerequisites = frozenset(needs)
        self._conditioned = frozenset(c.id for c in model.checks.values()
                                      if c.only_if or c.hidden)
        self._tables = weakref.ref(tables)
        self._per_hyp = min(MEMO, max(4, MEMO_NUMBERS // tables.n_hyp))  # vectors kept
        self._checks: dict[Any, Standing] = {}
        self._repairs: dict[Any, Standing] = {}
        self._support: dict[Any, frozenset[str]] = {}
        self._neutral: dict[frozenset[str], np.ndarray] = {}
        self._assign: dict[Any, np.ndarray] = {}
        self._states: dict[tuple[tuple[str, str], ...], Mapping[str, str]] = {}
        self._excluded: dict[Any, frozenset[str]] = {}
        self._hidden: dict[Any, frozenset[str]] = {}
        self._capped: dict[frozenset[str], np.ndarray] = {}
        self._baseline: dict[Any, np.ndarray] = {}
        self._indices: dict[frozenset[str], np.ndarray] = {}
        self._last: tuple[Evidence, Posterior] | None = None  # the last posterior and its evidence
        self._logw: tuple[Evidence, np.ndarray] | None = None  # the last log weights, the same

    def posterior(self, model: Model, evidence: Evidence) -> Posterior:
        """The posterior, as :func:`~diagnose.reasoning.posterior.posterior` gives it.

        The same steps (Bayes' rule in log space, the nameplate's exclusions,
        the open-world rule), with what depends only on the nameplate, the
        checks no longer available and the complaints taken from the memos.
        """
        last = self._last
        if last is not None and last[0] is evidence:  # asked again for the same value
            return last[1]
        tables = self._tables()
        assert tables is not None
        plate = tuple(sorted(evidence.nameplate.items())) if evidence.nameplate else ()
        excluded = self._excluded.get(plate)
        if excluded is None:
            excluded = _remember(self._excluded, plate, excluded_causes(model, evidence))

        def hidden() -> frozenset[str]:
            # what unobservable_causes reads: the nameplate, the checks skipped or unsure,
            # and which checks not for this unit were answered all the same
            key = (plate, evidence.skipped.difference(evidence.findings),
                   evidence.unsure.difference(evidence.findings),
                   self._conditioned.intersection(evidence.findings))
            found = self._hidden.get(key)
            if found is None:
                found = _remember(self._hidden, key, unobservable_causes(model, evidence))
            return found

        def capped(causes: frozenset[str]) -> np.ndarray:
            found = self._capped.get(causes)
            if found is None:
                found = _remember(self._capped, causes, tables.hypotheses_within(causes),
                                  self._per_hyp)
            return found

        def baseline() -> np.ndarray:
            key = (evidence.complaints, excluded)
            found = self._baseline.get(key)
            if found is None:
                found = complaints_only(tables, evidence.complaints, excluded)
                found.flags.writeable = False
                _remember(self._baseline, key, found, self._per_hyp)
            return found

        before = self._logw
        logw = log_posterior(tables, evidence) if before is None else \
            log_posterior_after(tables, evidence, *before)
        logw.flags.writeable = False
        self._logw = (evidence, logw)
        post = settle(tables, evidence, excluded, hidden=hidden, capped=capped,
                      baseline=baseline, logw=logw)
        self._last = (evidence, post)
        return post

    def standings(self, model: Model, evidence: Evidence, p: np.ndarray) -> Standings:
        """The checks' and the repairs' standing now, P(fix) of each repair, and the repair
        serving each hypothesis (:func:`~diagnose.reasoning.repair_cost.assign_repairs`).

        The same values as :func:`~diagnose.reasoning.eligibility.check_standing`
        and :func:`~diagnose.reasoning.eligibility.repair_standing`; the
        ``code`` of each standing is the base's, the codes now are apart.
        """
        tables = self._tables()
        assert tables is not None
        key = standing_key(model, evidence, self.prerequisites, self.unit_state(model, evidence))
        checks = self._checks.get(key)
        if checks is None:
            checks = _remember(self._checks, key, _frozen(check_base(model, evidence, tables)))
        repairs = self._repairs.get(key)
        if repairs is None:
            repairs = _remember(self._repairs, key, _frozen(repair_base(model, evidence, tables)))
        p_fix = np.bincount(tables.fix_repair, weights=p[tables.fix_hyp],
                            minlength=len(tables.repair_ids))
        rcode = mark_repairs(repairs.code, evidence, tables, p_fix)
        usable = rcode == 0
        akey = (key, usable.tobytes())
        assign = self._assign.get(akey)
        if assign is None:
            assign = assign_repairs(tables, usable, repairs.minutes)
            assign.flags.writeable = False
            _remember(self._assign, akey, assign, self._per_hyp)
        return Standings(checks, mark_answered(checks.code, evidence, tables), repairs, rcode,
                         p_fix, assign)

    def unit_state(self, model: Model, evidence: Evidence) -> Mapping[str, str]:
        """:func:`~diagnose.reasoning.unitstate.unit_state`, memoised by the steps done
        (read only: the value is shared)."""
        steps = evidence.steps
        state = self._states.get(steps)
        if state is None:
            before = self._states.get(steps[:-1]) if steps else None
            if before is None:
                state = MappingProxyType(unit_state(model, evidence))
            else:  # the fold, one step on from the state before the last step
                after = dict(before)
                apply_step(model, after, steps[-1])
                state = before if after == before else MappingProxyType(after)
            _remember(self._states, steps, state)
        return state

    def any_support(self, model: Model, evidence: Evidence, excluded: frozenset[str]) -> bool:
        """Whether some answer points at a known cause the nameplate allows.

        The same as :func:`~diagnose.reasoning.openworld.any_support`, one finding at a time.
        """
        for cid, weights in evidence.findings.items():
            key = (cid, tuple(weights.items()))
            causes = self._support.get(key)
            if causes is None:
                causes = _remember(self._support, key, supported_causes(
                    model, Evidence(findings={cid: weights})))
            if causes - excluded:
                return True
        return False

    def cause_indices(self, causes: frozenset[str]) -> np.ndarray:
        """The indices of ``causes`` in the tables' causes (those it has)."""
        out = self._indices.get(causes)
        if out is None:
            tables = self._tables()
            assert tables is not None
            out = np.array([tables.cause_index[c] for c in causes if c in tables.cause_index],
                           dtype=np.int64)
            out.flags.writeable = False
            _remember(self._indices, causes, out)
        return out

    def neutral(self, model: Model, excluded: frozenset[str]) -> np.ndarray:
        """For each (check, outcome) pair, check by check in the tables' order: True where
        the outcome points at no cause still possible (no cause it lists, outside
        ``excluded``, makes it likelier than normal by the support margin).
        """
        out = self._neutral.get(excluded)
        if out is not None:
            return out
        tables = self._tables()
        assert tables is not None
        flags = []
        for cid in tables.check_ids:
            chk = model.checks[cid]
            for o in tables.checks[cid].outcomes:
                base = chk.normal.get(o, 0.0) * SUPPORT_MARGIN
                flags.append(not any(r.get(o, 0.0) > base for c, r in chk.effects.items()
                                     if c not in excluded))
        out = np.array(flags, dtype=bool)
        out.flags.writeable = False
        return _remember(self._neutral, excluded, out)


_CACHES: weakref.WeakKeyDictionary[Tables, PlanCache] = weakref.WeakKeyDictionary()


def plan_cache(tables: Tables) -> PlanCache:
    """The (cached) :class:`PlanCache` of ``tables``; it lives as long as they do."""
    out = _CACHES.get(tables)
    if out is None:
        out = _CACHES[tables] = PlanCache(tables)
    return out
