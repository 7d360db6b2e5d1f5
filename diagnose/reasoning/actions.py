"""What the planner proposes, and everything it chose from: the values of a plan.

An :class:`Action` is the next step (a check, a repair, an escalation, a
site visit, or done); a :class:`Plan` holds it with the scores of every
check (minutes, expected information, ECO) and every repair (P(fix),
P(cure), minutes) and why each cannot be proposed now; a
:class:`ChecksTable` is the checks as rows. They turn into plain data with
``to_dict()``; the faces draw them (:mod:`diagnose.views_reasoning`).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from diagnose.kb.model import Model
from diagnose.reasoning.eligibility import CHECK_STATUS, REPAIR_STATUS
from diagnose.reasoning.posterior import RankEntry
from diagnose.reasoning.ties import by_preference

__all__ = ["Action", "CheckScore", "ChecksTable", "Plan", "RepairScore"]

CHECK_BLOCKED = CHECK_STATUS.index("blocked")  # its reason is kept in words
REPAIR_BLOCKED = REPAIR_STATUS.index("blocked")


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


@dataclass(frozen=True, eq=False)
class Plan:
    """The next action with everything it was chosen from.

    The scores are kept as arrays (check and repair order of the model's
    tables); :meth:`checks` and :meth:`repairs` turn them into ranked rows.
    ``check_eco`` is NaN for a check that cannot be proposed now, and, until
    :meth:`ecos` is called, for a check the decision rule could not choose
    (less information than ``Settings.min_bits``): the planner computes those
    only when asked (``fill_eco`` fills them in, in place). The order of every
    check and every repair is worked out once, when first asked for
    (:meth:`check_order`, :meth:`repair_order`), with NumPy; the rows of
    :meth:`checks` and :meth:`repairs` are made only for those asked for.
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
    fill_eco: Callable[[], None] | None = field(default=None, repr=False)

    def with_action(self, action: Action) -> Plan:
        """This plan with ``action`` (the same scores, shared; as ``dataclasses.replace``,
        without its cost per field)."""
        out = object.__new__(Plan)
        out.__dict__.update(self.__dict__, action=action)
        return out

    def ecos(self) -> np.ndarray:
        """The ECO of every check that can be proposed now (NaN for the others)."""
        if self.fill_eco is not None:
            self.fill_eco()
        return self.check_eco

    def check_order(self) -> np.ndarray:
        """Every check's index in the order of :meth:`checks` (computed once per plan)."""
        memo = self.__dict__.get("_check_order")
        if memo is None:
            eco = self.ecos()
            live = self.check_code == 0
            first = by_preference(np.flatnonzero(live), eco, self.check_bits,
                                  self.check_minutes, self.check_ids)
            memo = np.concatenate([np.array(first, dtype=np.intp), np.flatnonzero(~live)])
            self.__dict__["_check_order"] = memo  # the scores are fixed: so is their order
        return memo

    def repair_order(self) -> np.ndarray:
        """Every repair's index in the order of :meth:`repairs` (computed once per plan)."""
        memo = self.__dict__.get("_repair_order")
        if memo is None:
            ratio = self.p_cure / self.repair_minutes
            memo = np.lexsort((-ratio, self.repair_code != 0))
            self.__dict__["_repair_order"] = memo
        return memo

    def checks(self, limit: int | None = None) -> tuple[CheckScore, ...]:
        """Checks, those that can be proposed first, by ECO (least first); the first ``limit``.

        Ties go by the rule of :mod:`diagnose.reasoning.ties` (more bits, fewer
        minutes, id); the others follow in the model's order. Every check is
        ordered; rows are made only for those asked for.
        """
        return tuple(self._check_row(i) for i in self.check_order()[:limit].tolist())

    def check_score(self, check_id: str) -> CheckScore:
        """The row of one check, as :meth:`checks` has it.

        Raises:
            ValueError: not a check of the plan.
        """
        i = self.check_ids.index(check_id)
        self.ecos()
        return self._check_row(i)

    def _check_row(self, i: int) -> CheckScore:
        code = int(self.check_code[i])
        status = self.check_blocked.get(i, "") if code == CHECK_BLOCKED else CHECK_STATUS[code]
        cid = self.check_ids[i]
        return CheckScore(cid, self.model.checks[cid].title, float(self.check_minutes[i]),
                          float(self.check_bits[i]), None if code else float(self.check_eco[i]),
                          status, self.check_needs.get(i, ()))

    def repairs(self, limit: int | None = None) -> tuple[RepairScore, ...]:
        """Repairs, those that can be proposed first, by p/c (highest first).

        Every repair is ordered; rows are made only for the first ``limit``.
        """
        out = []
        for i in self.repair_order()[:limit].tolist():
            code = int(self.repair_code[i])
            status = (self.repair_blocked.get(i, "") if code == REPAIR_BLOCKED
                      else REPAIR_STATUS[code])
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
    """Every check with its score now; available ones first, best ECO first.

    ``rows`` may be the first of them only (as many as are shown); ``total``
    counts them all (None: the rows are all of them).
    """

    rows: tuple[CheckScore, ...]
    ecr: float
    mode: str = "site"
    shown: int = 30
    extra: dict[str, Any] = field(default_factory=dict)
    total: int | None = None

    @property
    def count(self) -> int:
        """How many checks there are, rows made or not."""
        return len(self.rows) if self.total is None else self.total

    def to_list(self) -> list[dict[str, Any]]:
        return [r.to_dict() for r in self.rows]
