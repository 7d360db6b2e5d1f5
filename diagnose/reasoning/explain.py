"""Why the ranking is what it is, and why a check is worth doing, as values.

Why this ranking. For a leading hypothesis ``h`` and each piece of evidence
``e`` (a complaint, a finding, a repair that did not cure), the likelihood
ratio against the other hypotheses, given all the *other* evidence:

    LR_e(h) = P(e | h) / Σ_{h'≠h} w_{h'} · P(e | h'),   w ∝ P(h') · Π_{e'≠e} P(e' | h')

``LR > 1`` moved ``h`` up, ``LR < 1`` down; the posterior odds of ``h`` are
its prior odds times the product of such factors (exactly so for a single
piece of evidence).

Why this check. Its minutes (with unmet prerequisites), the expected
information (bits, and bits per minute) and, for each outcome, its
probability now and the top cause with its probability if that outcome is
seen.

References:
    I. J. Good, *Probability and the Weighing of Evidence*, Griffin, 1950
    (the weight of evidence as a log likelihood ratio).
    D. Heckerman, J. S. Breese, K. Rommelse, "Decision-theoretic
    troubleshooting", CACM 38(3), 1995.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from diagnose.errors import InputError
from diagnose.kb.model import UNKNOWN_CAUSE, Model
from diagnose.reasoning.evidence import Evidence
from diagnose.reasoning.planner import DEFAULT, Settings, plan
from diagnose.reasoning.posterior import evidence_items, normalise, posterior
from diagnose.reasoning.tables import tables_for


@dataclass(frozen=True)
class Factor:
    """One piece of evidence and how much it moved a hypothesis (likelihood ratio)."""

    label: str
    kind: str
    ratio: float

    @property
    def bits(self) -> float:
        """log2 of the ratio: + for, − against."""
        if self.ratio <= 0:
            return -math.inf
        return math.log2(self.ratio) if math.isfinite(self.ratio) else math.inf

    def to_dict(self) -> dict[str, Any]:
        r = self.ratio
        return {"evidence": self.label, "kind": self.kind,
                "ratio": r if math.isfinite(r) else "inf"}


@dataclass(frozen=True)
class Leading:
    """A leading hypothesis: its probability now and before, and the evidence behind it."""

    cause: str
    title: str
    p: float
    prior: float
    factors: tuple[Factor, ...]
    notes: tuple[str, ...] = ()  # the rules on top of Bayes' rule that moved it, in words

    def to_dict(self) -> dict[str, Any]:
        out = {"cause": self.cause, "p": round(self.p, 6), "prior": round(self.prior, 6),
               "factors": [f.to_dict() for f in self.factors]}
        if self.notes:
            out["notes"] = list(self.notes)
        return out


@dataclass(frozen=True)
class RankingExplanation:
    """Why the leading causes lead."""

    leading: tuple[Leading, ...]

    def to_dict(self) -> dict[str, Any]:
        return {"leading": [x.to_dict() for x in self.leading]}


def explain_ranking(model: Model, evidence: Evidence, *, max_faults: int = 1,
                    leading: int = 3) -> RankingExplanation:
    """The leading hypotheses and the likelihood ratio of each piece of evidence for them.

    >>> from diagnose.reasoning.synthetic import tiny_model
    >>> e = Evidence(complaints=("will_not_release",)).with_outcome("fuse", "blown")
    >>> x = explain_ranking(tiny_model(), e).leading[0]
    >>> x.cause, [f.label for f in x.factors][0]
    ('fuse_blown', 'fuse = blown')
    """
    tables = tables_for(model, max_faults, evidence)  # the posterior's (pairs pruned or not)
    items = list(evidence_items(tables, evidence))
    with np.errstate(divide="ignore"):
        logs = [np.log(it.likelihood) for it in items]
    total = tables.log_prior + (np.sum(logs, axis=0) if logs else 0.0)
    post = posterior(model, evidence, max_faults=max_faults)
    bayes = posterior(model, evidence, max_faults=max_faults, open_world=False)
    if post.excluded:
        total = total + tables.exclusion(post.excluded)
    p = post.p
    prior = np.exp(tables.log_prior)
    out = []
    for h in np.argsort(-p, kind="stable")[:leading]:
        factors = []
        for it, lg in zip(items, logs):
            others = total - lg
            others[h] = -np.inf
            w, none = normalise(others)
            denom = 0.0 if none else float(w @ it.likelihood)
            num = float(it.likelihood[h])
            ratio = num / denom if denom > 0 else (math.inf if num > 0 else 1.0)
            factors.append(Factor(it.label, it.kind, ratio))
        factors.sort(key=lambda f: -abs(f.bits) if math.isfinite(f.bits) else -math.inf)
        label = tables.label(int(h))
        title = model.causes[label].title if label in model.causes else (
            "None of the known causes" if label == UNKNOWN_CAUSE else label.replace("+", " and "))
        notes = _notes(model, evidence, label, float(p[h]), float(bayes.p[h]))
        out.append(Leading(label, title, float(p[h]), float(prior[h]), tuple(factors), notes))
    return RankingExplanation(tuple(out))


def _notes(model: Model, evidence: Evidence, label: str, p: float, p_bayes: float,
           ) -> tuple[str, ...]:
    """The rules on top of Bayes' rule that moved ``label``, in words."""
    out = []
    for rid, cured in evidence.repairs:
        rep = model.repairs.get(rid)
        if rep is not None and not cured and label in rep.fixes:
            out.append(f"{rid} did not cure: ×{1 - rep.success:.2g} (1 − success "
                       f"{rep.success:g})")
    if label == UNKNOWN_CAUSE and p > p_bayes + 1e-6:
        out.append(f"+{p - p_bayes:.2f} from causes no check left can see (open world)")
    elif label != UNKNOWN_CAUSE and p < p_bayes - 1e-6:
        out.append("no check left can see it: held at its share from the complaint")
    return tuple(out)


