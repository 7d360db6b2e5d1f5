"""The record of one session: its events read back into what a repair log shows.

``build_record(info, events, model, rankings)`` folds a session's events (the
typed events of ``diagnose.events``, as the journal reads them back) into
a :class:`Record`: the unit and its nameplate, the complaint, every step with
its time, answer or reading (with the computed figures and the verdict), the
ranking after it, the cautions acknowledged, the repairs and their results,
the confirmed cause and the minutes. The report, the statistics and the
learning all read sessions through it, so they agree on what a session says.

It is the session's own fold (``diagnose.events.walk`` for which events
count, ``diagnose.session.apply`` for what each one says) with the times,
titles, figures and rankings a log needs beside it: the identity, mode,
complaints and end of a record are those of the session's evidence. The
model (the compiled pack) is optional: it gives titles, prompts and the
pack's minutes, and recomputes a ranking the journal does not hold; without
it (a pack since removed) ids stand in for titles.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any, NamedTuple

from diagnose.events import (
    STEP_KINDS,
    Acknowledged,
    Answered,
    Attached,
    ComplaintReported,
    Ended,
    Event,
    HandedOver,
    LeftUnsure,
    NameplateRead,
    Noted,
    ReadingTaken,
    Reopened,
    Repaired,
    RepairSkipped,
    Skipped,
    Started,
    Undone,
    effective_indices,
    started,
    walk,
)
from diagnose.reasoning.evidence import Evidence

CHECK_KINDS = ("answer", "reading", "unsure", "skip")
RESOLVED = "resolved"  # the end result that means a repair cured the unit


@dataclass(frozen=True)
class Step:
    """One step of the diagnosis: a check answered, read, skipped, or a repair done."""

    n: int
    kind: str  # one of STEP_KINDS
    time: str
    id: str  # check or repair id
    title: str
    who: str | None = None
    outcome: str | None = None  # the outcome of a check (of a reading: its verdict)
    outcome_title: str | None = None
    reading: str | None = None  # the value(s) as typed
    summary: str | None = None  # the evaluator's sentence
    figures: tuple[Mapping[str, Any], ...] = ()  # label, value, unit
    weights: Mapping[str, float] = field(default_factory=dict)  # soft evidence
    cured: bool | None = None
    minutes: float | None = None  # the pack's estimate
    ranking: tuple[Mapping[str, Any], ...] = ()  # after this step: cause, title, p
    assumed: tuple[str, ...] = ()  # nameplate values a reading used that were not read
    parts: tuple[Mapping[str, Any], ...] = ()  # of a repair: the parts fitted

    def to_dict(self) -> dict[str, Any]:
        return {"n": self.n, "kind": self.kind, "time": self.time, "id": self.id,
                "title": self.title, "who": self.who, "outcome": self.outcome,
                "outcome_title": self.outcome_title, "reading": self.reading,
                "summary": self.summary, "figures": [dict(f) for f in self.figures],
                "weights": dict(self.weights) if len(self.weights) > 1 else {},
                "cured": self.cured, "minutes": self.minutes,
                "ranking": [dict(r) for r in self.ranking], "assumed": list(self.assumed),
                "parts": [dict(p) for p in self.parts]}


@dataclass(frozen=True)
class Record:
    """What one session says, ready for a report or a statistic."""

    session: Mapping[str, Any]
    pack: Mapping[str, Any]
    notice: str = ""
    identity: Mapping[str, str] = field(default_factory=dict)
    nameplate: tuple[Mapping[str, Any], ...] = ()
    complaints: tuple[Mapping[str, str], ...] = ()
    mode: str = "site"
    steps: tuple[Step, ...] = ()
    cautions: tuple[Mapping[str, Any], ...] = ()
    notes: tuple[Mapping[str, Any], ...] = ()
    attachments: tuple[Mapping[str, Any], ...] = ()  # sha256, name, caption, media_type, ...
    handovers: tuple[Mapping[str, Any], ...] = ()  # time, from, to, forced
    initial_ranking: tuple[Mapping[str, Any], ...] = ()
    final_ranking: tuple[Mapping[str, Any], ...] = ()
    result: str | None = None  # of the end: resolved, visit, escalated, abandoned
    cause: Mapping[str, str] | None = None  # confirmed by a cure
    finding: Mapping[str, str] | None = None  # id, title, by: "technician" or "cure"
    covers: tuple[Mapping[str, str], ...] = ()  # the causes the repair that cured fixes
    end: Mapping[str, Any] | None = None
    started: str = ""
    ended: str = ""
    clock_minutes: float | None = None
    minutes_to_cure: float | None = None
    work_minutes: float = 0.0
    events: int = 0
    undone: int = 0
    recomputed: bool = False  # rankings worked out again from the events, not as shown

    @property
    def repairs(self) -> tuple[Step, ...]:
        return tuple(s for s in self.steps if s.kind == "repair")

    @property
    def checks(self) -> tuple[Step, ...]:
        return tuple(s for s in self.steps if s.kind in CHECK_KINDS)

    @property
    def cured(self) -> bool:
        return any(s.cured for s in self.repairs)

    def to_dict(self) -> dict[str, Any]:
        return {
            "session": dict(self.session), "pack": dict(self.pack), "notice": self.notice,
            "identity": dict(self.identity), "nameplate": [dict(p) for p in self.nameplate],
            "complaints": [dict(c) for c in self.complaints], "mode": self.mode,
            "steps": [s.to_dict() for s in self.steps],
            "cautions": [dict(c) for c in self.cautions],
            "repairs": [s.to_dict() for s in self.repairs],
            "notes": [dict(n) for n in self.notes],
            "attachments": [dict(a) for a in self.attachments],
            "handovers": [dict(h) for h in self.handovers],
            "initial_ranking": [dict(r) for r in self.initial_ranking],
            "final_ranking": [dict(r) for r in self.final_ranking],
            "result": self.result, "cause": dict(self.cause) if self.cause else None,
            "finding": dict(self.finding) if self.finding else None,
            "covers": [dict(c) for c in self.covers],
            "end": dict(self.end) if self.end else None,
            "started": self.started, "ended": self.ended,
            "clock_minutes": self.clock_minutes, "minutes_to_cure": self.minutes_to_cure,
            "work_minutes": self.work_minutes, "events": self.events, "undone": self.undone,
            "rankings_recomputed": self.recomputed,
        }


# --- reading the events --------------------------------------------------------------------


def _title(table: Mapping[str, Any], key: str) -> str:
    return str(getattr(table.get(key), "title", "") or key)


def _cause_title(model: Any, cid: str) -> str:
    causes = getattr(model, "causes", None) or {}
    if cid in causes:
        return _title(causes, cid)
    return "None of the known causes" if cid == "unknown" else cid


def _named(ranking: Sequence[Mapping[str, Any]] | None, model: Any) -> tuple[dict[str, Any], ...]:
    if not ranking:
        return ()
    return tuple({"cause": str(r["cause"]), "title": _cause_title(model, str(r["cause"])),
                  "p": float(r.get("p", 0.0))} for r in ranking if "cause" in r)


def minutes_between(a: str, b: str) -> float | None:
    """Minutes from ISO time ``a`` to ``b`` (one decimal), or None if either is not a time.

    >>> minutes_between("2025-01-14T09:00:00+00:00", "2025-01-14T09:45:30+00:00")
    45.5
    """
    try:
        t0, t1 = datetime.fromisoformat(a), datetime.fromisoformat(b)
        return round(max((t1 - t0).total_seconds(), 0.0) / 60.0, 1)
    except (TypeError, ValueError):
        return None


def _text(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, (list, tuple)):
        return ", ".join(str(v) for v in value)
    return str(value)


def recompute_rankings(events: Sequence[Any], model: Any) -> list[list[dict[str, Any]] | None]:
    """The ranking after each step, worked out again from the events with ``model``."""
    from diagnose.journal.recorder import RANKED_KINDS
    from diagnose.reasoning.posterior import posterior
    from diagnose.session import fold

    max_faults = started(events).max_faults
    out: list[list[dict[str, Any]] | None] = []
    for i, ev in enumerate(events):
        if ev.kind not in RANKED_KINDS:
            out.append(None)
            continue
        try:
            post = posterior(model, fold(events[: i + 1]), max_faults=max_faults)
            out.append(post.ranking().to_list())
        except Exception:  # noqa: BLE001 (a pack changed since may not know an id any more)
            out.append(None)
    return out


def build_record(info: Any, events: Sequence[Event], model: Any = None,
                 rankings: Sequence[Any] | None = None) -> Record:
    """The record of a session from its metadata (``SessionInfo``), events and the model.

    ``rankings`` is the ranking kept beside each event (``Journal.load_rankings``);
    where none was kept and ``model`` is given, they are worked out again.
    """
    events = list(events)
    ranks, recomputed = _rankings(events, model, rankings)
    fold = _Fold(_Tables.of(model), getattr(info, "who", None),
                 Evidence(mode=getattr(info, "mode", "site") or "site"))
    keep, undone = effective_indices(events)
    # The last ranking kept, an undo's included: the ranking once a step was taken back.
    final: tuple[dict[str, Any], ...] = ()
    counted = set(keep) | {i for i, e in enumerate(events) if isinstance(e, Undone)}
    for i in sorted(counted):
        if ranks[i]:
            final = _named(ranks[i], model)
    for i, event in walk(events):
        fold.add(event, _named(ranks[i], model))

    ev, steps = fold.evidence, fold.steps
    end = dict(ev.end) if ev.end is not None else None
    started_at = str(events[0].time) if events else str(getattr(info, "started", ""))
    ended = str((events[keep[-1]] if keep else events[-1]).time) if events else ""
    if end is not None:
        ended = next(str(e.time) for e in events if isinstance(e, Ended))
    cure = next((s for s in steps if s.kind == "repair" and s.cured), None)
    result = _text((end or {}).get("result")) or getattr(info, "outcome", None)
    cause_id = confirmed_cause(result, end, steps, model)
    session = info.to_dict() if hasattr(info, "to_dict") else dict(info or {})
    if fold.site_who and fold.site_who != [session.get("who")]:
        phone, site = session.get("who"), ", ".join(fold.site_who)
        session["who"] = f"{phone} (phone), {site} (site)" if phone else site
    return Record(
        session=session, pack=_pack_of(session, events, model),
        notice=fold.notice or str(getattr(model, "notice", "") or ""),
        identity=dict(ev.identity), nameplate=tuple(fold.nameplate.values()),
        complaints=tuple({"id": c, "title": _title(fold.tables.complaints, c)}
                         for c in ev.complaints),
        mode=ev.mode, steps=tuple(steps), cautions=tuple(fold.cautions), notes=tuple(fold.notes),
        attachments=tuple(fold.attachments), handovers=tuple(fold.handovers),
        initial_ranking=fold.initial, final_ranking=final or fold.initial, result=result or None,
        cause={"id": cause_id, "title": _cause_title(model, cause_id)} if cause_id else None,
        finding=_finding(end, cause_id, model), covers=_covers(cure, model),
        end=end, started=started_at, ended=ended,
        clock_minutes=minutes_between(started_at, ended),
        minutes_to_cure=minutes_between(started_at, cure.time) if cure else None,
        work_minutes=sum(float(s.minutes or 0) for s in steps
                         if s.kind not in ("skip", "skip_repair")),
        events=len(events), undone=undone, recomputed=recomputed)


def _finding(end: Mapping[str, Any] | None, cause_id: str | None,
             model: Any) -> dict[str, str] | None:
    """The cause found: the one the technician confirmed at the end, else the one a cure did.

    >>> _finding({"finding": "unknown"}, "coil_open", None)
    {'id': 'unknown', 'title': 'None of the known causes', 'by': 'technician'}
    >>> _finding({}, "coil_open", None), _finding(None, None, None)
    ({'id': 'coil_open', 'title': 'coil_open', 'by': 'cure'}, None)
    """
    named = (end or {}).get("finding")
    if named:
        return {"id": str(named), "title": _cause_title(model, str(named)), "by": "technician"}
    if cause_id:
        return {"id": cause_id, "title": _cause_title(model, cause_id), "by": "cure"}
    return None


def _covers(cure: Step | None, model: Any) -> tuple[dict[str, str], ...]:
    """The causes the repair that cured fixes, by the model (none without a cure or a model)."""
    if cure is None:
        return ()
    repair = (getattr(model, "repairs", None) or {}).get(cure.id)
    return tuple({"id": str(c), "title": _cause_title(model, str(c))}
                 for c in getattr(repair, "fixes", ()))


def _rankings(events: list[Any], model: Any, rankings: Sequence[Any] | None,
              ) -> tuple[list[Any], bool]:
    """The ranking after each event (None where there is none), and whether worked out again.

    The rankings kept are used; where none was kept and a model is given,
    they are worked out again from the events.
    """
    ranks = list(rankings) if rankings is not None else [None] * len(events)
    ranks += [None] * (len(events) - len(ranks))
    if model is not None and not any(ranks) and any(e.kind in STEP_KINDS for e in events):
        return recompute_rankings(events, model), True
    return ranks, False


def _pack_of(session: Mapping[str, Any], events: list[Any], model: Any) -> dict[str, Any]:
    """The pack a session ran with (from its metadata and first notice) and the one loaded now."""
    first = started(events)
    return {"id": session.get("pack_id") or first.pack or getattr(model, "id", ""),
            "version": session.get("pack_version") or first.version,
            "content_hash": session.get("content_hash") or first.content_hash,
            "packs": list(first.packs),
            "title": str(getattr(model, "title", "")) if model is not None else "",
            "current_hash": getattr(model, "content_hash", None) if model is not None else None,
            "loaded": model is not None,
            "learned": session.get("learned")}


class _Tables(NamedTuple):
    """The model's tables a record takes titles, prompts and minutes from (empty without one)."""

    checks: Mapping[str, Any]
    repairs: Mapping[str, Any]
    cautions: Mapping[str, Any]
    parameters: Mapping[str, Any]
    complaints: Mapping[str, Any]

    @classmethod
    def of(cls, model: Any) -> _Tables:
        """The tables of ``model`` (None, or a pack since changed, gives empty ones)."""
        return cls(*(getattr(model, name, None) or {} for name in cls._fields))


