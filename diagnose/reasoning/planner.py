"""The next action: the check or repair that lowers the expected minutes to a cure.

Expected cost of repair (ECR). Each hypothesis ``h`` is served by one repair,
the available repair with the best ``success / minutes`` among those that
fix a cause of ``h``. A repair ``r`` then cures with probability
``p_r = success_r · Σ_{h served by r} P(h)``. Doing the repairs in order of
``p_r / c_r`` (minutes including unmet prerequisites) is optimal for a single
fault (Kadane and Simon, 1977), and costs in expectation

    ECR = Σ_i c_i · (1 − Σ_{j<i} p_j)  +  E · (1 − Σ_i p_i)

where ``E`` (``Settings.escalation_minutes``) is what an escalation costs when
no repair cures ("unknown", causes without a repair left, failed repairs).

Expected cost of observation, one step ahead (myopic value of information):

    ECO(k) = c_k + Σ_o P(o) · ECR(after o)

``ECR(after o)`` re-sorts the repairs for the posterior after outcome ``o``.
It is computed for every check and outcome at once: hypotheses that a check
does not list all scale by the same factor, so only the repairs serving a
listed hypothesis change place; they are merged into the unchanged order of
the rest with prefix sums (vectorised over checks × outcomes × those
repairs). The expected information of a check is the mutual information
between its outcome and the hypothesis, ``H(P) − Σ_o P(o) H(P | o)`` in bits.

Decision rule (``Settings``; tuned with ``diagnose simulate``):

1. a repair cured the unit, or the session ended: done;
2. "unknown" at or above ``threshold``: escalate;
2a. no answer points at a known cause yet (see
   :mod:`diagnose.reasoning.openworld`): no repair; the informative check with
   the least ECO, counting an escalation after each outcome that points at no
   cause, while that ECO is below an escalation; else escalate (by phone: ask
   while a question is informative, then a site visit);
3. some available repair fixes causes whose probability is at or above
   ``threshold``: do the best of those by p/c;
4. the check with the least ECO, if it beats ECR (observing first is cheaper);
5. else the best repair by p/c for the top cause, if it is at least
   ``act_floor`` and being wrong costs less than a share of the cheapest
   informative look (``(1 − p) · c_repair ≤ regret_share · c_check``);
6. else, while a check still gives ``min_bits`` or more, that check;
7. else by phone the caller's own repair for the top cause when it is at
   least ``act_floor``, or a site visit (an escalation when "unknown" is more
   likely than every known cause together); on site repair the most likely
   cause, or
   escalate when "unknown" leads or no repair is left.

A check or repair whose prerequisites (``needs``) are not done is proposed
as its first missing prerequisite. A check's minutes include the setup its
state needs (:mod:`diagnose.reasoning.unitstate`); a check no setup step can
bring about in the present state is not proposed. By phone only ``where: phone`` checks and
repairs are offered, and the end is a site visit with the parts to bring; the
reasons then say what a question to the caller is for (the likely causes it
tells more about) and never speak of work on site. A repair skipped (cannot be
done now) is not proposed again.

References:
    D. Heckerman, J. S. Breese, K. Rommelse, "Decision-theoretic
    troubleshooting", Communications of the ACM 38(3):49-57, 1995.
    J. B. Kadane, H. A. Simon, "Optimal strategies for a class of constrained
    sequential problems", Annals of Statistics 5(2):237-255, 1977.
    T. M. Cover, J. A. Thomas, *Elements of Information Theory*, 2nd ed.,
    Wiley, 2006, 2.4 (mutual information).
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from dataclasses import dataclass, field, replace
from typing import Any, NamedTuple

import numpy as np

from diagnose.errors import InputError
from diagnose.kb.model import UNKNOWN_CAUSE, Check, Model
from diagnose.reasoning.evidence import MODES, Evidence
from diagnose.reasoning.nameplate import nameplate_value, only_if_matches
from diagnose.reasoning.openworld import SUPPORT_MARGIN, any_support
from diagnose.reasoning.posterior import Posterior, RankEntry, posterior
from diagnose.reasoning.safety import caller_safe, missing_state, state_steps
from diagnose.reasoning.tables import Tables, tables_for
from diagnose.reasoning.unitstate import setup_minutes, unit_state

__all__ = ["DEFAULT", "Action", "CheckScore", "ChecksTable", "Plan", "RepairScore", "Settings",
           "check_status", "checks_table", "missing_prerequisites", "nameplate_value",
           "next_action", "only_if_matches", "plan"]

EPS = 1e-12  # a probability at or below this counts as "no longer possible"
_BATCH = 2_000_000  # largest (checks × outcomes × m × m) array of one look-ahead batch


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


# --- value types ---------------------------------------------------------------------------

@dataclass(frozen=True)
class Action:
    """What to do next.

    ``kind``: "check", "repair", "escalate" (the evidence fits nothing known, or
    nothing is left), "visit" (phone mode: send a technician with ``parts``) or
    "done". When a prerequisite is proposed, ``target`` names the check or
    repair that needs it.
    """

    kind: str
    id: str | None = None
    title: str = ""
    reason: str = ""
    minutes: float = 0.0
    p: float = 0.0
    bits: float = 0.0
    target: str | None = None
    causes: tuple[str, ...] = ()
    parts: tuple[str, ...] = ()
    eco: float | None = None
    ecr: float | None = None

    @property
    def bits_per_minute(self) -> float:
        return self.bits / self.minutes if self.minutes > 0 else 0.0

    def to_dict(self) -> dict[str, Any]:
        out: dict[str, Any] = {"action": self.kind, "id": self.id, "title": self.title,
                               "reason": self.reason, "minutes": round(self.minutes, 2)}
        if self.kind == "check":
            out["bits"] = round(self.bits, 4)
            out["bits_per_minute"] = round(self.bits_per_minute, 4)
        if self.target:
            out["for"] = self.target
        if self.causes:
            out["causes"] = list(self.causes)
            out["p"] = round(self.p, 6)
        if self.parts:
            out["parts"] = list(self.parts)
        if self.eco is not None:
            out["eco"] = round(self.eco, 2)
        if self.ecr is not None:
            out["ecr"] = round(self.ecr, 2)
        return out

    def __str__(self) -> str:
        head = {"check": "Check", "repair": "Repair", "escalate": "Escalate",
                "visit": "Site visit", "done": "Done"}[self.kind]
        name = f" {self.id}" if self.id else ""
        title = f" ({self.title})" if self.title and self.title != self.id else ""
        why = f": {self.reason}" if self.reason else ""
        return f"{head}{name}{title}{why}"

    def __rich_console__(self, console: Any, options: Any) -> Iterator[Any]:
        from rich.text import Text

        line = Text("Next: ", style="bold")
        line.append(str(self))
        yield line
        if self.kind == "check":
            yield Text(f"  {self.minutes:.0f} min, expected information {self.bits:.2f} bits "
                       f"({self.bits_per_minute:.3f} bits/min)", style="dim")
        if self.parts:
            yield Text("  bring: " + ", ".join(self.parts), style="dim")


@dataclass(frozen=True)
class CheckScore:
    """A check as the planner sees it now. ``status`` is "" when it can be proposed."""

    id: str
    title: str
    minutes: float  # including unmet prerequisites
    bits: float = 0.0
    eco: float | None = None
    status: str = ""
    needs: tuple[str, ...] = ()  # unmet prerequisites, in the order to do them

    @property
    def bits_per_minute(self) -> float:
        return self.bits / self.minutes if self.minutes > 0 else 0.0

    def to_dict(self) -> dict[str, Any]:
        return {"check": self.id, "minutes": round(self.minutes, 2), "bits": round(self.bits, 4),
                "bits_per_minute": round(self.bits_per_minute, 4),
                "eco": None if self.eco is None else round(self.eco, 2),
                "status": self.status or "available", "needs": list(self.needs)}


@dataclass(frozen=True)
class RepairScore:
    """A repair now: P(a cause it fixes is present), P(it cures), minutes and p/c."""

    id: str
    title: str
    minutes: float
    p_fix: float
    p_cure: float
    status: str = ""
    needs: tuple[str, ...] = ()

    @property
    def ratio(self) -> float:
        return self.p_cure / self.minutes if self.minutes > 0 else 0.0

    def to_dict(self) -> dict[str, Any]:
        return {"repair": self.id, "minutes": round(self.minutes, 2), "p_fix": round(self.p_fix, 6),
                "p_cure": round(self.p_cure, 6), "status": self.status or "available"}


_CHECK_STATUS = ("", "done", "unsure", "skipped", "site only", "not for this unit",
                 "preparation", "one outcome", "blocked", "not in this state",
                 "not for a caller")
_REPAIR_STATUS = ("", "done", "site only", "blocked", "fixes nothing still possible",
                  "skipped", "not for this unit", "not for a caller")


@dataclass(frozen=True, eq=False)
class Plan:
    """The next action with everything it was chosen from.

    The scores are kept as arrays (check and repair order of the model's
    tables); :meth:`checks` and :meth:`repairs` turn them into ranked rows.
    ``check_eco`` is NaN for a check that cannot be proposed now.
    """

    action: Action
    top: RankEntry
    ecr: float
    model: Model
    check_ids: tuple[str, ...]
    check_minutes: np.ndarray
    check_bits: np.ndarray
    check_eco: np.ndarray
    check_code: np.ndarray
    check_needs: dict[int, tuple[str, ...]]
    check_blocked: dict[int, str]
    repair_ids: tuple[str, ...]
    repair_minutes: np.ndarray
    p_fix: np.ndarray
    p_cure: np.ndarray
    repair_code: np.ndarray
    repair_needs: dict[int, tuple[str, ...]]
    repair_blocked: dict[int, str]
    supported: bool = True  # some answer points at a known cause

    def checks(self, limit: int | None = None) -> tuple[CheckScore, ...]:
        """Checks, those that can be proposed first, by ECO (least first)."""
        eco = np.where(np.isnan(self.check_eco), np.inf, self.check_eco)
        order = np.lexsort((eco, self.check_code != 0))[:limit]
        out = []
        for i in order:
            code = int(self.check_code[i])
            status = self.check_blocked.get(i, "") if code == 8 else _CHECK_STATUS[code]
            cid = self.check_ids[i]
            out.append(CheckScore(cid, self.model.checks[cid].title, float(self.check_minutes[i]),
                                  float(self.check_bits[i]),
                                  None if code else float(self.check_eco[i]), status,
                                  self.check_needs.get(i, ())))
        return tuple(out)

    def repairs(self, limit: int | None = None) -> tuple[RepairScore, ...]:
        """Repairs, those that can be proposed first, by p/c (highest first)."""
        ratio = self.p_cure / self.repair_minutes
        order = np.lexsort((-ratio, self.repair_code != 0))[:limit]
        out = []
        for i in order:
            code = int(self.repair_code[i])
            status = self.repair_blocked.get(i, "") if code == 3 else _REPAIR_STATUS[code]
            rid = self.repair_ids[i]
            out.append(RepairScore(rid, self.model.repairs[rid].title,
                                   float(self.repair_minutes[i]), float(self.p_fix[i]),
                                   float(self.p_cure[i]), status, self.repair_needs.get(i, ())))
        return tuple(out)

    def to_dict(self, limit: int | None = 20) -> dict[str, Any]:
        return {"next": self.action.to_dict(), "ecr": round(self.ecr, 2),
                "checks": [c.to_dict() for c in self.checks(limit)],
                "repairs": [r.to_dict() for r in self.repairs(limit)]}


@dataclass(frozen=True)
class ChecksTable:
    """Every check with its score now; available ones first, best ECO first."""

    rows: tuple[CheckScore, ...]
    ecr: float
    mode: str = "site"
    shown: int = 30
    extra: dict[str, Any] = field(default_factory=dict)

    def to_list(self) -> list[dict[str, Any]]:
        return [r.to_dict() for r in self.rows]

    def __rich_console__(self, console: Any, options: Any) -> Iterator[Any]:
        from rich.table import Table

        t = Table(title=f"Checks ({self.mode}); repair now: {self.ecr:.0f} min expected",
                  title_justify="left", box=None, pad_edge=False)
        t.add_column("check", overflow="fold", max_width=30)
        t.add_column("min", justify="right")
        t.add_column("bits", justify="right")
        t.add_column("bits/min", justify="right")
        t.add_column("ECO", justify="right")
        t.add_column("status", overflow="fold", max_width=18)
        for r in self.rows[: self.shown]:
            t.add_row(r.id, f"{r.minutes:.0f}", f"{r.bits:.2f}", f"{r.bits_per_minute:.3f}",
                      "" if r.eco is None else f"{r.eco:.0f}", r.status or "")
        yield t
        if len(self.rows) > self.shown:
            yield f"  ... and {len(self.rows) - self.shown} more"


# --- availability ----------------------------------------------------------------------------

def _satisfied(model: Model, evidence: Evidence, cid: str) -> bool:
    """A prerequisite is met when done, or when it does not apply to this unit."""
    if cid in evidence.done:
        return True
    check = model.checks.get(cid)
    return check is not None and not only_if_matches(model, evidence, check)


def missing_prerequisites(model: Model, evidence: Evidence, needs: tuple[str, ...],
                          ) -> tuple[tuple[str, ...], str]:
    """Unmet prerequisites of an item, deepest first, and why they cannot be done ("" if they can).

    A prerequisite blocks when it was skipped, or is site-only in phone mode.
    """
    out: list[str] = []
    seen: set[str] = set()
    blocked = ""

    def visit(cid: str) -> None:
        nonlocal blocked
        if cid in seen or _satisfied(model, evidence, cid):
            return
        seen.add(cid)
        check = model.checks.get(cid)
        if check is None:
            blocked = blocked or f"needs unknown check {cid}"
            return
        if cid in evidence.skipped:
            blocked = blocked or f"needs {cid} (skipped)"
        elif evidence.mode == "phone" and not check.phone_ok:
            blocked = blocked or f"needs {cid} (site only)"
        for sub in check.needs:
            visit(sub)
        out.append(cid)

    for cid in needs:
        visit(cid)
    return tuple(out), blocked


def check_status(model: Model, evidence: Evidence, check: Check) -> str:
    """Why ``check`` cannot be proposed now, or "" when it can."""
    if check.id in evidence.findings:
        return "done"
    if check.id in evidence.unsure:
        return "unsure"
    if check.id in evidence.skipped:
        return "skipped"
    if evidence.mode == "phone" and not check.phone_ok:
        return "site only"
    if not only_if_matches(model, evidence, check):
        return "not for this unit"
    if check.preparation:
        return "preparation"
    if len(check.outcomes) < 2:
        return "one outcome"
    _, blocked = missing_prerequisites(model, evidence, check.needs)
    if not blocked and setup_minutes(model, unit_state(model, evidence), check.requires) \
            == float("inf"):
        return "not in this state"
    return blocked


# --- expected cost of repair ---------------------------------------------------------------

def repair_order(p: np.ndarray, c: np.ndarray) -> np.ndarray:
    """Indices of the repairs with p > 0 by p/c, highest first (Kadane and Simon, 1977)."""
    live = np.flatnonzero(p > 0)
    return live[np.argsort(-(p[live] / c[live]), kind="stable")]


def sequence_cost(p: np.ndarray, c: np.ndarray, order: Any, escalation: float = 0.0) -> float:
    """Expected minutes of doing the repairs in ``order`` until one cures, then escalating.

    ``p[i]`` is the probability that repair ``i`` cures (disjoint events, Σ p ≤ 1).

    >>> sequence_cost(np.array([0.5, 0.3]), np.array([10.0, 10.0]), [0, 1])
    15.0
    """
    order = np.asarray(order, dtype=np.int64)
    ps, cs = p[order], c[order]
    reach = 1.0 - np.concatenate([[0.0], np.cumsum(ps)])[: len(ps)]
    return float(cs @ reach + escalation * (1.0 - ps.sum()))


def expected_cost_of_repair(p: np.ndarray, c: np.ndarray, escalation: float | None = None,
                            ) -> float:
    """ECR of the p/c order (Heckerman, Breese and Rommelse, 1995, eq. 2).

    With ``escalation`` (E minutes), only the repairs worth trying enter the
    sequence, those with ``p·E ≥ c`` (a prefix of the p/c order), and what
    none of them cures costs E; without it, every repair with p > 0 is done.
    """
    order = repair_order(p, c)
    if escalation is None:
        return sequence_cost(p, c, order, 0.0)
    order = order[p[order] * escalation >= c[order]]
    return sequence_cost(p, c, order, escalation)


def assign_repairs(tables: Tables, usable: np.ndarray, costs: np.ndarray) -> np.ndarray:
    """For each hypothesis, the usable repair with the best success/minutes fixing it (−1: none)."""
    keep = usable[tables.fix_repair]
    fr, fh = tables.fix_repair[keep], tables.fix_hyp[keep]
    out = np.full(tables.n_hyp, -1, dtype=np.int64)
    if len(fr) == 0:
        return out
    score = tables.success[fr] / costs[fr]
    order = np.lexsort((-score, fh))
    fh_s = fh[order]
    first = np.ones(len(fh_s), dtype=bool)
    first[1:] = fh_s[1:] != fh_s[:-1]
    out[fh_s[first]] = fr[order][first]
    return out


# --- look-ahead: information and ECO of every check, vectorised -------------------------------

def _entropy_terms(x: np.ndarray) -> np.ndarray:
    """x · log2(x), with 0 · log 0 = 0."""
    out = np.zeros_like(x)
    pos = x > 0
    out[pos] = x[pos] * np.log2(x[pos])
    return out


def lookahead(tables: Tables, p: np.ndarray, cand: np.ndarray, check_cost: np.ndarray,
              assign: np.ndarray, repair_cost: np.ndarray, *, escalation: float,
              detail: list[np.ndarray] | None = None,
              ) -> tuple[np.ndarray, np.ndarray, float]:
    """Expected information (bits) and ECO of each candidate check, and ECR now.

    ``cand`` indexes ``tables.check_ids``; ``check_cost`` is per candidate;
    ``assign`` maps hypotheses to repairs (see :func:`assign_repairs`);
    ``escalation`` is E, the minutes of an escalation. When ``detail`` is a
    list, P(outcome) and the ECR after each outcome (both candidates ×
    outcomes) are appended to it.
    """
    order = _order_now(tables, p, assign, repair_cost)
    ecr_now = _ecr_of(order, escalation)
    if len(cand) == 0:
        if detail is not None:
            detail += [np.zeros((0, 1)), np.zeros((0, 1))]
        return np.zeros(0), np.zeros(0), ecr_now
    split = _split(tables, p, cand)
    bits = _information(p, split)
    touched = _touched(tables, assign, order, split)
    ecr_after = _ecr_after(touched, order, split.alpha, escalation)
    eco = check_cost + (split.z * ecr_after).sum(axis=1)
    if detail is not None:
        detail += [split.z, ecr_after]
    return bits, eco, ecr_now


class _Order(NamedTuple):
    """The repairs in the p/c order now (Kadane and Simon, 1977), with its prefix sums.

    Per repair: ``mass`` (P of the hypotheses it serves), ``prob`` (P it
    cures), ``c`` (minutes, 1 where none are given) and ``rank`` (its place
    in the order, −1 when it cures nothing). Along the order: ``rhos`` (p/c),
    ``p_before`` (Σ p before a place), ``c_from`` (Σ c from a place on) and
    ``g_cum`` (Σ p · c of the repairs after, up to a place).
    """

    mass: np.ndarray
    prob: np.ndarray
    c: np.ndarray
    rank: np.ndarray
    rhos: np.ndarray
    p_before: np.ndarray
    c_from: np.ndarray
    g_cum: np.ndarray


def _order_now(tables: Tables, p: np.ndarray, assign: np.ndarray, repair_cost: np.ndarray,
               ) -> _Order:
    """The p/c order of the repairs for posterior ``p`` (see :class:`_Order`)."""
    R = len(tables.repair_ids)
    c = np.where(repair_cost > 0, repair_cost, 1.0)
    served = assign >= 0
    mass = np.bincount(assign[served], weights=p[served], minlength=R)
    prob = tables.success * mass
    order = repair_order(prob, c)
    ps, cs = prob[order], c[order]
    rhos = ps / cs
    p_before = np.concatenate([[0.0], np.cumsum(ps)])
    c_from = np.concatenate([np.cumsum(cs[::-1])[::-1], [0.0]])
    g_cum = np.concatenate([[0.0], np.cumsum(ps * c_from[1:])])
    rank = np.full(R, -1, dtype=np.int64)
    rank[order] = np.arange(len(order))
    return _Order(mass, prob, c, rank, rhos, p_before, c_from, g_cum)


def _ecr_of(order: _Order, escalation: float) -> float:
    """ECR of ``order``: the repairs worth trying (p/c at least 1/E), then an escalation."""
    p_before, c_from, g_cum = order.p_before, order.c_from, order.g_cum
    n0 = int(np.searchsorted(-order.rhos, -1.0 / escalation, side="right"))
    return float((c_from[0] - c_from[n0]) - (g_cum[n0] - p_before[n0] * c_from[n0])
                 + escalation * (1.0 - p_before[n0]))


class _Split(NamedTuple):
    """How the outcomes of each candidate check split the posterior.

    One row per (candidate, hypothesis it lists): ``ek`` the candidate,
    ``eh`` the hypothesis, ``el`` its outcome row, ``pe`` its probability and
    ``new_ex`` its posterior after each outcome. Per candidate: ``p_exc``, the
    mass it lists. Per candidate × outcome: ``z`` = P(outcome), ``safe_z`` (1
    where z is 0) and ``alpha``, the factor the hypotheses it does not list
    scale by.
    """

    ek: np.ndarray
    eh: np.ndarray
    el: np.ndarray
    pe: np.ndarray
    new_ex: np.ndarray
    p_exc: np.ndarray
    z: np.ndarray
    safe_z: np.ndarray
    alpha: np.ndarray


def _split(tables: Tables, p: np.ndarray, cand: np.ndarray) -> _Split:
    """P(outcome) of each candidate and the posterior after it (see :class:`_Split`)."""
    K = len(cand)
    remap = np.full(len(tables.check_ids), -1, dtype=np.int64)
    remap[cand] = np.arange(K)
    sel = remap[tables.ex_check] >= 0
    ek = remap[tables.ex_check[sel]]
    eh = tables.ex_hyp[sel]
    el = tables.ex_rows[sel]
    normal = tables.check_normal[cand]
    n_out = normal.shape[1]
    pe = p[eh]
    p_exc = np.bincount(ek, weights=pe, minlength=K)
    z = normal * (1.0 - p_exc)[:, None]
    for o in range(n_out):
        z[:, o] += np.bincount(ek, weights=pe * el[:, o], minlength=K)
    z = np.clip(z, 0.0, None)
    live = z > 0
    safe_z = np.where(live, z, 1.0)
    alpha = np.where(live, normal / safe_z, 0.0)
    new_ex = pe[:, None] * el / safe_z[ek]
    return _Split(ek, eh, el, pe, new_ex, p_exc, z, safe_z, alpha)


def _information(p: np.ndarray, split: _Split) -> np.ndarray:
    """Mutual information (bits) between each candidate's outcome and the hypothesis."""
    K, n_out = split.z.shape
    ek, eh, alpha = split.ek, split.eh, split.alpha
    pl = _entropy_terms(p)
    s_non = pl.sum() - np.bincount(ek, weights=pl[eh], minlength=K)
    m_non = np.clip(1.0 - split.p_exc, 0.0, None)
    t_ex = np.zeros((K, n_out))
    nl = _entropy_terms(split.new_ex)
    for o in range(n_out):
        t_ex[:, o] = np.bincount(ek, weights=nl[:, o], minlength=K)
    h_post = -(alpha * s_non[:, None] + _entropy_terms(alpha) * m_non[:, None] + t_ex)
    return np.clip(-pl.sum() - (split.z * h_post).sum(axis=1), 0.0, None)


