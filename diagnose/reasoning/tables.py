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

MAX_HYPOTHESES = 2_000_000  # pairs of ~2,000 causes; beyond that max_faults=2 is refused
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


class Tables:
    """Hypotheses, priors and likelihood tables of one Model (see the module docstring).

    Build with :func:`tables_for`, which caches one per (model, max_faults).
    """

    def __init__(self, model: Model, max_faults: int = 1) -> None:
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
        if max_faults == 2:
            if n * (n - 1) // 2 + n + 1 > MAX_HYPOTHESES:
                raise InputError("max_faults", f"{n} causes are too many for pairs; use 1")
            a, b = np.triu_indices(n, k=1)
            first = np.concatenate([np.arange(n), a, [-1]])
            second = np.concatenate([np.full(n, -1), b, [-1]])
        else:
            first = np.concatenate([np.arange(n), [-1]])
            second = np.full(n + 1, -1)
        self.members = np.stack([first, second], axis=1).astype(np.int64)  # (H, 2), -1 = none
        self.n_hyp = len(first)
        self.unknown = self.n_hyp - 1
        self.log_prior = self._log_prior(model)
        self.checks: dict[str, CheckTable] = {c.id: self._check(c) for c in model.checks.values()}
        self._flatten_checks()
        self._complaints: dict[str, np.ndarray] = {}
        self._logs: dict[tuple[str, str, Any], np.ndarray] = {}  # log-likelihoods, bounded
        self._exclusions: dict[frozenset[str], np.ndarray] = {}  # nameplate exclusions
        # repairs: flattened (repair, hypothesis) pairs of "repair r fixes a cause in h"
        self.repair_ids: tuple[str, ...] = tuple(model.repairs)
        self.repair_index = {r: i for i, r in enumerate(self.repair_ids)}
        self.success = np.array([model.repairs[r].success for r in self.repair_ids], dtype=float)
        self.minutes = np.array([model.repairs[r].minutes for r in self.repair_ids], dtype=float)
        reps, hyps = [], []
        for i, rid in enumerate(self.repair_ids):
            h = self.hypotheses_with(model.repairs[rid].fixes)
            reps.append(np.full(len(h), i))
            hyps.append(h)
        self.fix_repair = np.concatenate(reps) if reps else np.zeros(0, np.int64)
        self.fix_hyp = np.concatenate(hyps) if hyps else np.zeros(0, np.int64)
        self._fixes = {rid: h for rid, h in zip(self.repair_ids, hyps)}
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
        mask = np.isin(self.members[:, 0], idx) | np.isin(self.members[:, 1], idx)
        return np.flatnonzero(mask)

    def hypotheses_within(self, causes: frozenset[str] | set[str]) -> np.ndarray:
        """Indices of the hypotheses (not "unknown") whose every cause is in ``causes``."""
        inside = np.zeros(self.n_causes + 1, dtype=bool)  # last slot: "no second cause"
        inside[-1] = True
        for c in causes:
            if c in self.cause_index:
                inside[self.cause_index[c]] = True
        a, b = self.members[:, 0], self.members[:, 1]
        ok = (a >= 0) & inside[a] & inside[b]
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
        return out

    def _log_prior(self, model: Model) -> np.ndarray:
        prior = np.array([model.causes[c].prior for c in self.causes], dtype=float)
        with np.errstate(divide="ignore"):
            if self.max_faults == 1:
                logp = np.concatenate([np.log(prior), [math.log(model.unknown_prior)]])
            else:
                q = np.clip(prior / PER, 1e-12, 1 - 1e-12)
                lo = np.log(q / (1 - q))
                u = min(max(model.unknown_prior / PER, 1e-12), 1 - 1e-12)
                pairs = self.members[self.n_causes:-1]
                logp = np.concatenate([lo, lo[pairs[:, 0]] + lo[pairs[:, 1]],
                                       [math.log(u / (1 - u))]])
        return logp - _logsumexp(logp)

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
        else:
            exc = np.concatenate([self.hypotheses_with(listed), [self.unknown]]).astype(np.int64)
            cols = []
            for h in exc[:-1]:
                rs = [rowmap[m] for m in self.members[h] if m in rowmap]
                cols.append(sum(rs) / len(rs))
            cols.append(unknown_row)
            rows = np.stack(cols, axis=1)
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


def tables_for(model: Model, max_faults: int = 1) -> Tables:
    """The (cached) tables of ``model``; rebuilt only for a new Model object.

    Raises:
        InputError: ``max_faults`` is not 1 or 2, or too many causes for pairs.
    """
    key = (id(model), max_faults)
    hit = _CACHE.get(key)
    if hit is not None and hit[0]() is model:
        return hit[1]
    tables = Tables(model, max_faults)
    _CACHE[key] = (weakref.ref(model, lambda _ref, key=key: _CACHE.pop(key, None)), tables)
    return tables
