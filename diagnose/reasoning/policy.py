"""The decision rule: which check or repair to propose, from the scores of a plan.

The scores come from :func:`diagnose.reasoning.planner.plan`: ECR (expected
cost of repair, :mod:`diagnose.reasoning.repair_cost`), the ECO and the
expected information of each check (:mod:`diagnose.reasoning.lookahead`),
and what can be proposed now (:mod:`diagnose.reasoning.eligibility`). The
knobs are :class:`Settings` (tuned with ``diagnose simulate``):

1. a repair cured the unit, or the session ended: done;
2. "unknown" at or above ``threshold``: escalate;
2a. no answer points at a known cause yet (see
   :mod:`diagnose.reasoning.openworld`): no repair; the informative check with
   the least ECO, counting an escalation after each outcome that points at no
   cause, while that ECO is below an escalation; else escalate (by phone: ask
   while a question is informative, then a site visit);
3. some available repair fixes causes whose probability is at or above
   ``threshold``: do the best of those by p/c;
4. the check with the least ECO, if it beats ECR (observing first is cheaper,
   Heckerman, Breese and Rommelse, 1995);
5. else the best repair by p/c for the top cause, if it is at least
   ``act_floor`` and being wrong costs less than a share of the cheapest
   informative look (``(1 − p) · c_repair ≤ regret_share · c_check``);
6. else, while a check still gives ``min_bits`` or more, that check;
7. else by phone the caller's own repair for the top cause when it is at
   least ``act_floor``, or a site visit (an escalation when "unknown" is more
   likely than every known cause together); on site repair the most likely
   cause, or escalate when "unknown" leads or no repair is left.

"The least ECO" and "beats" compare expected costs with a tolerance: costs
within a relative 1e-9 of each other are equal, and a tie between checks goes
to the one with more expected information, then fewer minutes, then the id
first in alphabetical order (:mod:`diagnose.reasoning.ties`), so that the
choice never rests on the rounding of the arithmetic.

A check or repair whose prerequisites are not done is proposed as its first
missing prerequisite. By phone the end is a site visit with the parts to
bring; the reasons then say what a question to the caller is for (the likely
causes it tells more about) and never speak of work on site.

References:
    D. Heckerman, J. S. Breese, K. Rommelse, "Decision-theoretic
    troubleshooting", Communications of the ACM 38(3):49-57, 1995 (volume
    and pages from memory).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from diagnose.errors import InputError
from diagnose.kb.model import UNKNOWN_CAUSE, Model
from diagnose.reasoning.actions import Action, Plan
from diagnose.reasoning.evidence import Evidence
from diagnose.reasoning.posterior import Posterior
from diagnose.reasoning.ties import best_check, cheaper
from diagnose.text import percent

__all__ = ["DEFAULT", "Settings", "decide"]


@dataclass(frozen=True)
class Settings:
    """The decision rule's knobs (see the module docstring)."""

    threshold: float = 0.97
    act_floor: float = 0.9
    min_bits: float = 0.035
    escalation_minutes: float = 480.0
    regret_share: float = 0.5  # below threshold: repair when (1 - p)·c ≤ this × the cheapest look

    def __post_init__(self) -> None:
        if not 0 < self.threshold <= 1 or not 0 <= self.act_floor <= 1:
            raise InputError("threshold", "expected probabilities in (0, 1]")
        if not self.escalation_minutes > 0 or self.min_bits < 0 or self.regret_share < 0:
            raise InputError("settings", "escalation minutes must be positive, min_bits >= 0")


DEFAULT = Settings()