class _Touched(NamedTuple):
    """The (candidate, repair) pairs where the repair serves a hypothesis the candidate lists.

    Sorted by candidate: ``uk`` the candidate, ``ur`` the repair, ``slot``
    its place among the pairs of that candidate, ``p_new`` (pairs × outcomes)
    P(the repair cures) after each outcome; ``counts`` the pairs per candidate.
    """

    uk: np.ndarray
    ur: np.ndarray
    slot: np.ndarray
    p_new: np.ndarray
    counts: np.ndarray


def _touched(tables: Tables, assign: np.ndarray, order: _Order, split: _Split) -> _Touched:
    """The repairs whose place an outcome moves, with P(cure) after each outcome."""
    R = len(tables.repair_ids)
    K, n_out = split.z.shape
    er = assign[split.eh]
    v = er >= 0
    key = split.ek[v] * R + er[v]
    uniq, inv = np.unique(key, return_inverse=True)
    uk, ur = uniq // R, uniq % R
    U = len(uniq)
    ex_mass = np.bincount(inv, weights=split.pe[v], minlength=U)
    new_mass = np.empty((U, n_out))
    for o in range(n_out):
        new_mass[:, o] = np.bincount(inv, weights=split.new_ex[v, o], minlength=U)
    new_mass += split.alpha[uk] * np.clip(order.mass[ur] - ex_mass, 0.0, None)[:, None]
    p_new = tables.success[ur][:, None] * new_mass
    counts = np.bincount(uk, minlength=K)
    start = np.cumsum(counts) - counts
    slot = np.arange(U) - start[uk]
    return _Touched(uk, ur, slot, p_new, counts)


