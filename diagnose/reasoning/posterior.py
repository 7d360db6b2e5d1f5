"""The posterior over hypotheses: Bayes' rule, exact for the model, in log space.

    log P(h | e) = log P(h) + Σ_items log P(item | h) − log Z

over the hypotheses of :mod:`diagnose.reasoning.tables`. The items are the
complaints reported, the check findings (soft evidence Σ_o w_o·P(o|h); "unsure"
carries none) and the repairs done. ``Z`` normalises; working in logs keeps
long sessions from underflowing.

When every hypothesis is ruled out (a probability of exactly 0 somewhere in
each), the evidence fits nothing: the posterior puts all mass on "unknown"
and says so with ``contradiction``.

Two rules about this unit come on top of Bayes' rule:

* a cause the nameplate rules out (``only_if``, see
  :mod:`diagnose.reasoning.nameplate`) has prior 0 and leaves the ranking;
* the open-world rule (:mod:`diagnose.reasoning.openworld`): a cause that no
  available check can observe keeps at most its probability from the
  complaint alone, and the rest goes to "none of the known causes".

References:
    J. Pearl, *Probabilistic Reasoning in Intelligent Systems*, Morgan
    Kaufmann, 1988, 2.2.2 (virtual evidence: likelihood Σ_o w_o P(o|h)).
    D. Heckerman, J. S. Breese, K. Rommelse, "Decision-theoretic
    troubleshooting", CACM 38(3), 1995.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterator
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from diagnose.errors import InputError
from diagnose.kb.model import UNKNOWN_CAUSE, Model
from diagnose.reasoning.evidence import Evidence
from diagnose.reasoning.nameplate import excluded_causes
from diagnose.reasoning.openworld import cap_unobservable, unobservable_causes
from diagnose.reasoning.tables import Tables, tables_for


@dataclass(frozen=True)
class Item:
    """One piece of evidence and its likelihood under every hypothesis."""

    kind: str  # "complaint" | "finding" | "repair" | "history"
    id: str  # complaint, check or repair id
    value: str  # outcome (or "a:0.6, b:0.4"), "reported", "cured" / "not cured"
    likelihood: np.ndarray  # (H,)

    @property
    def label(self) -> str:
        if self.kind == "complaint":
            return f"complaint {self.id}"
        if self.kind == "history":
            return f"found on this unit before: {self.id} ({self.value})"
        return f"{self.id} = {self.value}"


def evidence_items(tables: Tables, evidence: Evidence) -> Iterator[Item]:
    """The likelihood vector of each complaint, finding and repair in ``evidence``.

    Raises:
        InputError: an id the model does not know, or an outcome its check lacks.
    """
    model = tables.model
    for k in evidence.complaints:
        if k not in model.complaints:
            raise InputError("complaint", f"unknown complaint {k!r}")
        yield Item("complaint", k, "reported", tables.complaint(k))
    for cid, weights in evidence.findings.items():
        table = tables.checks.get(cid)
        if table is None:
            raise InputError("check", f"unknown check {cid!r}")
        bad = [o for o in weights if o not in table.outcomes]
        if bad:
            raise InputError(cid, f"{bad[0]!r} is not an outcome; expected one of "
                                  f"{', '.join(table.outcomes)}")
        value = next(iter(weights)) if len(weights) == 1 else \
            ", ".join(f"{o}:{w:.2f}" for o, w in weights.items())
        yield Item("finding", cid, value, table.likelihood(weights, tables.n_hyp))
    for rid, cured in evidence.repairs:
        if rid not in tables.repair_index:
            raise InputError("repair", f"unknown repair {rid!r}")
        s = tables.success[tables.repair_index[rid]]
        vec = np.zeros(tables.n_hyp) if cured else np.ones(tables.n_hyp)
        vec[tables.repair_hypotheses(rid)] = s if cured else 1.0 - s
        yield Item("repair", rid, "cured" if cured else "not cured", vec)
    for cause, factor in evidence.history.items():
        yield Item("history", cause, f"×{factor:g}", history_vector(tables, cause, factor))


def history_vector(tables: Tables, cause: str, factor: float) -> np.ndarray:
    """The weight of a cause found on this unit before: ``factor`` on the hypotheses with it.

    A recurrence multiplies the prior odds of the cause by ``factor`` (see
    :mod:`diagnose.reasoning.evidence`, ``history``); the hypotheses without it
    keep their weight.
    """
    vec = np.ones(tables.n_hyp)
    vec[tables.hypotheses_with((cause,))] = float(factor)
    return vec


def log_posterior(tables: Tables, evidence: Evidence) -> np.ndarray:
    """Unnormalised log P(h | evidence) for every hypothesis (−inf where ruled out).

    The log-likelihood vector of each hard piece of evidence is cached on the
    tables, so an update costs one vector addition per piece.
    """
    out = tables.log_prior.copy()
    get = tables.log_likelihood
    for k in evidence.complaints:
        vec = get("complaint", k, "reported")
        if vec is None:
            return _log_posterior(tables, evidence)
        out += vec
    for cid, weights in evidence.findings.items():
        vec = get("finding", cid, next(iter(weights))) if len(weights) == 1 else None
        if vec is None:
            return _log_posterior(tables, evidence)
        out += vec
    for rid, cured in evidence.repairs:
        vec = get("repair", rid, bool(cured))
        if vec is None:
            return _log_posterior(tables, evidence)
        out += vec
    for cause, factor in evidence.history.items():
        out += np.log(history_vector(tables, cause, factor))
    return out


def log_posterior_after(tables: Tables, evidence: Evidence, before: Evidence,
                        logw: np.ndarray) -> np.ndarray:
    """:func:`log_posterior` of ``evidence``, from ``logw``, that of an earlier value ``before``.

    When ``evidence`` is ``before`` with one more hard finding (its check not
    answered before) and neither holds a repair or a history, one vector is
    added to ``logw``: the additions of :func:`log_posterior` in the same
    order, so the same numbers. Otherwise it is worked out afresh.
    """
    now, then = evidence.findings, before.findings
    if (len(now) == len(then) + 1 and not evidence.repairs and not before.repairs
            and not evidence.history and not before.history
            and evidence.complaints == before.complaints):
        items = list(now.items())
        cid, weights = items[-1]
        if len(weights) == 1 and cid not in then and items[:-1] == list(then.items()):
            vec = tables.log_likelihood("finding", cid, next(iter(weights)))
            if vec is not None:
                return logw + vec
    return log_posterior(tables, evidence)


def _log_posterior(tables: Tables, evidence: Evidence) -> np.ndarray:
    """:func:`log_posterior` from the tables, filling the cache for hard evidence."""
    out = tables.log_prior.copy()
    with np.errstate(divide="ignore"):
        for item in evidence_items(tables, evidence):
            logs = np.log(item.likelihood)
            if item.kind == "complaint":
                tables.remember(item.kind, item.id, "reported", logs)
            elif item.kind == "repair":
                tables.remember(item.kind, item.id, item.value == "cured", logs)
            elif item.kind == "finding" and len(evidence.findings[item.id]) == 1:
                tables.remember(item.kind, item.id, item.value, logs)
            out += logs
    return out


def normalise(logw: np.ndarray) -> tuple[np.ndarray, bool]:
    """Probabilities from log weights; (p, contradiction). All −inf gives no mass at all."""
    m = logw.max()
    if not math.isfinite(m):
        return np.zeros_like(logw), True
    w = logw - m
    np.exp(w, out=w)
    w *= 1.0 / w.sum()
    return w, False


@dataclass(frozen=True, eq=False)
class Posterior:
    """P(h | evidence) over the hypotheses of ``tables``.

    ``p`` sums to 1. ``contradiction`` is True when the evidence ruled out
    every hypothesis; ``p`` then puts all mass on "unknown".
    """

    tables: Tables
    p: np.ndarray
    contradiction: bool = False
    excluded: frozenset[str] = frozenset()

    @property
    def unknown(self) -> float:
        return float(self.p[self.tables.unknown])

    def causes(self) -> np.ndarray:
        """P(cause present), per cause (sums to more than 1 − P(unknown) with pairs)."""
        return self.tables.cause_marginals(self.p)

    def top(self) -> tuple[str, float]:
        """The most likely single entry of the ranking (a cause or "unknown") and its p."""
        first = self.ranking(limit=1).entries[0]
        return first.cause, first.p

    def ranking(self, limit: int | None = None, *, unknown: bool = False) -> Ranking:
        """Causes (and "unknown") from most to least likely; the first ``limit`` of them.

        ``unknown``: with a ``limit``, "unknown" ("none of the known causes")
        follows the entries when it is not among them, as a view of the leading
        causes shows it when it matters.
        """
        out = self._ranked(limit)
        if unknown and limit is not None and all(e.cause != UNKNOWN_CAUSE for e in out.entries):
            last = RankEntry(UNKNOWN_CAUSE, "None of the known causes", self.unknown)
            out = replace(out, entries=out.entries + (last,))
        return out

    def _ranked(self, limit: int | None) -> Ranking:
        t = self.tables
        marg = self.causes()
        values = np.concatenate([marg, [self.unknown]])
        if limit is None or limit >= len(values):
            order = np.argsort(-values, kind="stable")
        elif limit == 1:
            order = np.array([int(np.argmax(values))])
        else:
            part = np.argpartition(-values, limit - 1)[:limit]
            order = part[np.lexsort((part, -values[part]))]
        model = t.model
        entries = []
        if self.excluded:  # ruled out by the nameplate: not in the ranking at all
            gone = {t.cause_index[c] for c in self.excluded if c in t.cause_index}
            if limit is not None and limit < len(values):
                return replace(self, excluded=frozenset()).ranking(limit + len(gone)) \
                    .without(self.excluded, limit)
            order = np.array([i for i in order if int(i) not in gone], dtype=np.int64)
        for i in order:
            cid = t.causes[i] if i < t.n_causes else UNKNOWN_CAUSE
            title = model.causes[cid].title if cid in model.causes else "None of the known causes"
            entries.append(RankEntry(cid, title, float(values[i])))
        hyps: tuple[RankEntry, ...] = ()
        if t.max_faults > 1:
            hyps = tuple(RankEntry(label, label.replace("+", " and "), q)
                         for label, q in t.top_hypotheses(self.p, limit or 10))
        return Ranking(tuple(entries), hyps, t.max_faults, self.contradiction, model.id)


def posterior(model: Model, evidence: Evidence, *, max_faults: int = 1,
              open_world: bool = True, prune: bool | None = None) -> Posterior:
    """The posterior of the model given ``evidence``: Bayes' rule, then the open-world rule.

    With ``open_world=False`` it is the exact Bayesian posterior of the model
    (what the reference tests compare with brute force and pgmpy); the
    nameplate's exclusions are part of it (a prior of 0).

    With two faults, a large pack's pairs are pruned to those the evidence
    touches (``diagnose.reasoning.tables``, "Pruned pairs"; ``prune`` True
    or False forces it either way): the same posterior, to rounding.

    Raises:
        InputError: unknown ids in the evidence, or a bad ``max_faults``.

    >>> from diagnose.reasoning.synthetic import tiny_model
    >>> from diagnose.reasoning.evidence import Evidence
    >>> m = tiny_model()
    >>> e = Evidence(complaints=("will_not_release",)).with_outcome("fuse", "blown")
    >>> posterior(m, e).top()[0]
    'fuse_blown'
    """
    tables = tables_for(model, max_faults, evidence, prune=prune)
    excluded = excluded_causes(model, evidence)
    return settle(tables, evidence, excluded,
                  hidden=lambda: unobservable_causes(model, evidence) if open_world
                  else frozenset(),
                  capped=tables.hypotheses_within,
                  baseline=lambda: complaints_only(tables, evidence.complaints, excluded))


def settle(tables: Tables, evidence: Evidence, excluded: frozenset[str], *,
           hidden: Callable[[], frozenset[str]], capped: Callable[[frozenset[str]], np.ndarray],
           baseline: Callable[[], np.ndarray], logw: np.ndarray | None = None) -> Posterior:
    """Bayes' rule in log space, the nameplate's ``excluded`` causes, then the open-world rule.

    The steps of :func:`posterior`, with what they need asked for only when it
    is needed: ``hidden()`` (the causes no answer can show any more),
    ``capped(causes)`` (the hypotheses within them) and ``baseline()`` (the
    posterior of the complaints alone); the planner's cache answers these from
    memos (``diagnose.reasoning.plancache``), :func:`posterior` works them out.
    ``logw``: :func:`log_posterior` of ``evidence`` when the caller has it (it
    is not changed).
    """
    if logw is None:
        logw = log_posterior(tables, evidence)
    if excluded:
        logw = logw + tables.exclusion(excluded)
    p, bad = normalise(logw)
    if bad:
        p[tables.unknown] = 1.0
        return Posterior(tables, p, bad, excluded)
    unseen = hidden() - excluded
    if unseen:
        within = capped(unseen)
        if len(within):
            p = cap_unobservable(p, baseline(), within, tables.unknown)
    return Posterior(tables, p, bad, excluded)


def complaints_only(tables: Tables, complaints: tuple[str, ...], excluded: frozenset[str],
                    ) -> np.ndarray:
    """P(h | the complaints alone), with the nameplate's exclusions (the open-world cap)."""
    base = tables.log_prior.copy()
    for k in complaints:
        base += np.log(tables.complaint(k))
    if excluded:
        base += tables.exclusion(excluded)
    out, _ = normalise(base)
    return out


@dataclass(frozen=True)
class RankEntry:
    cause: str
    title: str
    p: float

    def to_dict(self) -> dict[str, Any]:
        return {"cause": self.cause, "p": round(self.p, 6)}


@dataclass(frozen=True)
class Ranking:
    """Causes from most to least likely; "unknown" is "none of the known causes".

    With up to two faults the entries are the causes' marginal probabilities
    (P(cause present)) and ``hypotheses`` lists the leading hypotheses.
    """

    entries: tuple[RankEntry, ...]
    hypotheses: tuple[RankEntry, ...] = ()
    max_faults: int = 1
    contradiction: bool = False
    pack: str = ""
    shown: int = 8

    @property
    def top(self) -> RankEntry:
        return self.entries[0]

    def without(self, causes: frozenset[str], limit: int | None = None) -> Ranking:
        """The same ranking without ``causes`` (at most ``limit`` entries)."""
        kept = tuple(e for e in self.entries if e.cause not in causes)
        return replace(self, entries=kept[:limit] if limit is not None else kept)

    def to_list(self) -> list[dict[str, Any]]:
        return [e.to_dict() for e in self.entries]