def decide(model: Model, evidence: Evidence, post: Posterior, settings: Settings,
           pl: Plan) -> Action:
    """The next action by the decision rule (the module docstring), from the scores in ``pl``."""
    thr = settings.threshold
    if evidence.cured:
        return Action("done", reason="a repair cured the unit")
    if evidence.end is not None:
        return Action("done", reason="the diagnosis is closed")
    phone = evidence.mode == "phone"
    if post.contradiction or post.unknown >= thr:
        return _escalate(post, _ON_PHONE["fits none"] if phone else
                         "the evidence fits none of the known causes")
    if not pl.supported:
        return _unsupported(model, evidence, post, settings, pl, phone)
    top = pl.top
    known = top.cause != UNKNOWN_CAUSE
    repairs = _TopRepairs(model, pl, top.cause if known else None)
    if known and top.p >= thr:
        live, for_top, ratio = repairs()
        if for_top.any():
            best = int(np.argmax(np.where(for_top, ratio, -np.inf)))
            named = f"{_title(model, top.cause)} ({percent(top.p)})"
            why = (f"{named} is likely enough for the caller to try this now"
                   if phone else f"{named} is likely enough to act")
            return _repair_action(pl, best, why)
        if phone:
            return _visit(model, evidence, post, f"{_title(model, top.cause)} is likely "
                          f"({percent(top.p)}); it is repaired on site")
    informative = (pl.check_code == 0) & (pl.check_bits >= settings.min_bits)
    choosable = informative.nonzero()[0]
    if len(choosable):
        best_c = best_check(choosable, pl.check_eco, pl.check_bits, pl.check_minutes,
                            pl.check_ids)
        if cheaper(pl.check_eco[best_c], pl.ecr):
            return _check_action(pl, best_c, _phone_question(model, post, pl.check_ids[best_c])
                                 if phone else "observing first saves minutes")
        if known and top.p >= settings.act_floor and repairs()[1].any():
            live, for_top, ratio = repairs()
            best = int(np.argmax(np.where(for_top, ratio, -np.inf)))
            # below the threshold, repair only when being wrong costs less than a look
            regret = (1.0 - top.p) * float(pl.repair_minutes[best])
            cheapest = float(np.min(np.where(informative, pl.check_minutes, np.inf)))
            if top.p >= thr or regret <= settings.regret_share * cheapest:
                return _repair_action(pl, best, _ON_PHONE["try now"] if phone else
                                      "repairing now is cheaper")
        return _check_action(pl, best_c, _phone_question(model, post, pl.check_ids[best_c])
                             if phone else "not yet sure enough to repair")
    live, for_top, ratio = repairs()
    if phone:  # nothing more to learn by phone: the site checks are still to come
        if known and top.p >= settings.act_floor and for_top.any():
            best = int(np.argmax(np.where(for_top, ratio, -np.inf)))
            return _repair_action(pl, best, _ON_PHONE["try now"])
        if post.unknown >= 0.5:
            return _escalate(post, _ON_PHONE["fits none"])
        return _visit(model, evidence, post, "nothing more to learn by phone")
    if not known:
        return _escalate(post, "none of the known causes fits best")
    worth = live & (pl.p_cure * settings.escalation_minutes >= pl.repair_minutes)
    if worth.any():
        pick = worth & for_top if (worth & for_top).any() else worth
        best = int(np.argmax(np.where(pick, ratio, -np.inf)))
        return _repair_action(pl, best, "no check left worth its minutes")
    return _escalate(post, "no repair left worth its minutes")


