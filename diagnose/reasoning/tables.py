"""The numeric form of a Model for the reasoner: hypotheses, priors and likelihood tables.

Built once per (Model, max_faults) and cached, so that each evidence update
and each planning step is a handful of numpy operations.

Hypotheses (index order): each cause alone (pack listing order); with
``max_faults=2`` then every pair of causes ``{a, b}``; last, ``"unknown"``
("none of the known causes").

Priors (natural log, normalised):

* one fault: ``P(c) ∝ prior_c`` and ``P(unknown) ∝ unknown_prior`` (both per
  1,000 service calls; only ratios matter);
* up to two faults: independent basic events ``q_c = prior_c / 1000`` give
  ``P(h) ∝ Π_{c∈h} q_c / (1 − q_c)``; "unknown" gets ``u / (1 − u)`` with
  ``u = unknown_prior / 1000``.

Likelihoods:

* complaint ``k`` reported: ``1`` when the fault tree of ``k`` holds under
  ``h``, else ``Model.leak``; ``1`` under "unknown";
* check outcome ``o``: the check's row of the cause in ``h``; for a pair, the
  row of the listed cause, the mean of both rows when both are listed,
  ``normal`` when neither is; ``Check.unknown`` under "unknown";
* repair ``r`` done: ``P(not cured | h) = 1 − success`` when ``r`` fixes a
  cause in ``h``, else 1 (and ``P(cured | h)`` the complement).

A check's table is stored sparsely: the ``normal`` row, plus the columns of
the hypotheses whose row differs from it (the *exceptions*; "unknown" is
always one). The planner relies on that: every other hypothesis scales alike.

Pruned pairs. Every pair of 2,000 causes is two million hypotheses; beyond
:data:`PRUNE_ABOVE` of them the tables of two faults are made for the
evidence at hand (:func:`pruned_tables`), and the posterior stays exact. A
cause is *touched* when the evidence names it: it is below a complaint
reported, listed by a check answered, fixed by a repair done, or found on
the unit before. A pair with an untouched member ``b`` explains the
evidence exactly as its other member does alone (``b`` is in no tree of a
complaint reported, on no row of an answer, fixed by no repair done), so
its likelihood is that of the single ``{a}``, and that of "no cause" for
two untouched members. The rule:

* every single cause, and every pair of two touched causes, is a hypothesis
  of its own;
* the pairs of touched ``a`` with an untouched cause are one *lumped*
  hypothesis per class of untouched causes, prior ``o_a · Σ_b o_b`` (``o``
  the odds ``q / (1 − q)``), likelihood that of ``{a}``; the pairs of two
  untouched causes are one per pair of classes, prior ``Σ_{b<c} o_b o_c``.
  The classes are the untouched causes that some available check can still
  observe, and those none can (the open-world rule caps the second kind,
  and a lump caps as each of its pairs would: all have the same ratio of
  posterior to baseline);
* pairs with a cause the nameplate rules out have probability 0 and are
  left out.

So the posterior of every cause, of "unknown" and of every explicit
hypothesis is the one over all pairs, to rounding (the tests compare the
two on small packs to 1e-9). For a check not yet answered, a lump's row is
the prior-weighted mean of its pairs' rows (what the next answer predicts);
a repair counts as curing a lump when it fixes its touched member.

References:
    D. Heckerman, J. S. Breese, K. Rommelse, "Decision-theoretic
    troubleshooting", Communications of the ACM 38(3), 1995 (single-fault
    model with a leak; hypotheses over faulty components).
    W. E. Vesely et al., *Fault Tree Handbook*, NUREG-0492, 1981 (gates;
    independent basic events ``q``).
"""

from __future__ import annotations

import math
import weakref
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from diagnose.errors import InputError
from diagnose.kb.model import PER, UNKNOWN_CAUSE, Check, Model

MAX_HYPOTHESES = 2_000_000  # every pair of ~2,000 causes; beyond that, only pruned pairs
#: Two-fault tables with more hypotheses than this (every pair) are pruned for the evidence.
PRUNE_ABOVE = MAX_HYPOTHESES
_LOG_CACHE = 512  # cached log-likelihood vectors per tables


@dataclass(frozen=True, eq=False)
class CheckTable:
    """Likelihoods of one check's outcomes over all hypotheses, stored sparsely.

    ``rows[o, j]`` is P(outcome o | hypothesis ``exc[j]``); every hypothesis not
    in ``exc`` has ``normal[o]``.
    """

    id: str
    outcomes: tuple[str, ...]
    normal: np.ndarray  # (O,)
    exc: np.ndarray  # (m,) hypothesis indices
    rows: np.ndarray  # (O, m)

    def index(self, outcome: str) -> int:
        return self.outcomes.index(outcome)

    def dense(self, n_hyp: int) -> np.ndarray:
        """The full table, outcomes × hypotheses."""
        out = np.repeat(self.normal[:, None], n_hyp, axis=1)
        out[:, self.exc] = self.rows
        return out

    def likelihood(self, weights: Mapping[str, float], n_hyp: int) -> np.ndarray:
        """Σ_o w_o · P(o | h) for every hypothesis h (soft evidence; hard is one weight of 1)."""
        w = np.zeros(len(self.outcomes))
        for outcome, weight in weights.items():
            w[self.outcomes.index(outcome)] = weight
        out = np.full(n_hyp, float(w @ self.normal))
        out[self.exc] = w @ self.rows
        return out