def _ecr_after(touched: _Touched, order: _Order, alpha: np.ndarray, escalation: float,
               ) -> np.ndarray:
    """ECR after each outcome (candidates × outcomes): the touched repairs move, the rest scale.

    Checks go in batches of like width, so that the (checks × outcomes × m ×
    m) arrays stay below ``_BATCH`` elements.
    """
    counts = touched.counts
    K, n_out = alpha.shape
    ecr_after = np.empty((K, n_out))
    by_width = np.argsort(counts, kind="stable")
    lo = 0
    while lo < K:
        hi = lo + 1
        while hi < K:
            width = max(int(counts[by_width[hi]]), 1)
            if (hi + 1 - lo) * n_out * width * width > _BATCH:
                break
            hi += 1
        batch = by_width[lo:hi]
        ecr_after[batch] = _ecr_batch(batch, alpha[batch], touched, order, escalation)
        lo = hi
    return ecr_after


def _ecr_batch(batch: np.ndarray, alpha: np.ndarray, touched: _Touched, order: _Order,
               escalation: float) -> np.ndarray:
    """ECR after each outcome for the checks in ``batch`` (see :func:`lookahead`).

    The repairs of the global p/c order that a check's outcome does not touch
    keep their order and scale by ``alpha`` (the batch's rows); those worth
    trying (ratio at least 1/E) are a prefix of that order, cut at ``n_cut``.
    The touched repairs (at most ``m`` per check) are taken out and merged
    back at their new place.
    """
    rhos, p_before, c_from, g_cum = order.rhos, order.p_before, order.c_from, order.g_cum
    m = max(int(touched.counts[batch].max()), 1)
    a_pn, a_c, a_po, a_rank = _batch_slots(batch, m, touched, order)
    live = alpha > 0
    safe_alpha = np.where(live, alpha, 1.0)
    n_cut = np.where(live, np.searchsorted(-rhos, -(1.0 / (safe_alpha * escalation)).ravel(),
                                           side="right").reshape(alpha.shape), 0)
    pre = _TouchedPrefix(a_po, a_c, a_rank, order)
    at = pre.at
    i_cut = pre.below(n_cut)
    g_b = (g_cum[n_cut] - p_before[n_cut] * c_from[n_cut]
           - (at(pre.cpc, i_cut) - c_from[n_cut] * at(pre.cp, i_cut) + at(pre.ccp, i_cut))
           + at(pre.ct, i_cut))
    p_b = p_before[n_cut] - at(pre.cp, i_cut)
    c_b = c_from[0] - c_from[n_cut] - at(pre.cc, i_cut)

    rho = a_pn / np.where(a_c > 0, a_c, 1.0)[:, None, :]
    valid = (a_pn > 0) & (rho >= 1.0 / escalation)
    pn = np.where(valid, a_pn, 0.0)
    ce = np.where(valid, a_c[:, None, :], 0.0)
    rho = np.where(valid, rho, 0.0)
    cut3 = n_cut[:, :, None]
    pos = np.searchsorted(-rhos, -(rho / safe_alpha[:, :, None]).ravel(),
                          side="left").reshape(rho.shape)
    pos = np.minimum(pos, cut3)
    i_pos = pre.below(pos)
    before_p = p_before[pos] - at(pre.cp, i_pos)
    after_c = c_from[pos] - c_from[cut3] - (at(pre.cc, i_cut)[:, :, None] - at(pre.cc, i_pos))
    cross = (alpha[:, :, None] * ce * before_p + pn * after_c).sum(axis=2)
    new_order = np.argsort(-rho, axis=2, kind="stable")
    ps_new = np.take_along_axis(pn, new_order, axis=2)
    cs_new = np.take_along_axis(ce, new_order, axis=2)
    aa = (cs_new * (np.cumsum(ps_new, axis=2) - ps_new)).sum(axis=2)
    c_seq = c_b + ce.sum(axis=2)
    p_seq = alpha * p_b + pn.sum(axis=2)
    pairs = alpha * g_b + cross + aa
    return c_seq - pairs + escalation * (1.0 - p_seq)


