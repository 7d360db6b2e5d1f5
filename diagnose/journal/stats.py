"""Figures over many sessions: what was found, how fast, with which checks.

* confirmed causes by frequency (closed sessions whose cause a cure confirmed);
* mean minutes to the cure, on the clock (first event to the curing repair)
  and by the pack's estimates (the checks and repairs done up to it);
* the checks used most (answered, read, unsure; skips not counted);
* first-repair success: of the sessions with a repair, the share whose first
  repair cured;
* sessions escalated, and every end result with its count.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from diagnose.journal.record import build_record


@dataclass(frozen=True)
class Stats:
    """The statistics of the sessions of one pack (or of all packs when ``pack`` is None)."""

    pack: str | None
    sessions: int = 0
    open: int = 0
    closed: int = 0
    causes: tuple[tuple[str, str, int], ...] = ()  # id, title, count
    checks: tuple[tuple[str, str, int], ...] = ()  # id, title, count
    cures: int = 0
    mean_minutes_to_cure: float | None = None
    mean_work_minutes_to_cure: float | None = None
    with_repair: int = 0
    first_repair_cured: int = 0
    escalated: int = 0
    results: dict[str, int] = field(default_factory=dict)

    @property
    def first_repair_rate(self) -> float | None:
        return self.first_repair_cured / self.with_repair if self.with_repair else None

    def to_dict(self) -> dict[str, Any]:
        return {
            "pack": self.pack, "sessions": self.sessions, "open": self.open,
            "closed": self.closed, "cures": self.cures,
            "confirmed_causes": [{"cause": c, "title": t, "count": n} for c, t, n in self.causes],
            "mean_minutes_to_cure": self.mean_minutes_to_cure,
            "mean_work_minutes_to_cure": self.mean_work_minutes_to_cure,
            "checks_used": [{"check": c, "title": t, "count": n} for c, t, n in self.checks],
            "first_repair": {"sessions_with_repair": self.with_repair,
                             "cured_by_first": self.first_repair_cured,
                             "rate": None if self.first_repair_rate is None
                             else round(self.first_repair_rate, 4)},
            "escalated": self.escalated, "results": dict(self.results),
        }


def _mean(values: list[float]) -> float | None:
    return round(sum(values) / len(values), 1) if values else None


def stats(journal: Any, pack_id: str | None = None,
          model_for: Callable[[str], Any] | None = None, *, top: int = 10) -> Stats:
    """The statistics of ``journal`` for ``pack_id`` (all packs when None).

    ``model_for(pack_id)`` gives the compiled pack for titles and for telling
    which cause a cure confirmed (None when it cannot be loaded).
    """
    models: dict[str, Any] = {}

    def model(pid: str) -> Any:
        if pid not in models:
            models[pid] = model_for(pid) if model_for else None
        return models[pid]

    infos = journal.sessions(pack_id=pack_id)
    causes: Counter[str] = Counter()
    checks: Counter[str] = Counter()
    titles: dict[str, str] = {}
    results: Counter[str] = Counter()
    clock: list[float] = []
    work: list[float] = []
    with_repair = first_cured = escalated = 0
    for info in infos:
        m = model(info.pack_id)
        rec = build_record(info, journal.load_events(info.id), m, journal.load_rankings(info.id))
        if rec.result:
            results[rec.result] += 1
        escalated += rec.result == "escalated"
        for step in rec.checks:
            if step.kind != "skip":
                checks[step.id] += 1
                titles[f"check:{step.id}"] = step.title
        if rec.repairs:
            with_repair += 1
            first_cured += bool(rec.repairs[0].cured)
        if info.status == "closed" and rec.cause:
            causes[rec.cause["id"]] += 1
            titles[f"cause:{rec.cause['id']}"] = rec.cause["title"]
            cure = next(s for s in rec.repairs if s.cured)
            if rec.minutes_to_cure is not None:
                clock.append(rec.minutes_to_cure)
            work.append(sum(float(s.minutes or 0) for s in rec.steps
                            if s.n <= cure.n and s.kind != "skip"))
    return Stats(
        pack=pack_id, sessions=len(infos), open=sum(1 for i in infos if i.is_open),
        closed=sum(1 for i in infos if not i.is_open),
        causes=tuple((c, titles[f"cause:{c}"], n) for c, n in causes.most_common()),
        checks=tuple((c, titles[f"check:{c}"], n) for c, n in checks.most_common(top)),
        cures=sum(causes.values()), mean_minutes_to_cure=_mean(clock),
        mean_work_minutes_to_cure=_mean(work), with_repair=with_repair,
        first_repair_cured=first_cured, escalated=escalated, results=dict(results))
