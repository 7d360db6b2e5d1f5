"""Knowing when it does not know: support, observability and the open-world rule.

Three facts about the evidence that keep "none of the known causes" honest:

* A cause is *supported* when some answer points at it: the answer is more
  likely with the cause present than with none of the check's listed causes
  present (likelihood ratio above 1 against the check's ``normal`` row).
  Ruling other causes out raises a cause's probability, but it does not
  support it.
* A cause is *observable* while some check that applies to this unit (its
  ``only_if`` matches the nameplate) lists it and is answered or can still be
  done (not skipped, not answered "unsure").
* The open-world rule: a cause that no available check can observe keeps at
  most the probability it had from the complaint alone (its *baseline*); what
  it would gain only because other causes were ruled out goes to "none of
  the known causes" instead. Such a cause and a cause nobody wrote down explain
  the same answers equally well, and only the trainer's prior tells them
  apart; the rule refuses to let elimination alone turn a guess into a finding.

The planner adds the decision rule: while no answer supports any known cause
(every check so far read normal), no repair is proposed; checks go on while
one is worth its minutes, then the session escalates.

References:
    D. Heckerman, J. S. Breese, K. Rommelse, "Decision-theoretic
    troubleshooting", CACM 38(3), 1995 (the leak or "other" fault and when to
    call for service).
    J. de Kleer, B. C. Williams, "Diagnosing multiple faults", Artificial
    Intelligence 32, 1987 (unknown fault modes: a component known only to
    be abnormal explains every observation).
"""

from __future__ import annotations

import numpy as np

from diagnose.kb.model import Model
from diagnose.reasoning.evidence import Evidence
from diagnose.reasoning.nameplate import matches

#: A likelihood ratio must exceed 1 by this much to count as support (rounding, soft edges).
SUPPORT_MARGIN = 1.05


def unavailable_checks(model: Model, evidence: Evidence) -> frozenset[str]:
    """Checks that can tell nothing now or later: skipped, unsure, or not for this unit."""
    out = set(evidence.skipped) | set(evidence.unsure)
    for chk in model.checks.values():
        if chk.only_if and not matches(model, evidence, chk.only_if):
            out.add(chk.id)
    return frozenset(out - set(evidence.findings))


def unobservable_causes(model: Model, evidence: Evidence) -> frozenset[str]:
    """Causes that no answered or still available check lists."""
    gone = unavailable_checks(model, evidence)
    seen: set[str] = set()
    for chk in model.checks.values():
        if chk.id in gone or chk.preparation or len(chk.outcomes) < 2:
            continue
        seen.update(chk.effects)
    return frozenset(c for c in model.causes if c not in seen)


def supported_causes(model: Model, evidence: Evidence) -> frozenset[str]:
    """Causes that some answer points at (likelihood ratio above 1 against ``normal``).

    >>> from diagnose.reasoning.synthetic import tiny_model
    >>> m = tiny_model()
    >>> sorted(supported_causes(m, Evidence().with_outcome("fuse", "blown")))
    ['fuse_blown']
    >>> sorted(supported_causes(m, Evidence().with_outcome("fuse", "intact")))
    []
    """
    out: set[str] = set()
    for cid, weights in evidence.findings.items():
        chk = model.checks.get(cid)
        if chk is None:
            continue
        base = sum(w * chk.normal.get(o, 0.0) for o, w in weights.items())
        for cause, row in chk.effects.items():
            lik = sum(w * row.get(o, 0.0) for o, w in weights.items())
            if lik > base * SUPPORT_MARGIN:
                out.add(cause)
    return frozenset(out)


def any_support(model: Model, evidence: Evidence, excluded: frozenset[str] = frozenset(),
                ) -> bool:
    """True when some answer points at a known cause that the nameplate allows."""
    return bool(supported_causes(model, evidence) - excluded)


def cap_unobservable(p: np.ndarray, baseline: np.ndarray, capped: np.ndarray,
                     unknown: int) -> np.ndarray:
    """The open-world rule on hypothesis probabilities: ``capped`` keep at most ``baseline``.

    What they lose goes to the hypothesis ``unknown``. ``p`` is not changed.

    >>> cap_unobservable(np.array([0.7, 0.2, 0.1]), np.array([0.3, 0.6, 0.1]),
    ...                  np.array([0]), 2).round(3).tolist()
    [0.3, 0.2, 0.5]
    """
    out = p.copy()
    if len(capped) == 0:
        return out
    excess = np.clip(out[capped] - baseline[capped], 0.0, None)
    out[capped] -= excess
    out[unknown] += float(excess.sum())
    return out