@dataclass
class _Fold:
    """The session's evidence, and what a log shows beside it, folded one event at a time."""

    tables: _Tables
    who: str | None
    evidence: Evidence
    notice: str = ""
    nameplate: dict[str, dict[str, Any]] = field(default_factory=dict)
    steps: list[Step] = field(default_factory=list)
    cautions: list[dict[str, Any]] = field(default_factory=list)
    notes: list[dict[str, Any]] = field(default_factory=list)
    attachments: list[dict[str, Any]] = field(default_factory=list)
    initial: tuple[dict[str, Any], ...] = ()
    site_who: list[str] = field(default_factory=list)  # at the site, in order of their work
    handovers: list[dict[str, Any]] = field(default_factory=list)

    def add(self, event: Event, ranking: tuple[dict[str, Any], ...]) -> None:
        """Fold in one event that still counts; ``ranking`` is the one after it."""
        from diagnose.session import apply

        self.evidence = apply(self.evidence, event)
        match event:
            case Started(text=text):
                self.notice = text
            case NameplateRead(param=pid, value=value, text=typed, assumed=assumed):
                p = self.tables.parameters.get(pid)
                self.nameplate[pid] = {"id": pid, "prompt": getattr(p, "prompt", pid),
                                       "value": value, "typed": "" if assumed else typed,
                                       "assumed": assumed}
            case ComplaintReported():
                self.initial = ranking or self.initial
            case Acknowledged():
                self.cautions.append(self._caution(event))
            case Reopened(who=who) if who:
                self.site_who = [who]  # the technician who takes it up at the site
                self.who = who
            case HandedOver(taker=taker, giver=giver, forced=forced):
                self.handovers.append({"time": event.time, "from": giver, "to": taker,
                                       "forced": forced})
                self.who = taker  # what follows is theirs
                if self.site_who and taker not in self.site_who:
                    self.site_who.append(taker)  # another technician goes on at the site
            case Noted(text=text):
                self.notes.append({"time": event.time, "who": self.who, "text": text})
            case Attached():
                self.attachments.append({**event.data, "time": event.time, "who": self.who})
            case Answered() | ReadingTaken() | LeftUnsure() | Skipped():
                self.steps.append(self._check_step(event, ranking))
            case Repaired() | RepairSkipped():
                self.steps.append(self._repair_step(event, ranking))

    def _caution(self, event: Acknowledged) -> dict[str, Any]:
        """A caution acknowledged, with its level and text."""
        c = self.tables.cautions.get(event.caution)
        item = event.item or None  # the card it was for (not in older journals)
        return {"id": event.caution, "time": event.time, "who": self.who,
                "level": str(getattr(c, "level", "")), "text": str(getattr(c, "text", "")),
                "item": item, "item_title": self._item_title(item) if item else None}

    def _item_title(self, item: str) -> str:
        """The title of the check or repair ``item`` (its id without the model)."""
        table = self.tables.checks if item in self.tables.checks else self.tables.repairs
        return _title(table, item)

    def _check_step(self, event: Answered | ReadingTaken | LeftUnsure | Skipped,
                    ranking: tuple[dict[str, Any], ...]) -> Step:
        """A check answered, read, marked unsure or skipped."""
        checks = self.tables.checks
        cid = event.check
        check = checks.get(cid)
        outcome = event.outcome if isinstance(event, Answered) else \
            event.verdict if isinstance(event, ReadingTaken) else None
        titles = getattr(check, "outcome_titles", None) or {}
        reading = event if isinstance(event, ReadingTaken) else None
        return Step(
            n=len(self.steps) + 1, kind=event.kind, time=event.time, id=cid,
            title=_title(checks, cid), who=self.who, outcome=outcome or None,
            outcome_title=str(titles[outcome]) if outcome in titles else None,
            reading=_text(reading.text) if reading else None,
            summary=(reading.summary or None) if reading else None,
            figures=tuple({"key": k, "label": str(f.get("label", k)), "value": f.get("value"),
                           "unit": str(f.get("unit", ""))}
                          for k, f in reading.figures.items()) if reading else (),
            weights=dict(reading.weights) if reading else {},
            assumed=reading.assumed if reading else (),
            minutes=None if isinstance(event, Skipped) else getattr(check, "minutes", None),
            ranking=ranking)

    def _repair_step(self, event: Repaired | RepairSkipped,
                     ranking: tuple[dict[str, Any], ...]) -> Step:
        """A repair done (cured or not), or set aside (``skip_repair``)."""
        repairs = self.tables.repairs
        rid = event.repair
        n, title = len(self.steps) + 1, _title(repairs, rid)
        if isinstance(event, RepairSkipped):
            return Step(n=n, kind=event.kind, time=event.time, id=rid, title=title, who=self.who,
                        outcome="set aside: cannot be done now", minutes=None, ranking=ranking)
        return Step(n=n, kind=event.kind, time=event.time, id=rid, title=title, who=self.who,
                    cured=event.cured, outcome="cured" if event.cured else "not cured",
                    minutes=getattr(repairs.get(rid), "minutes", None), ranking=ranking,
                    parts=event.parts)