@dataclass(frozen=True)
class OutcomeEffect:
    outcome: str
    title: str
    p: float  # P(outcome) now
    top: str  # top of the ranking if this outcome is seen
    top_p: float

    def to_dict(self) -> dict[str, Any]:
        return {"outcome": self.outcome, "p": round(self.p, 6), "top": self.top,
                "top_p": round(self.top_p, 6)}


@dataclass(frozen=True)
class CheckExplanation:
    """Why a check: minutes, expected information, what each outcome would do."""

    check: str
    title: str
    minutes: float
    bits: float
    eco: float | None
    ecr: float
    status: str
    needs: tuple[str, ...]
    outcomes: tuple[OutcomeEffect, ...]
    top: str
    top_p: float

    @property
    def bits_per_minute(self) -> float:
        return self.bits / self.minutes if self.minutes > 0 else 0.0

    def to_dict(self) -> dict[str, Any]:
        return {"check": self.check, "minutes": self.minutes, "bits": round(self.bits, 4),
                "bits_per_minute": round(self.bits_per_minute, 4),
                "eco": None if self.eco is None else round(self.eco, 2),
                "ecr": round(self.ecr, 2), "status": self.status or "available",
                "needs": list(self.needs), "outcomes": [o.to_dict() for o in self.outcomes],
                "top": self.top, "top_p": round(self.top_p, 6)}


def explain_check(model: Model, evidence: Evidence, check: str, *, max_faults: int = 1,
                  settings: Settings = DEFAULT) -> CheckExplanation:
    """Minutes, expected information and the effect of each outcome of ``check``.

    Raises:
        InputError: ``check`` is not a check of the model.
    """
    chk = model.checks.get(check)
    if chk is None:
        raise InputError("check", f"unknown check {check!r}")
    pl = plan(model, evidence, max_faults=max_faults, settings=settings)
    row = pl.check_score(check)
    post = posterior(model, evidence, max_faults=max_faults)
    tables = tables_for(model, max_faults, evidence)
    dense = tables.checks[check].dense(tables.n_hyp)
    effects = []
    for i, o in enumerate(chk.outcomes):
        p_o = float(post.p @ dense[i])
        after = posterior(model, evidence.with_outcome(check, o), max_faults=max_faults)
        top, top_p = after.top()
        effects.append(OutcomeEffect(o, chk.outcome_titles.get(o, o), p_o, top, top_p))
    now, now_p = post.top()
    bits = row.bits
    if row.status:  # not a candidate now: still say what it would tell
        bits = _bits(post.p, dense)
    return CheckExplanation(check, chk.title, row.minutes, bits, row.eco, pl.ecr, row.status,
                            row.needs, tuple(effects), now, now_p)


def _bits(p: np.ndarray, table: np.ndarray) -> float:
    """Mutual information (bits) between a check's outcome and the hypothesis."""
    joint = table * p[None, :]
    po = joint.sum(axis=1, keepdims=True)
    ratio = np.divide(table, np.where(po > 0, po, 1.0))
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = np.where(joint > 0, joint * np.log2(np.where(ratio > 0, ratio, 1.0)), 0.0)
    return float(max(terms.sum(), 0.0))