@dataclass(frozen=True, eq=False)
class PairPlan:
    """Which pairs pruned two-fault tables hold (see "Pruned pairs" in the module docstring).

    ``touched``: indices of the touched causes the nameplate allows, ascending
    (every pair of them is a hypothesis); ``classes``: the untouched causes it
    allows, one index array per class; ``explicit``: the touched causes' ids.
    """

    touched: np.ndarray
    classes: tuple[np.ndarray, ...]
    explicit: frozenset[str]
    key: tuple[Any, ...] = ()


class Tables:
    """Hypotheses, priors and likelihood tables of one Model (see the module docstring).

    Build with :func:`tables_for`, which caches one per (model, max_faults), or with
    :func:`pruned_tables` (``plan``: the pairs of the evidence at hand).
    """

    def __init__(self, model: Model, max_faults: int = 1, plan: PairPlan | None = None) -> None:
        if max_faults not in (1, 2):
            raise InputError("max_faults", f"expected 1 or 2, got {max_faults}")
        # no strong reference: the cache must not keep models alive
        self._model = weakref.ref(model)
        self.leak = float(model.leak)
        self.max_faults = max_faults
        self.causes: tuple[str, ...] = tuple(model.causes)
        self.cause_index = {c: i for i, c in enumerate(self.causes)}
        n = len(self.causes)
        self.n_causes = n
        self.plan = plan
        # lumped pairs (pruned tables only): class of the untouched member(s), -1 for none
        self.lump = np.zeros((0, 2), dtype=np.int64)
        self.lump_start = 0
        if plan is not None:
            if max_faults != 2:
                raise InputError("max_faults", "pruned tables are for two faults")
            first, second = self._pruned_members(plan)
        elif max_faults == 2:
            if n * (n - 1) // 2 + n + 1 > MAX_HYPOTHESES:
                raise InputError("max_faults", f"{n} causes are too many for pairs; use 1")
            a, b = np.triu_indices(n, k=1)
            first = np.concatenate([np.arange(n), a, [-1]])
            second = np.concatenate([np.full(n, -1), b, [-1]])
        else:
            first = np.concatenate([np.arange(n), [-1]])
            second = np.full(n + 1, -1)
        self.members = np.stack([first, second], axis=1).astype(np.int64)  # (H, 2), -1 = none
        if plan is None:
            self.lump = np.full((len(first), 2), -1, dtype=np.int64)
        self.n_hyp = len(first)
        self.unknown = self.n_hyp - 1
        self.log_prior = self._log_prior(model)
        self.checks: dict[str, CheckTable] = (
            self._pruned_checks(model) if plan is not None
            else {c.id: self._check(c) for c in model.checks.values()})
        self._flatten_checks()
        self._complaints: dict[str, np.ndarray] = {}
        self._logs: dict[tuple[str, str, Any], np.ndarray] = {}  # log-likelihoods, bounded
        self._exclusions: dict[frozenset[str], np.ndarray] = {}  # nameplate exclusions
        # repairs: flattened (repair, hypothesis) pairs of "repair r fixes a cause in h"
        self.repair_ids: tuple[str, ...] = tuple(model.repairs)
        self.repair_index = {r: i for i, r in enumerate(self.repair_ids)}
        self.success = np.array([model.repairs[r].success for r in self.repair_ids], dtype=float)
        self.minutes = np.array([model.repairs[r].minutes for r in self.repair_ids], dtype=float)
        self.fix_repair, self.fix_hyp = self._fix_pairs(model)
        cut = np.searchsorted(self.fix_repair, np.arange(len(self.repair_ids) + 1))
        self._fixes = {rid: self.fix_hyp[cut[i]: cut[i + 1]]
                       for i, rid in enumerate(self.repair_ids)}
        # static facts the planner filters on, as arrays in check / repair order
        chks = [model.checks[c] for c in self.check_ids]
        self.check_minutes = np.array([c.minutes for c in chks], dtype=float)
        self.check_phone = np.array([c.where == "phone" for c in chks], dtype=bool)
        self.check_prep = np.array([bool(c.preparation) for c in chks], dtype=bool)
        self.check_one_outcome = np.array([len(c.outcomes) < 2 for c in chks], dtype=bool)
        self.checks_only_if = tuple(i for i, c in enumerate(chks)
                                    if c.only_if or getattr(c, "hidden", False))
        self.check_needs = tuple(tuple(c.needs) for c in chks)
        self.checks_needing = tuple(i for i, c in enumerate(chks) if c.needs)
        reps = [model.repairs[r] for r in self.repair_ids]
        self.repair_phone = np.array([r.where == "phone" for r in reps], dtype=bool)
        self.repair_needs = tuple(tuple(r.needs) for r in reps)
        self.repairs_needing = tuple(i for i, r in enumerate(reps) if r.needs)
        self.repairs_only_if = tuple(i for i, r in enumerate(reps) if r.only_if)
        self.checks_requiring = tuple(i for i, c in enumerate(chks) if c.requires)
        waits = {h.id for h in model.hazards.values() if h.withhold_until}
        self.checks_withheld = tuple(i for i, c in enumerate(chks) if waits & set(c.hazards))
        self.repairs_withheld = tuple(i for i, r in enumerate(reps) if waits & set(r.hazards))
        self.checks_hazardous = tuple(i for i, c in enumerate(chks) if c.hazards)
        self.repairs_hazardous = tuple(i for i, r in enumerate(reps) if r.hazards)

    @property
    def model(self) -> Model:
        model = self._model()
        if model is None:  # pragma: no cover - tables outlived their model
            raise RuntimeError("the model of these tables is gone")
        return model

    # --- hypotheses ----------------------------------------------------------------------
    def label(self, h: int) -> str:
        """"coil_open", "coil_open+fuse_blown" or "unknown"."""
        a, b = self.members[h]
        if self.plan is not None and self.lump_start <= h < len(self.members) - 1:
            return self._lump_label(h)
        if a < 0:
            return UNKNOWN_CAUSE
        if b < 0:
            return self.causes[a]
        return f"{self.causes[a]}+{self.causes[b]}"

    def hypotheses_with(self, causes: tuple[str, ...] | list[str]) -> np.ndarray:
        """Indices of the hypotheses holding at least one of ``causes``."""
        idx = [self.cause_index[c] for c in causes if c in self.cause_index]
        if not idx:
            return np.zeros(0, np.int64)
        if self.max_faults == 1:  # hypothesis i is cause i
            return np.array(sorted(set(idx)), dtype=np.int64)
        start, order = self._by_cause()
        if len(idx) == 1:
            return order[start[idx[0]]: start[idx[0] + 1]].copy()
        return np.unique(np.concatenate([order[start[i]: start[i + 1]] for i in idx]))

    def _fix_pairs(self, model: Model) -> tuple[np.ndarray, np.ndarray]:
        """(repair, hypothesis) for each hypothesis holding a cause the repair fixes, sorted."""
        rc = [(i, self.cause_index[c]) for i, rid in enumerate(self.repair_ids)
              for c in dict.fromkeys(model.repairs[rid].fixes) if c in self.cause_index]
        if not rc:
            return np.zeros(0, np.int64), np.zeros(0, np.int64)
        rep, cause = np.array(rc, dtype=np.int64).T
        if self.max_faults == 1:
            key = np.unique(rep * self.n_hyp + cause)
        else:
            start, order = self._by_cause()
            counts = start[cause + 1] - start[cause]
            firsts = np.repeat(start[cause], counts)
            within = np.arange(counts.sum()) - np.repeat(np.cumsum(counts) - counts, counts)
            key = np.unique(np.repeat(rep, counts) * self.n_hyp + order[firsts + within])
        return key // self.n_hyp, key % self.n_hyp

    def _by_cause(self) -> tuple[np.ndarray, np.ndarray]:
        """The hypotheses holding each cause, ascending: ``order[start[c]:start[c + 1]]``."""
        found = getattr(self, "_index", None)
        if found is None:
            m = self.members
            cause = np.concatenate([m[:, 0], m[:, 1]])
            hyp = np.concatenate([np.arange(len(m)), np.arange(len(m))])
            ok = cause >= 0
            cause, hyp = cause[ok], hyp[ok]
            order = np.lexsort((hyp, cause))
            start = np.searchsorted(cause[order], np.arange(self.n_causes + 1))
            found = self._index = (start, hyp[order])
        return found

    def hypotheses_within(self, causes: frozenset[str] | set[str]) -> np.ndarray:
        """Indices of the hypotheses (not "unknown") whose every cause is in ``causes``."""
        inside = np.zeros(self.n_causes + 1, dtype=bool)  # last slot: "no second cause"
        inside[-1] = True
        for c in causes:
            if c in self.cause_index:
                inside[self.cause_index[c]] = True
        a, b = self.members[:, 0], self.members[:, 1]
        ok = (a >= 0) & inside[a] & inside[b]
        if self.plan is not None:  # a lump is within when its classes are, all of them
            whole = np.array([bool(inside[c].all()) for c in self.plan.classes] + [True])
            k1, k2 = self.lump[:, 0], self.lump[:, 1]
            lumped = k1 >= 0
            ok = np.where(lumped, ((a >= 0) | (k2 >= 0)) & inside[a] & whole[k1] & whole[k2],
                          ok)
            ok[self.unknown] = False
        return np.flatnonzero(ok)

    def exclusion(self, causes: frozenset[str]) -> np.ndarray:
        """0 for every hypothesis, −inf for those holding a cause in ``causes`` (cached)."""
        vec = self._exclusions.get(causes)
        if vec is None:
            if len(self._exclusions) >= 64:
                self._exclusions.clear()
            vec = np.zeros(self.n_hyp)
            vec[self.hypotheses_with(sorted(causes))] = -np.inf
            vec.flags.writeable = False
            self._exclusions[causes] = vec
        return vec

    def repair_hypotheses(self, repair: str) -> np.ndarray:
        """Indices of the hypotheses in which ``repair`` fixes a present cause."""
        return self._fixes[repair]

    def cause_marginals(self, p: np.ndarray) -> np.ndarray:
        """P(cause present) for each cause, from hypothesis probabilities ``p``."""
        out = np.zeros(self.n_causes)
        for col in (0, 1):
            m = self.members[:, col]
            ok = m >= 0
            out += np.bincount(m[ok], weights=p[ok], minlength=self.n_causes)
        if self.plan is not None:
            self._lump_marginals(p, out)
        return out

    def top_hypotheses(self, p: np.ndarray, limit: int) -> list[tuple[str, float]]:
        """The ``limit`` most likely hypotheses as (label, p), ties in the order of every pair.

        A lump stands for its pairs: each is as likely as its share of the prior.
        """
        if self.plan is None:
            order = np.argsort(-p, kind="stable")[:limit]
            return [(self.label(int(h)), float(p[h])) for h in order]
        found: list[tuple[float, int, str]] = []
        head = np.argsort(-p[: self.lump_start], kind="stable")[:limit]
        for h in head:
            a, b = (int(x) for x in self.members[h])
            found.append((float(p[h]), self._full_index(a, b), self.label(int(h))))
        found.append((float(p[self.unknown]), 1 << 62, UNKNOWN_CAUSE))
        for h in range(self.lump_start, self.unknown):
            for a, b, share in self._lump_members(h, limit):
                found.append((float(p[h]) * share, self._full_index(a, b),
                              f"{self.causes[min(a, b)]}+{self.causes[max(a, b)]}"))
        found.sort(key=lambda x: (-x[0], x[1]))
        return [(label, q) for q, _, label in found[:limit]]

    def _log_prior(self, model: Model) -> np.ndarray:
        prior = np.array([model.causes[c].prior for c in self.causes], dtype=float)
        with np.errstate(divide="ignore"):
            if self.max_faults == 1:
                logp = np.concatenate([np.log(prior), [math.log(model.unknown_prior)]])
            else:
                q = np.clip(prior / PER, 1e-12, 1 - 1e-12)
                lo = np.log(q / (1 - q))
                u = min(max(model.unknown_prior / PER, 1e-12), 1 - 1e-12)
                pairs = self.members[self.n_causes: self.lump_start or -1]
                lumps = [self._lump_log_prior(h, lo) for h in range(self.lump_start,
                                                                     self.n_hyp - 1)
                         ] if self.plan is not None else []
                logp = np.concatenate([lo, lo[pairs[:, 0]] + lo[pairs[:, 1]], lumps,
                                       [math.log(u / (1 - u))]])
        return logp - _logsumexp(logp)

    # --- pruned pairs ----------------------------------------------------------------------
    def _pruned_members(self, plan: PairPlan) -> tuple[np.ndarray, np.ndarray]:
        """Members of the hypotheses: singles, pairs of touched causes, lumps, "unknown"."""
        n, t = self.n_causes, plan.touched
        i, j = np.triu_indices(len(t), k=1)
        k = len(plan.classes)
        a_touched = np.repeat(t, k)  # lump (a, class): a with one untouched cause of the class
        a_class = np.tile(np.arange(k), len(t))
        b_pairs = [(x, y) for x in range(k) for y in range(x, k)
                   if x != y or len(plan.classes[x]) >= 2]  # two untouched causes
        self.lump_start = n + len(i)
        self.lump = np.full((self.lump_start + len(a_touched) + len(b_pairs) + 1, 2), -1,
                            dtype=np.int64)
        self.lump[self.lump_start: self.lump_start + len(a_touched), 0] = a_class
        if b_pairs:
            self.lump[self.lump_start + len(a_touched): -1] = np.array(b_pairs)
        prior = np.array([self.model.causes[c].prior for c in self.causes], dtype=float)
        q = np.clip(prior / PER, 1e-12, 1 - 1e-12)
        odds = q / (1 - q)
        self.odds = odds
        self._class_order: dict[int, np.ndarray] = {}
        self.t_pos = np.full(n, -1, dtype=np.int64)  # each cause's place among the touched
        self.t_pos[t] = np.arange(len(t))
        self.pair_local = (i, j)  # the pairs' members as places among the touched
        self.class_sum = np.array([odds[c].sum() for c in plan.classes] + [0.0])
        self.class_sq = np.array([(odds[c] ** 2).sum() for c in plan.classes] + [0.0])
        self.class_of = np.full(n, -1, dtype=np.int64)
        for x, c in enumerate(plan.classes):
            self.class_of[c] = x
        nb = len(b_pairs)
        single = np.arange(self.lump_start, self.lump_start + len(a_touched))
        self.lump_single = (single, np.repeat(np.arange(len(t)), k), a_class)
        self.lump_double = np.arange(self.lump_start + len(a_touched),
                                     self.lump_start + len(a_touched) + nb)
        first = np.concatenate([np.arange(n), t[i], a_touched, np.full(nb, -1), [-1]])
        second = np.concatenate([np.full(n, -1), t[j], np.full(len(a_touched) + nb, -1), [-1]])
        return first, second

    def _lump_weight(self, h: int) -> float:
        """Σ over the lump's pairs of the product of the untouched members' odds."""
        k1, k2 = (int(x) for x in self.lump[h])
        if k2 < 0:
            return float(self.class_sum[k1])
        if k1 == k2:
            return float((self.class_sum[k1] ** 2 - self.class_sq[k1]) / 2)
        return float(self.class_sum[k1] * self.class_sum[k2])

    def _lump_log_prior(self, h: int, lo: np.ndarray) -> float:
        a = int(self.members[h, 0])
        return (float(lo[a]) if a >= 0 else 0.0) + math.log(self._lump_weight(h))

    def _lump_label(self, h: int) -> str:
        a = int(self.members[h, 0])
        k1, k2 = (int(x) for x in self.lump[h])
        sizes = [len(self.plan.classes[k]) for k in (k1, k2) if k >= 0]  # type: ignore[union-attr]
        if a >= 0:
            return f"{self.causes[a]}+one of {sizes[0]} others"
        if k1 == k2:
            return f"two of {sizes[0]} others"
        return f"one of {sizes[0]} others+one of {sizes[1]} others"

    def _lump_marginals(self, p: np.ndarray, out: np.ndarray) -> None:
        """Add to ``out`` each untouched cause's share of the lumps' probability."""
        plan = self.plan
        assert plan is not None
        for h in range(self.lump_start, self.unknown):
            k1, k2 = (int(x) for x in self.lump[h])
            ph = float(p[h])
            if ph == 0.0:
                continue
            c1, o1 = plan.classes[k1], self.odds[plan.classes[k1]]
            if k2 < 0 or k1 != k2:
                out[c1] += ph * o1 / self.class_sum[k1]
                if k2 >= 0:
                    out[plan.classes[k2]] += ph * self.odds[plan.classes[k2]] / self.class_sum[k2]
            else:
                out[c1] += ph * o1 * (self.class_sum[k1] - o1) / self._lump_weight(h)

    def _full_index(self, a: int, b: int) -> int:
        """The index of a hypothesis among every single and every pair (ties as they would be)."""
        if b < 0:
            return a
        a, b = min(a, b), max(a, b)
        n = self.n_causes
        return n + a * n - a * (a + 1) // 2 + (b - a - 1)

    def _lump_members(self, h: int, limit: int) -> list[tuple[int, int, float]]:
        """The ``limit`` likeliest pairs of lump ``h`` as (a, b, share of the lump)."""
        plan = self.plan
        assert plan is not None
        a = int(self.members[h, 0])
        k1, k2 = (int(x) for x in self.lump[h])
        weight = self._lump_weight(h)

        def best(k: int, m: int) -> np.ndarray:
            order = self._class_order.get(k)
            if order is None:  # the class by odds, most likely first (then pack order)
                c = plan.classes[k]
                order = self._class_order[k] = c[np.lexsort((c, -self.odds[c]))]
            return order[:m]

        if a >= 0:
            return [(a, int(b), float(self.odds[b] / weight)) for b in best(k1, limit)]
        top1 = best(k1, limit + 1)
        top2 = top1 if k1 == k2 else best(k2, limit + 1)
        out = [(int(x), int(y), float(self.odds[x] * self.odds[y] / weight))
               for x in top1 for y in top2 if (x < y if k1 == k2 else True)]
        return out

    def _pruned_checks(self, model: Model) -> dict[str, CheckTable]:
        """Every check's table in pruned tables, all checks at once (as :meth:`_pruned_check`).

        The rows of the single causes come from the one-fault tables of the model.
        """
        plan = self.plan
        assert plan is not None
        one = tables_for(model, 1)
        n, n_t, k = self.n_causes, len(plan.touched), len(plan.classes)
        n_k, width = len(one.check_ids), one.check_normal.shape[1]
        normal = one.check_normal
        cause_rows = one.ex_hyp < n
        e_k, e_c, e_rows = one.ex_check[cause_rows], one.ex_hyp[cause_rows], one.ex_rows[cause_rows]
        unknown_rows = np.zeros((n_k, width))
        unknown_rows[one.ex_check[~cause_rows]] = one.ex_rows[~cause_rows]
        ks, hs, rows = [e_k], [e_c], [e_rows]  # the single causes listed
        # pairs of touched causes: the listed member's row, the mean of both when both are
        e_t = self.t_pos[e_c]
        te = np.flatnonzero(e_t >= 0)
        entry = np.full((n_k, max(n_t, 1)), -1, dtype=np.int64)
        entry[e_k[te], e_t[te]] = te
        if len(te) and n_t > 1:
            src = np.repeat(te, n_t)
            other_pos = np.tile(np.arange(n_t), len(te))
            kk, a_pos = e_k[src], e_t[src]
            other = entry[kk, other_pos]
            keep = (other_pos != a_pos) & ((other < 0) | (a_pos < other_pos))
            src, kk, a_pos, other_pos, other = (x[keep] for x in (src, kk, a_pos, other_pos,
                                                                   other))
            both = other >= 0
            ra = e_rows[src]
            rb = np.where(both[:, None], e_rows[np.where(both, other, 0)], 0.0)
            wb = both[:, None].astype(float)
            i, j = np.minimum(a_pos, other_pos), np.maximum(a_pos, other_pos)
            ks.append(kk)
            hs.append(n + i * n_t - i * (i + 1) // 2 + (j - i - 1))
            rows.append((ra + wb * rb) / (1.0 + wb))
        # the listed causes of each class, per check: Σ o, Σ o·row, Σ o², Σ o²·row
        x_of = self.class_of[e_c]
        inc = np.flatnonzero(x_of >= 0)
        key = e_k[inc] * (k + 1) + x_of[inc]
        o = self.odds[e_c[inc]]
        size = n_k * (k + 1)
        s_l = np.bincount(key, weights=o, minlength=size).reshape(n_k, k + 1)
        q_l = np.bincount(key, weights=o * o, minlength=size).reshape(n_k, k + 1)
        r_l = np.zeros((n_k, k + 1, width))
        qr_l = np.zeros((n_k, k + 1, width))
        for col in range(width):
            r_l[:, :, col] = np.bincount(key, weights=o * e_rows[inc, col],
                                         minlength=size).reshape(n_k, k + 1)
            qr_l[:, :, col] = np.bincount(key, weights=o * o * e_rows[inc, col],
                                          minlength=size).reshape(n_k, k + 1)
        # a touched cause with one untouched cause of a class
        if n_t and k:
            kk, xx = np.nonzero(s_l[:, :k] != 0.0)
            kk, xx = np.repeat(kk, n_t), np.repeat(xx, n_t)
            a_pos = np.tile(np.arange(n_t), len(kk) // n_t if n_t else 0)
            lk, lx = np.nonzero(s_l[:, :k] == 0.0)  # also where only the touched one is listed
            lte = entry[lk] if len(lk) else np.zeros((0, n_t), dtype=np.int64)
            li, lp = np.nonzero(lte >= 0)
            kk = np.concatenate([kk, lk[li]])
            xx = np.concatenate([xx, lx[li]])
            a_pos = np.concatenate([a_pos, lp])
            ent = entry[kk, a_pos]
            on_a = (ent >= 0)[:, None]
            own = np.where(on_a, e_rows[np.where(ent >= 0, ent, 0)], normal[kk])
            sk, sc, rk = s_l[kk, xx][:, None], self.class_sum[xx][:, None], r_l[kk, xx]
            rest = np.where(on_a, (sk * own + rk) / 2, rk)
            ks.append(kk)
            hs.append(self.lump_start + a_pos * k + xx)
            rows.append(np.where(sk == 0.0, own, ((sc - sk) * own + rest) / sc))
        # two untouched causes
        self._double_lump_rows(normal, sums=(s_l, r_l, q_l, qr_l), out=(ks, hs, rows))
        ks.append(np.arange(n_k))
        hs.append(np.full(n_k, self.unknown))
        rows.append(unknown_rows)
        return _split_by_check(one, ks, hs, rows)

    def _double_lump_rows(self, normal: np.ndarray, *, sums: tuple[np.ndarray, ...],
                          out: tuple[list[Any], list[Any], list[Any]]) -> None:
        """The rows of the lumps of two untouched causes, added to ``out`` (checks, hyps, rows).

        ``sums`` are the per-check, per-class sums of the listed causes: Σ o, Σ o·row,
        Σ o², Σ o²·row (as in :meth:`_pruned_checks`).
        """
        s_l, r_l, q_l, qr_l = sums
        ks, hs, rows = out
        for h in self.lump_double:
            k1, k2 = (int(x) for x in self.lump[h])
            kk = np.flatnonzero((s_l[:, k1] != 0.0) | (s_l[:, k2] != 0.0))
            if not len(kk):
                continue
            s1, s2 = s_l[kk, k1][:, None], s_l[kk, k2][:, None]
            r1, r2 = r_l[kk, k1], r_l[kk, k2]
            n1, n2 = self.class_sum[k1] - s1, self.class_sum[k2] - s2
            if k1 == k2:
                none = (n1 * n1 - (self.class_sq[k1] - q_l[kk, k1][:, None])) / 2
                row = none * normal[kk] + r1 * n1 + (s1 * r1 - qr_l[kk, k1]) / 2
            else:
                row = n1 * n2 * normal[kk] + r1 * n2 + n1 * r2 + (r1 * s2 + s1 * r2) / 2
            ks.append(kk)
            hs.append(np.full(len(kk), h))
            rows.append(row / self._lump_weight(int(h)))

    # --- likelihood tables -----------------------------------------------------------
    def _check(self, check: Check) -> CheckTable:
        outcomes = tuple(check.outcomes)
        normal = np.array([check.normal.get(o, 0.0) for o in outcomes], dtype=float)
        listed = [c for c in check.effects if c in self.cause_index]
        rowmap = {self.cause_index[c]: np.array([check.effects[c].get(o, 0.0) for o in outcomes])
                  for c in listed}
        unknown_row = np.array([check.unknown.get(o, 0.0) for o in outcomes], dtype=float)
        if self.max_faults == 1:
            exc = np.array(sorted(rowmap) + [self.unknown], dtype=np.int64)
            cols = [rowmap[i] for i in sorted(rowmap)] + [unknown_row]
            rows = np.stack(cols, axis=1)
        else:  # every pair: the listed member's row, the mean of both rows when both are
            n = self.n_causes
            full = np.repeat(normal[None, :], n + 1, axis=0)  # the last: "no cause" (-1)
            on = np.zeros(n + 1, dtype=bool)
            for i, row in rowmap.items():
                full[i], on[i] = row, True
            a, b = self.members[:, 0], self.members[:, 1]
            la, lb = on[a], on[b]
            sel = np.flatnonzero(la | lb)
            wa, wb = la[sel, None].astype(float), lb[sel, None].astype(float)
            pairs = (wa * full[a[sel]] + wb * full[b[sel]]) / (wa + wb)
            exc = np.concatenate([sel, [self.unknown]]).astype(np.int64)
            rows = np.concatenate([pairs, unknown_row[None, :]], axis=0).T
        return CheckTable(check.id, outcomes, normal, exc, rows)

    def _flatten_checks(self) -> None:
        """All check tables in flat arrays, for the planner's vectorised look-ahead.

        ``check_normal[k, o]`` (outcomes padded with 0); exception ``x`` of check
        ``ex_check[x]`` is hypothesis ``ex_hyp[x]`` with row ``ex_rows[x, o]``.
        """
        tabs = list(self.checks.values())
        self.check_ids = tuple(t.id for t in tabs)
        self.check_pos = {cid: i for i, cid in enumerate(self.check_ids)}
        width = max((len(t.outcomes) for t in tabs), default=1)
        self.check_outcomes = np.array([len(t.outcomes) for t in tabs], dtype=np.int64)
        self.check_normal = np.zeros((len(tabs), width))
        rows, checks, hyps = [], [], []
        for i, t in enumerate(tabs):
            self.check_normal[i, : len(t.outcomes)] = t.normal
            padded = np.zeros((len(t.exc), width))
            padded[:, : len(t.outcomes)] = t.rows.T
            rows.append(padded)
            checks.append(np.full(len(t.exc), i, dtype=np.int64))
            hyps.append(t.exc)
        self.ex_check = np.concatenate(checks) if checks else np.zeros(0, np.int64)
        self.ex_hyp = np.concatenate(hyps) if hyps else np.zeros(0, np.int64)
        self.ex_rows = np.concatenate(rows) if rows else np.zeros((0, width))

    def complaint(self, complaint: str) -> np.ndarray:
        """P(complaint reported | h) for every hypothesis: 1 where its tree holds, else leak."""
        vec = self._complaints.get(complaint)
        if vec is None:
            if self.plan is not None and not set(self.model.tree_causes(complaint)) <= \
                    self.plan.explicit:
                raise InputError("complaint", f"{complaint!r} was not reported when these "
                                              "pruned tables were made")
            holds = self._holds(complaint, {})
            vec = np.where(holds, 1.0, self.leak)
            vec[self.unknown] = 1.0
            self._complaints[complaint] = vec
        return vec

    def log_likelihood(self, kind: str, id: str, value: Any) -> np.ndarray | None:
        """The cached log-likelihood vector of one hard piece of evidence, or None if not cached.

        ``kind``: "complaint", "finding" (value: the outcome) or "repair" (value: cured).
        """
        return self._logs.get((kind, id, value))

    def remember(self, kind: str, id: str, value: Any, logs: np.ndarray) -> np.ndarray:
        if len(self._logs) >= _LOG_CACHE:
            self._logs.clear()  # bounded: a long simulation touches every outcome
        logs.flags.writeable = False
        self._logs[(kind, id, value)] = logs
        return logs

    def _holds(self, node: str, memo: dict[str, np.ndarray]) -> np.ndarray:
        """Whether ``node`` occurs under each hypothesis (the fault tree, vectorised)."""
        if node in memo:
            return memo[node]
        model = self.model
        if node in self.cause_index:
            i = self.cause_index[node]
            out = (self.members[:, 0] == i) | (self.members[:, 1] == i)
        else:
            gate = model.complaints[node].gate if node in model.complaints else model.events[node]
            count = np.zeros(self.n_hyp, dtype=np.int64)
            for x in gate.inputs:
                count += self._holds(x, memo)
            if gate.kind == "or":
                out = count >= 1
            elif gate.kind == "and":
                out = count == len(gate.inputs)
            else:
                out = count >= gate.k
        memo[node] = out
        return out


def _logsumexp(x: np.ndarray) -> float:
    m = float(np.max(x))
    if not math.isfinite(m):
        return m
    return m + math.log(float(np.sum(np.exp(x - m))))


_CACHE: dict[tuple[int, int], tuple[weakref.ref, Tables]] = {}


def tables_for(model: Model, max_faults: int = 1, evidence: Any = None, *,
               prune: bool | None = None) -> Tables:
    """The (cached) tables of ``model``; rebuilt only for a new Model object.

    With two faults and ``evidence``, the tables are :func:`pruned_tables` when
    every pair would make more than :data:`PRUNE_ABOVE` hypotheses (or when
    ``prune`` is True; never when it is False).

    Raises:
        InputError: ``max_faults`` is not 1 or 2, or too many causes for every pair.
    """
    if max_faults == 2 and evidence is not None and prune is not False:
        n = len(model.causes)
        if prune or n * (n - 1) // 2 + n + 1 > PRUNE_ABOVE:
            return pruned_tables(model, evidence)
    key = (id(model), max_faults)
    hit = _CACHE.get(key)
    if hit is not None and hit[0]() is model:
        return hit[1]
    tables = Tables(model, max_faults)
    _CACHE[key] = (weakref.ref(model, lambda _ref, key=key: _CACHE.pop(key, None)), tables)
    return tables


_PRUNED: dict[tuple[Any, ...], tuple[weakref.ref, Tables]] = {}
#: Pruned tables kept (a session's evidence changes at each step; a few are asked again).
_PRUNED_KEPT = 8


def pair_plan(model: Model, evidence: Any) -> PairPlan:
    """The pairs that pruned tables hold for ``evidence`` (see the module docstring)."""
    from diagnose.reasoning.nameplate import excluded_causes
    from diagnose.reasoning.openworld import unobservable_causes

    touched: set[str] = set()
    for k in evidence.complaints:
        if k in model.complaints:
            touched.update(model.tree_causes(k))
    for cid in evidence.findings:
        chk = model.checks.get(cid)
        if chk is not None:
            touched.update(chk.effects)
    for rid, _ in evidence.repairs:
        rep = model.repairs.get(rid)
        if rep is not None:
            touched.update(rep.fixes)
    touched.update(evidence.history)
    excluded = excluded_causes(model, evidence)
    unseen = unobservable_causes(model, evidence)
    order = {c: i for i, c in enumerate(model.causes)}
    mine = np.array(sorted(order[c] for c in touched - excluded if c in order), dtype=np.int64)
    rest = [c for c in model.causes if c not in touched and c not in excluded]
    classes = tuple(np.array([order[c] for c in group], dtype=np.int64)
                    for group in ([c for c in rest if c in unseen],
                                  [c for c in rest if c not in unseen]) if group)
    key = (tuple(mine.tolist()), tuple(tuple(c.tolist()) for c in classes))
    return PairPlan(mine, classes, frozenset(touched), key)


def pruned_tables(model: Model, evidence: Any) -> Tables:
    """Two-fault tables with the pairs that matter for ``evidence`` (cached by those pairs)."""
    plan = pair_plan(model, evidence)
    key = (id(model), plan.key)
    hit = _PRUNED.get(key)
    if hit is not None and hit[0]() is model:
        return hit[1]
    tables = Tables(model, 2, plan)
    while len(_PRUNED) >= _PRUNED_KEPT:
        _PRUNED.pop(next(iter(_PRUNED)))
    _PRUNED[key] = (weakref.ref(model), tables)
    return tables


def _split_by_check(one: Any, ks: list[Any], hs: list[Any], rows: list[Any]
                    ) -> dict[str, CheckTable]:
    """The rows gathered for every check (``ks``, ``hs``, ``rows``) as each check's table."""
    n_k = len(one.check_ids)
    all_k, all_h = np.concatenate(ks), np.concatenate(hs).astype(np.int64)
    all_rows = np.concatenate(rows, axis=0)
    order = np.lexsort((all_h, all_k))
    all_k, all_h, all_rows = all_k[order], all_h[order], all_rows[order]
    cut = np.searchsorted(all_k, np.arange(n_k + 1))
    out = {}
    for i, cid in enumerate(one.check_ids):
        t1 = one.checks[cid]
        width_i = len(t1.outcomes)
        out[cid] = CheckTable(cid, t1.outcomes, t1.normal, all_h[cut[i]: cut[i + 1]],
                              all_rows[cut[i]: cut[i + 1], :width_i].T.copy())
    return out