def _batch_slots(batch: np.ndarray, m: int, touched: _Touched, order: _Order,
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The touched repairs of each check in ``batch``, in ``m`` slots a check.

    Returns P(cure) after each outcome (checks × outcomes × m), minutes,
    P(cure) now and place in the global order (checks × m; an empty slot has
    0, 0 and −1).
    """
    uk, ur = touched.uk, touched.ur
    K = len(batch)
    n_out = touched.p_new.shape[1]
    local = np.full(len(touched.counts), -1, dtype=np.int64)
    local[batch] = np.arange(K)
    pick = np.flatnonzero(local[uk] >= 0) if len(uk) else np.zeros(0, np.int64)
    kk, ss, rr = local[uk[pick]], touched.slot[pick], ur[pick]
    a_pn = np.zeros((K, n_out, m))
    a_pn[kk, :, ss] = touched.p_new[pick]
    a_c = np.zeros((K, m))
    a_c[kk, ss] = order.c[rr]
    a_po = np.zeros((K, m))
    a_po[kk, ss] = order.prob[rr]
    a_rank = np.full((K, m), -1, dtype=np.int64)
    a_rank[kk, ss] = order.rank[rr]
    return a_pn, a_c, a_po, a_rank


def _cum_rows(x: np.ndarray) -> np.ndarray:
    """Prefix sums along each row, with a leading 0."""
    return np.concatenate([np.zeros((x.shape[0], 1)), np.cumsum(x, axis=1)], axis=1)


class _TouchedPrefix:
    """The touched repairs of a batch's checks by their place in the global order.

    With prefix sums over them (``cp``: Σ p, ``cc``: Σ c, ``cpc``: Σ p times
    the global minutes after, ``ccp``: Σ c times the global P before, ``ct``:
    Σ over touched pairs a before b of p_a c_b), "Σ over touched repairs
    placed before x" is one lookup (a batched searchsorted).
    """

    def __init__(self, a_po: np.ndarray, a_c: np.ndarray, a_rank: np.ndarray,
                 order: _Order) -> None:
        K, self._m = a_rank.shape
        N = len(order.rhos)
        key = np.where(a_rank >= 0, a_rank, N + 1)
        by_rank = np.argsort(key, axis=1, kind="stable")
        sr = np.take_along_axis(key, by_rank, axis=1)
        sp = np.take_along_axis(a_po, by_rank, axis=1) * (sr <= N)
        sc = np.take_along_axis(a_c, by_rank, axis=1) * (sr <= N)
        srk = np.minimum(sr, N)
        spc = sp * order.c_from[np.minimum(srk + 1, N)]
        scp = sc * order.p_before[srk]
        self.cp, self.cc = _cum_rows(sp), _cum_rows(sc)
        self.cpc, self.ccp = _cum_rows(spc), _cum_rows(scp)
        self.ct = _cum_rows(sc * self.cp[:, :-1])
        self._k = K
        self._stride = N + 2
        self._flat = (sr + np.arange(K)[:, None] * self._stride).ravel()

    def below(self, x: np.ndarray) -> np.ndarray:
        """How many touched repairs of each check sit before global place ``x``."""
        rows = np.arange(self._k).reshape((self._k,) + (1,) * (x.ndim - 1))
        found = np.searchsorted(self._flat, (x + rows * self._stride).ravel(), side="left")
        return found.reshape(x.shape) - rows * self._m

    def at(self, table: np.ndarray, i: np.ndarray) -> np.ndarray:
        """``table[check, i]`` for each check (the first axis of ``i``)."""
        rows = np.arange(self._k).reshape((self._k,) + (1,) * (i.ndim - 1))
        return table[rows, i]


# --- the plan ------------------------------------------------------------------------------

def plan(model: Model, evidence: Evidence, *, max_faults: int = 1,
         settings: Settings = DEFAULT, post: Posterior | None = None) -> Plan:
    """Rank the next actions and choose one (see the module docstring for the rule).

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
    checks = _check_standing(model, evidence, tables)
    repairs, p_fix = _repair_standing(model, evidence, tables, p)
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
    action = _decide(model, evidence, post, settings, result)
    return replace(result, action=action)


@dataclass(frozen=True)
class _Standing:
    """The checks or the repairs as a plan weighs them; the arrays and dicts fill in place.

    ``code`` says why each cannot be proposed (an index into
    ``_CHECK_STATUS`` or ``_REPAIR_STATUS``; 0: it can), ``minutes`` include
    unmet prerequisites and setup, ``needs`` the unmet prerequisites in the
    order to do them, ``blocked`` why an item got ``blocked_code``. ``items``
    is ``model.checks`` or ``model.repairs``, keyed by ``ids``.
    """

    ids: tuple[str, ...]
    items: Mapping[str, Any]
    minutes: np.ndarray
    code: np.ndarray
    blocked_code: int
    needs: dict[int, tuple[str, ...]] = field(default_factory=dict)
    blocked: dict[int, str] = field(default_factory=dict)


def _check_standing(model: Model, evidence: Evidence, tables: Tables) -> _Standing:
    """Why each check cannot be proposed (codes of ``_CHECK_STATUS``), minutes with setup."""
    st = _Standing(tables.check_ids, model.checks, tables.check_minutes.copy(),
                   np.zeros(len(tables.check_ids), dtype=np.int8), 8)
    code, cmin = st.code, st.minutes
    _prerequisites(model, evidence, tables.checks_needing, tables.check_needs, st)
    code[tables.check_one_outcome] = 7
    code[tables.check_prep] = 6
    for i in tables.checks_only_if:
        if not only_if_matches(model, evidence, model.checks[tables.check_ids[i]]):
            code[i] = 5
    state = unit_state(model, evidence)
    for i in tables.checks_requiring:
        extra = setup_minutes(model, state, model.checks[tables.check_ids[i]].requires)
        if extra == float("inf"):
            code[i] = 9
        elif extra > 0:
            cmin[i] += extra
    _withhold(model, evidence, tables.checks_withheld, st)
    if evidence.mode == "phone":
        code[~tables.check_phone] = 4
        for i in tables.checks_hazardous:
            if code[i] != 4 and not caller_safe(model, evidence,
                                                model.checks[tables.check_ids[i]]):
                code[i] = 10
    pos = tables.check_pos
    for ids, c in ((evidence.skipped, 3), (evidence.unsure, 2), (evidence.findings, 1)):
        for cid in ids:
            if cid in pos:
                code[pos[cid]] = c
    return st


def _repair_standing(model: Model, evidence: Evidence, tables: Tables, p: np.ndarray,
                     ) -> tuple[_Standing, np.ndarray]:
    """The repairs (codes of ``_REPAIR_STATUS``, minutes with prerequisites) and P(fix)."""
    R = len(tables.repair_ids)
    st = _Standing(tables.repair_ids, model.repairs, tables.minutes.copy(),
                   np.zeros(R, dtype=np.int8), 3)
    rcode = st.code
    _prerequisites(model, evidence, tables.repairs_needing, tables.repair_needs, st)
    _withhold(model, evidence, tables.repairs_withheld, st)
    p_fix = np.bincount(tables.fix_repair, weights=p[tables.fix_hyp], minlength=R)
    rcode[(p_fix <= EPS) & (rcode == 0)] = 4
    for i in tables.repairs_only_if:
        if not only_if_matches(model, evidence, model.repairs[tables.repair_ids[i]]):
            rcode[i] = 6
    if evidence.mode == "phone":
        rcode[~tables.repair_phone] = 2
        for i in tables.repairs_hazardous:
            if rcode[i] != 2 and not caller_safe(model, evidence,
                                                 model.repairs[tables.repair_ids[i]]):
                rcode[i] = 7
    for rid in evidence.repairs_skipped:
        if rid in tables.repair_index:
            rcode[tables.repair_index[rid]] = 5
    for rid in evidence.repairs_done:
        rcode[tables.repair_index[rid]] = 1
    return st, p_fix


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


def _withhold(model: Model, evidence: Evidence, which: tuple[int, ...], st: _Standing) -> None:
    """Items whose hazards wait for a state (the load supported): that step comes first.

    The preparation step that leaves the unit in that state is proposed first,
    even when it was done before and the state has changed since; with none,
    the item is blocked until the state is recorded (``state`` in the shell).
    """
    needs, blocked = st.needs, st.blocked
    for i in which:
        missing = missing_state(model, evidence, st.items[st.ids[i]])
        if not missing:
            continue
        steps = state_steps(model, missing)
        if not steps:
            blocked[i] = "waiting for " + ", ".join(f"{k}: {v}" for k, v in missing.items())
            st.code[i] = st.blocked_code
            continue
        first = steps[0]
        if evidence.mode == "phone" and not model.checks[first].phone_ok:
            blocked[i] = f"needs {first} (site only)"
            st.code[i] = st.blocked_code
            continue
        if first not in needs.get(i, ()):
            needs[i] = (first,) + needs.get(i, ())
            st.minutes[i] += model.checks[first].minutes


def _prerequisites(model: Model, evidence: Evidence, which: tuple[int, ...],
                   needs_of: tuple[tuple[str, ...], ...], st: _Standing) -> None:
    """Unmet prerequisites of items ``which``: adds their minutes, marks the blocked ones."""
    for i in which:
        needs, blocked = missing_prerequisites(model, evidence, needs_of[i])
        if needs:
            st.needs[i] = needs
            st.minutes[i] += sum(model.checks[n].minutes for n in needs)
        if blocked:
            st.blocked[i] = blocked
            st.code[i] = st.blocked_code


def next_action(model: Model, evidence: Evidence, *, max_faults: int = 1,
                settings: Settings = DEFAULT) -> Action:
    """The proposed next action (see :func:`plan`)."""
    return plan(model, evidence, max_faults=max_faults, settings=settings).action


def checks_table(model: Model, evidence: Evidence, *, max_faults: int = 1,
                 settings: Settings = DEFAULT) -> ChecksTable:
    """Every check with minutes, expected information, ECO and why it is not offered."""
    pl = plan(model, evidence, max_faults=max_faults, settings=settings)
    return ChecksTable(pl.checks(), pl.ecr, evidence.mode)


def _decide(model: Model, evidence: Evidence, post: Posterior, settings: Settings,
            pl: Plan) -> Action:
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
    live = pl.repair_code == 0
    ratio = np.where(live, pl.p_cure / pl.repair_minutes, -np.inf)
    for_top = live & np.array([known and top.cause in model.repairs[r].fixes
                               for r in pl.repair_ids], dtype=bool)
    if known and top.p >= thr:
        if for_top.any():
            best = int(np.argmax(np.where(for_top, ratio, -np.inf)))
            why = (f"{top.cause} is likely enough ({top.p:.2f}) for the caller to try this now"
                   if phone else f"{top.cause} is likely enough to act ({top.p:.2f})")
            return _repair_action(pl, best, why)
        if phone:
            return _visit(model, evidence, post, f"{top.cause} is likely ({top.p:.2f}); "
                          "it is repaired on site")
    informative = (pl.check_code == 0) & (pl.check_bits >= settings.min_bits)
    if informative.any():
        best_c = int(np.argmin(np.where(informative, pl.check_eco, np.inf)))
        if pl.check_eco[best_c] < pl.ecr:
            return _check_action(pl, best_c, _phone_question(model, post, pl.check_ids[best_c])
                                 if phone else "observing first saves minutes")
        if known and top.p >= settings.act_floor and for_top.any():
            best = int(np.argmax(np.where(for_top, ratio, -np.inf)))
            # below the threshold, repair only when being wrong costs less than a look
            regret = (1.0 - top.p) * float(pl.repair_minutes[best])
            cheapest = float(np.min(np.where(informative, pl.check_minutes, np.inf)))
            if top.p >= thr or regret <= settings.regret_share * cheapest:
                return _repair_action(pl, best, _ON_PHONE["try now"] if phone else
                                      "repairing now is cheaper")
        return _check_action(pl, best_c, _phone_question(model, post, pl.check_ids[best_c])
                             if phone else "not yet sure enough to repair")
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


def _unsupported(model: Model, evidence: Evidence, post: Posterior, settings: Settings,
                 pl: Plan, phone: bool) -> Action:
    """No answer points at a known cause yet: no repair; observe while worth it, then escalate.

    A check is worth its minutes when it is informative (``min_bits``) and
    observing costs less in expectation than escalating now.
    """
    informative = (pl.check_code == 0) & (pl.check_bits >= settings.min_bits)
    if phone and informative.any():  # a question costs the caller little; the visit is next
        best_c = int(np.argmin(np.where(informative, pl.check_eco, np.inf)))
        return _check_action(pl, best_c, _phone_question(model, post, pl.check_ids[best_c]))
    worth = informative & (pl.check_eco < settings.escalation_minutes)
    if worth.any():
        best_c = int(np.argmin(np.where(worth, pl.check_eco, np.inf)))
        return _check_action(pl, best_c, "no answer points at a cause yet, so look first")
    if phone:  # the site checks are still to come: a technician, unless nothing known fits
        if post.unknown >= 0.5:
            return _escalate(post, _ON_PHONE["fits none"])
        return _visit(model, evidence, post, "no caller answer points at a cause: the site "
                      "checks will tell")
    return _escalate(post, "every answer reads normal and no check left is worth its "
                           "minutes: none of the known causes is shown")


#: Reasons in phone mode: no work on site is proposed, so none is spoken of.
_ON_PHONE = {
    "fits none": "the answers fit none of the known causes: a site visit with an "
                 "application engineer is needed",
    "try now": "the caller can try this now, before a site visit is sent",
}


def _phone_question(model: Model, post: Posterior, check_id: str) -> str:
    """What a question to the caller is for: the likely causes it tells more about.

    >>> from diagnose.reasoning.synthetic import tiny_model
    >>> m = tiny_model()
    >>> e = Evidence(complaints=("will_not_release",), mode="phone")
    >>> _phone_question(m, posterior(m, e), "listen_click")  # doctest: +NORMALIZE_WHITESPACE
    'to find out by phone whether a site visit is needed and which parts it brings (it tells
    more about lining_worn and fuse_blown)'

    """
    effects = model.checks[check_id].effects
    about = [e.cause for e in post.ranking().entries if e.cause in effects][:2]
    named = f" (it tells more about {' and '.join(about)})" if about else ""
    return f"to find out by phone whether a site visit is needed and which parts it brings{named}"


def _check_action(pl: Plan, i: int, reason: str) -> Action:
    cid = pl.check_ids[i]
    model = pl.model
    needs = pl.check_needs.get(i, ())
    minutes, bits, eco = float(pl.check_minutes[i]), float(pl.check_bits[i]), float(pl.check_eco[i])
    if needs:
        first = model.checks[needs[0]]
        return Action("check", first.id, first.title, f"needed before {cid}", first.minutes,
                      bits=bits, target=cid, eco=eco, ecr=pl.ecr)
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
        return Action("check", first.id, first.title, f"needed before {rid}", first.minutes,
                      p=p_fix, target=rid, causes=causes, parts=tuple(r.parts), ecr=pl.ecr)
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