def confirmed_cause(result: str | None, end: Mapping[str, Any] | None, steps: Iterable[Step],
                    model: Any = None) -> str | None:
    """The cause a cure confirmed, or None (not resolved by a repair, or it cannot tell).

    The cause the session's end names counts when a repair cured and fixes it;
    else the cause the curing repair fixes, or of several, the one ranked
    highest just before it.
    """
    steps = list(steps)
    if result != RESOLVED:
        return None
    cure = next((s for s in steps if s.kind == "repair" and s.cured), None)
    if cure is None:
        return None
    repair = (getattr(model, "repairs", None) or {}).get(cure.id)
    fixes = tuple(getattr(repair, "fixes", ()))
    named = (end or {}).get("cause")
    if named and (not fixes or named in fixes):
        return str(named)
    if len(fixes) == 1:
        return fixes[0]
    before = [s.ranking for s in steps if s.n < cure.n and s.ranking]
    for entry in before[-1] if before else ():
        if entry["cause"] in fixes:
            return str(entry["cause"])
    return None


def session_record(journal: Any, session_id: str, model: Any = None) -> Record:
    """The record of ``session_id`` read from ``journal``."""
    info = journal.session(session_id)
    return build_record(info, journal.load_events(session_id), model,
                        journal.load_rankings(session_id))