class _TopRepairs:
    """The repairs that can be proposed now, those among them that fix ``cause`` (None: no
    known cause on top), and every repair's p/c (−inf for the others); computed when asked."""

    def __init__(self, model: Model, pl: Plan, cause: str | None) -> None:
        self._model, self._pl, self._cause = model, pl, cause
        self._value: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None

    def __call__(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        if self._value is None:
            pl, cause, repairs = self._pl, self._cause, self._model.repairs
            live = pl.repair_code == 0
            ratio = np.where(live, pl.p_cure / pl.repair_minutes, -np.inf)
            for_top = live & np.array([cause is not None and cause in repairs[r].fixes
                                       for r in pl.repair_ids], dtype=bool)
            self._value = (live, for_top, ratio)
        return self._value


def _unsupported(model: Model, evidence: Evidence, post: Posterior, settings: Settings,
                 pl: Plan, phone: bool) -> Action:
    """No answer points at a known cause yet: no repair; observe while worth it, then escalate.

    A check is worth its minutes when it is informative (``min_bits``) and
    observing costs less in expectation than escalating now.
    """
    informative = (pl.check_code == 0) & (pl.check_bits >= settings.min_bits)
    if phone and informative.any():  # a question costs the caller little; the visit is next
        best_c = _best(pl, informative)
        return _check_action(pl, best_c, _phone_question(model, post, pl.check_ids[best_c]))
    worth = informative.copy()
    worth[informative] = cheaper(pl.check_eco[informative], settings.escalation_minutes)
    if worth.any():
        best_c = _best(pl, worth)
        return _check_action(pl, best_c, "no answer points at a cause yet, so look first")
    if phone:  # the site checks are still to come: a technician, unless nothing known fits
        if post.unknown >= 0.5:
            return _escalate(post, _ON_PHONE["fits none"])
        return _visit(model, evidence, post, "no caller answer points at a cause: the site "
                      "checks will tell")
    return _escalate(post, "every answer reads normal and no check left is worth its "
                           "minutes: none of the known causes is shown")


def _best(pl: Plan, among: np.ndarray) -> int:
    """The check of ``among`` (a mask) with the least ECO; ties go by the rule of ``ties``."""
    return best_check(among.nonzero()[0], pl.check_eco, pl.check_bits, pl.check_minutes,
                      pl.check_ids)


#: Reasons in phone mode: no work on site is proposed, so none is spoken of.
_ON_PHONE = {
    "fits none": "the answers fit none of the known causes: a site visit with an "
                 "application engineer is needed",
    "try now": "the caller can try this now, before a site visit is sent",
}


def _phone_question(model: Model, post: Posterior, check_id: str) -> str:
    """What a question to the caller is for: the likely causes it tells more about.

    >>> from diagnose.reasoning.posterior import posterior
    >>> from diagnose.reasoning.synthetic import tiny_model
    >>> m = tiny_model()
    >>> e = Evidence(complaints=("will_not_release",), mode="phone")
    >>> _phone_question(m, posterior(m, e), "listen_click")  # doctest: +NORMALIZE_WHITESPACE
    'to find out by phone whether a site visit is needed and which parts it brings (it tells
    more about: Lining worn; Fuse blown)'

    """
    effects = model.checks[check_id].effects
    about = [e.cause for e in post.ranking().entries if e.cause in effects][:2]
    named = f" (it tells more about: {'; '.join(_title(model, c) for c in about)})" \
        if about else ""
    return f"to find out by phone whether a site visit is needed and which parts it brings{named}"


def _title(model: Model, cause: str) -> str:
    """A cause as people read it: its title (the id when the pack has none)."""
    found = model.causes.get(cause)
    return found.title if found is not None and found.title else cause


def _check_action(pl: Plan, i: int, reason: str) -> Action:
    cid = pl.check_ids[i]
    model = pl.model
    needs = pl.check_needs.get(i, ())
    minutes, bits, eco = float(pl.check_minutes[i]), float(pl.check_bits[i]), float(pl.check_eco[i])
    if needs:
        first = model.checks[needs[0]]
        return Action("check", first.id, first.title,
                      f"needed before: {model.checks[cid].title}", first.minutes, bits=bits,
                      target=cid, eco=eco, ecr=pl.ecr)
    return Action("check", cid, model.checks[cid].title, reason, minutes, bits=bits, eco=eco,
                  ecr=pl.ecr)


def _repair_action(pl: Plan, i: int, reason: str) -> Action:
    rid = pl.repair_ids[i]
    model = pl.model
    r = model.repairs[rid]
    causes = tuple(c for c in r.fixes if c in model.causes)
    needs = pl.repair_needs.get(i, ())
    minutes, p_fix = float(pl.repair_minutes[i]), float(pl.p_fix[i])
    if needs:
        first = model.checks[needs[0]]
        return Action("check", first.id, first.title, f"needed before: {r.title}",
                      first.minutes, p=p_fix, target=rid, causes=causes, parts=tuple(r.parts),
                      ecr=pl.ecr)
    return Action("repair", rid, r.title, reason, minutes, p=p_fix, causes=causes,
                  parts=tuple(r.parts), ecr=pl.ecr)


def _escalate(post: Posterior, reason: str) -> Action:
    return Action("escalate", None, "Escalate to an application engineer", reason,
                  p=post.unknown, causes=(UNKNOWN_CAUSE,))


def _visit(model: Model, evidence: Evidence, post: Posterior, reason: str,
           cover: float = 0.9, most: int = 3) -> Action:
    """A site visit with the parts for the repairs of the likely causes (by phone)."""
    causes: list[str] = []
    total = 0.0
    for e in post.ranking(limit=most + 1).entries:
        if e.cause == UNKNOWN_CAUSE or total >= cover or len(causes) >= most:
            continue
        causes.append(e.cause)
        total += e.p
    parts: list[str] = []
    done = evidence.repairs_done
    for cause in causes:
        options = [model.repairs[r] for r in model.repairs_for(cause) if r not in done]
        if options:
            best = max(options, key=lambda r: r.success / r.minutes)
            parts += [x for x in best.parts if x not in parts]
    return Action("visit", None, "Send a technician", reason, p=total, causes=tuple(causes),
                  parts=tuple(parts))
