"""One diagnosis as a list of events; its state is a pure fold over them.

Every face (the shell, ``diagnose run``, the knowledge tests) goes through
:class:`Session`. A method that changes the state validates first (bad input
raises :class:`~diagnose.errors.InputError` and changes nothing), then makes
one typed event (``diagnose.events``: :class:`~diagnose.events.Answered`,
:class:`~diagnose.events.Repaired`, ...), hands it to the sink (``write(session_id, event)``; the
journal's SQLite store is one), and only then appends it. The state
(:class:`~diagnose.reasoning.evidence.Evidence`) is :func:`fold` of the
events, so :meth:`Session.undo` is an ``undo`` event that hides an earlier
one, and :meth:`Session.replay` rebuilds a session from a journal.

:func:`apply` says what each kind of event means for the evidence; the
repair log folds the same events through it.

``notice``, ``ack``, ``reminder``, ``end`` and ``undo`` cannot be undone; a safety
acknowledgement stays on the record. A DANGER or WARNING caution is
acknowledged per card: an ``ack`` covers the card its ``item`` names and no
other. An ``ack`` without ``item`` (older journals) is kept on the record but
covers no card, so a resumed session asks for it again before the next card
that carries the caution (the safe reading). Nothing is recorded after the
``end``. No terminal I/O here.
"""

from __future__ import annotations

import os
import uuid
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field, replace
from datetime import datetime
from typing import TYPE_CHECKING, Any, Protocol, TypeVar

from diagnose.errors import InputError
from diagnose.events import (
    Acknowledged,
    Answered,
    Attached,
    ComplaintReported,
    Ended,
    Event,
    EventError,
    HandedOver,
    HistoryNoted,
    IdentityGiven,
    LeftUnsure,
    ModeSet,
    NameplateRead,
    Noted,
    ReadingTaken,
    Reminded,
    Reopened,
    Repaired,
    RepairSkipped,
    RepairStarted,
    Skipped,
    Started,
    StateSet,
    Undone,
    effective,
)
from diagnose.events import fold as fold_events
from diagnose.kb.model import Case, Caution, Check, Model, Parameter, Step
from diagnose.physics.verdict import Verdict
from diagnose.reasoning.evidence import MODES, Evidence
from diagnose.reasoning.nameplate import nameplate_value, only_if_matches, parameter_needed
from diagnose.reasoning.safety import card_cautions, lapsed_since, renewals
from diagnose.reasoning.unitstate import setup_steps, unit_state

if TYPE_CHECKING:  # numpy comes with these: imported when the first ranking is asked for
    from diagnose.reasoning.explain import CheckExplanation, RankingExplanation
    from diagnose.reasoning.planner import Action, ChecksTable, Plan, Settings
    from diagnose.reasoning.posterior import Posterior, Ranking

E = TypeVar("E", bound=Event)


def plan(model: Model, evidence: Evidence, **options: Any) -> Plan:
    """:func:`diagnose.reasoning.planner.plan`, imported when first asked for (with numpy)."""
    from diagnose.reasoning.planner import plan as weigh

    return weigh(model, evidence, **options)

END_RESULTS = ("resolved", "visit", "escalated", "abandoned")


class Sink(Protocol):
    """Where events go as they happen; ``write`` returns once the event is stored."""

    def write(self, session_id: str, event: Event) -> None: ...


class NullSink:
    """Stores nothing."""

    def write(self, session_id: str, event: Event) -> None:
        return None


class MemorySink:
    """Keeps every event in memory, per session id (for tests and scripted runs)."""

    def __init__(self) -> None:
        self.events: dict[str, list[Event]] = {}

    def write(self, session_id: str, event: Event) -> None:
        self.events.setdefault(session_id, []).append(event)


def _now() -> str:
    """The local time with its UTC offset, to the second (the log shows times as local)."""
    return datetime.now().astimezone().isoformat(timespec="seconds")


# --- the fold ------------------------------------------------------------------------------

def effective_events(events: Iterable[Event]) -> list[Event]:
    """The events that still count: ``undo`` events and the events they undid are dropped."""
    return effective(events)


def apply(evidence: Evidence, event: Event) -> Evidence:
    """The evidence after one event (a kind this program does not know changes nothing)."""
    match event:
        case Started(mode=mode):
            return replace(evidence, mode=mode)
        case IdentityGiven(fields=fields):
            return replace(evidence, identity={**evidence.identity, **fields})
        case NameplateRead(param=param, value=value, assumed=assumed):
            return evidence.with_nameplate(param, value, assumed)
        case ComplaintReported(complaint=complaint):
            return evidence.with_complaint(complaint)
        case Answered(check=check, outcome=outcome):
            return evidence.with_outcome(check, outcome)
        case ReadingTaken(check=check):
            return evidence.with_finding(check, event.finding)
        case LeftUnsure(check=check):
            return evidence.with_unsure(check)
        case Skipped(check=check):
            return evidence.with_skip(check)
        case RepairSkipped(repair=repair):
            return evidence.with_skipped_repair(repair)
        case Acknowledged(caution=caution, item=item, step=step):
            return evidence.with_acknowledgement(caution, item or None, step)
        case Repaired(repair=repair, cured=cured):
            return evidence.with_repair(repair, cured)
        case RepairStarted(repair=repair):
            return replace(evidence, pending_repair=repair)
        case Noted(text=text):
            return replace(evidence, notes=evidence.notes + (text,))
        case ModeSet(mode=mode):
            return evidence.with_mode(mode)
        case StateSet(state=state, value=value):
            return evidence.with_state(state, value)
        case HistoryNoted(cause=cause, factor=factor):
            return evidence.with_history(cause, factor)
        case Ended():
            return replace(evidence, end=event.data)
        case Reopened(mode=mode):  # the site visit: whoever is there acknowledges afresh
            return replace(evidence, end=None, mode=mode, acks=())
        case HandedOver():  # another person goes on: their own acknowledgements count
            return replace(evidence, acks=())
    return evidence


def fold(events: Iterable[Event], start: Evidence | None = None) -> Evidence:
    """The state of a diagnosis: its effective events applied in order (the one fold)."""
    return fold_events(events, apply, start if start is not None else Evidence())


# --- findings ------------------------------------------------------------------------------

@dataclass(frozen=True)
class Finding:
    """The result of answering a check: the outcome (weights for soft evidence) and the figures."""

    check: str
    outcome: str | None  # None for "unsure"
    weights: dict[str, float] = field(default_factory=dict)
    text: Any = None
    verdict: Verdict | None = None
    assumed: tuple[str, ...] = ()  # nameplate values the verdict used that were assumed

    @property
    def soft(self) -> bool:
        return len(self.weights) > 1

    def to_dict(self) -> dict[str, Any]:
        out: dict[str, Any] = {"check": self.check, "outcome": self.outcome,
                               "weights": dict(self.weights)}
        if self.text is not None:
            out["text"] = self.text
        if self.verdict is not None:
            out["verdict"] = self.verdict.to_dict()
        if self.assumed:
            out["assumed"] = list(self.assumed)
        return out


def _squash(text: str) -> str:
    return "".join(ch for ch in text.strip().lower() if ch not in " _-")


def _text(value: Any) -> str:
    if isinstance(value, bool):
        return "yes" if value else "no"
    return str(value).strip()


# --- the session -----------------------------------------------------------------------------

class Session:
    """One diagnosis of one unit with one pack.

    Args:
        model: the compiled pack.
        mode: "site" (default) or "phone".
        max_faults: 1 (one cause, default) or 2 (up to two causes at once).
        sink: receives every event before the method returns (default: NullSink).
        session_id: default a new random hex id.
        clock: returns the ISO time of an event (default: now, UTC).
        settings: the planner's decision rule.

    Raises:
        InputError: a bad mode or max_faults.
    """

    def __init__(self, model: Model, *, mode: str = "site", max_faults: int = 1,
                 sink: Sink | None = None, session_id: str | None = None,
                 clock: Callable[[], str] | None = None, settings: Settings | None = None,
                 _events: list[Event] | None = None) -> None:
        if mode not in MODES:
            raise InputError("mode", f"expected site or phone, got {mode!r}")
        if max_faults not in (1, 2):
            raise InputError("max_faults", f"expected 1 or 2, got {max_faults}")
        self.model = model
        self.max_faults = max_faults
        self.sink: Sink = sink if sink is not None else NullSink()
        self.session_id = session_id or uuid.uuid4().hex
        self._settings = settings
        self._clock = clock or _now
        self._events: list[Event] = []
        self._evidence = Evidence(mode=mode)
        self._cache: dict[str, Any] = {}
        if _events is None:
            self._record(Started, pack=model.id, version=model.version,
                         content_hash=model.content_hash, packs=tuple(model.packs),
                         text=model.notice, mode=mode, max_faults=max_faults,
                         path=os.path.abspath(model.path) if model.path else "")
        else:
            self._events = list(_events)
            self._evidence = fold(self._events)

    # --- state ---------------------------------------------------------------------------
    @property
    def events(self) -> tuple[Event, ...]:
        """Every event, undone ones and ``undo`` events included (what the sink received)."""
        return tuple(self._events)

    @property
    def evidence(self) -> Evidence:
        return self._evidence

    @property
    def settings(self) -> Settings:
        """The planner's decision rule (its default unless one was given)."""
        if self._settings is None:
            from diagnose.reasoning.policy import DEFAULT

            return DEFAULT
        return self._settings

    @property
    def mode(self) -> str:
        return self._evidence.mode

    @property
    def ended(self) -> bool:
        return self._evidence.end is not None

    @property
    def notice(self) -> str:
        return self.model.notice

    @property
    def pack_changed(self) -> bool:
        """True when the session was recorded with other knowledge (its content hash differs)."""
        first = self._events[0] if self._events else None
        if not isinstance(first, Started):
            return False
        return first.content_hash != self.model.content_hash

    def _record(self, kind: type[E], **fields: Any) -> E:
        event = kind(**fields, time=self._clock())  # TypeError: a bug of the caller
        undo = isinstance(event, Undone)
        evidence = fold(self._events + [event]) if undo else apply(self._evidence, event)
        self.sink.write(self.session_id, event)  # committed before the state changes
        self._events.append(event)
        self._evidence = evidence
        self._cache.clear()
        return event

    def _open(self) -> None:
        if self.ended:
            raise InputError("session", "the diagnosis is closed; start a new one")

    def _check(self, check_id: str) -> Check:
        chk = self.model.checks.get(check_id)
        if chk is None:
            raise InputError("check", f"unknown check {check_id!r}")
        return chk

    # --- recording -------------------------------------------------------------------------
    def set_identity(self, **fields: Any) -> Event:
        """Facts about the unit and the call: serial number, customer, site, ..."""
        return self._record(IdentityGiven, fields={k: _text(v) for k, v in fields.items()})

    def set_nameplate(self, param_id: str, text: Any, *, assumed: bool = False) -> str:
        """Record a nameplate value; returns it normalised ("24 V", "yes", "unknown").

        ``assumed``: the value is the pack's default, not read off the unit; every
        verdict that uses it says so.

        Raises:
            InputError: unknown parameter, a wrong unit, out of range, not a choice,
                or "unknown" where the pack does not allow it.
        """
        self._open()
        param = self.model.parameters.get(param_id)
        if param is None:
            known = ", ".join(self.model.parameters) or "none"
            raise InputError("nameplate", f"unknown parameter {param_id!r}; known: {known}")
        value = normalise_parameter(param, text)
        self._record(NameplateRead, param=param_id, text=_text(text), value=value,
                     assumed=bool(assumed))
        return value

    def add_complaint(self, complaint_id: str) -> Event:
        """Record the complaint (the symptom reported)."""
        self._open()
        if complaint_id not in self.model.complaints:
            known = ", ".join(self.model.complaints)
            raise InputError("complaint", f"unknown complaint {complaint_id!r}; known: {known}")
        return self._record(ComplaintReported, complaint=complaint_id)

    def answer(self, check_id: str, text: Any) -> Finding:
        """Answer a check: an outcome id, or for a measurement a reading (with unit) or readings.

        A reading is evaluated at once (inputs from the pack, ``$param`` from the
        nameplate); near a band edge the meter's accuracy makes it soft evidence.
        "unsure" is the same as :meth:`unsure`.

        Raises:
            InputError: unknown check, not an outcome, a reading the evaluator
                refuses, a nameplate value the evaluator needs is not known.
        """
        self._open()
        chk = self._check(check_id)
        if isinstance(text, str) and _squash(text) == "unsure":
            return self.unsure(check_id)
        outcome = _match_outcome(chk, text)
        if outcome is not None:
            self._record(Answered, check=check_id, outcome=outcome)
            return Finding(check_id, outcome, {outcome: 1.0}, _text(text))
        if chk.measurement is None:
            raise InputError(check_id, f"{text!r} is not an outcome; expected one of "
                                       f"{', '.join(chk.outcomes)} (or unsure)")
        verdict, assumed = self._evaluate(chk, text)
        weights = finding_weights(chk, verdict)
        bad = [o for o in weights if o not in chk.outcomes]
        if bad:
            raise InputError(check_id, f"the verdict {bad[0]!r} is not an outcome of this check")
        shown = _shown_readings(chk, text)
        self._record(ReadingTaken, check=check_id, text=shown,
                     verdict=verdict.verdict, weights=weights, summary=verdict.summary,
                     figures={k: f.to_dict() for k, f in verdict.figures.items()},
                     assumed=assumed)
        return Finding(check_id, verdict.verdict, weights, shown, verdict, assumed)

    def _evaluate(self, chk: Check, text: Any) -> tuple[Verdict, tuple[str, ...]]:
        """Run the check's evaluator on a reading (soft near a band edge when accuracy is set).

        Returns the verdict and the nameplate values it used that were assumed.
        """
        from diagnose.physics import units
        from diagnose.physics.inputs import split_readings
        from diagnose.physics.registry import EVALUATORS, evaluate
        from diagnose.physics.soft import soft_verdict

        m = chk.measurement
        assert m is not None
        spec = EVALUATORS.get(m.evaluator)
        if spec is None:
            raise InputError(chk.id, f"unknown evaluator {m.evaluator!r}")
        field_name = m.reading or spec.reading
        if not field_name:
            raise InputError(chk.id, f"evaluator {m.evaluator} takes no reading")
        values: dict[str, Any] = {}
        assumed: list[str] = []
        for name, raw in m.inputs.items():
            if isinstance(raw, str) and raw.startswith("$"):
                pid = raw[1:]
                value = nameplate_value(self.model, self._evidence, pid)
                if value is None:
                    inp = spec.input(name)
                    if inp is not None and inp.required and inp.default is None:
                        prompt = self.model.parameters[pid].prompt \
                            if pid in self.model.parameters else pid
                        raise InputError(chk.id, f"needs the nameplate value {pid} ({prompt}); "
                                                 "set it first")
                    continue
                values[name] = value
                if pid in self._evidence.assumed or pid not in self._evidence.nameplate:
                    assumed.append(pid)  # the pack's default, not read off the unit
            else:
                values[name] = raw

        def with_unit(x: Any) -> Any:
            if not m.unit or units.is_open(x) or isinstance(x, bool):
                return x
            if isinstance(x, (int, float)) or (isinstance(x, str) and units.unit_of(x) is None
                                                and not units.is_unit(x)):
                return f"{x} {m.unit}"
            return x

        inp = spec.input(field_name)
        if m.also:  # several named readings on one card: volts and the gap
            from diagnose.physics.inputs import named_readings

            wanted = {r.name: r.unit for r in m.readings}
            for r, (name, typed) in zip(m.readings, named_readings(text, wanted,
                                                                  chk.id).items()):
                values[name] = typed if units.is_open(typed) else _in_unit(typed, r.unit)
        elif inp is not None and inp.many:
            values[field_name] = [with_unit(x) for x in split_readings(text, field_name)]
        elif isinstance(text, (list, tuple)):
            raise InputError(chk.id, "expected one reading, got a list")
        else:
            values[field_name] = with_unit(text)
        if m.accuracy > 0:
            return soft_verdict(m.evaluator, values, m.accuracy, reading=field_name), tuple(assumed)
        return evaluate(m.evaluator, values), tuple(assumed)

    def unsure(self, check_id: str) -> Finding:
        """The check was done but the answer is not clear: no evidence, not offered again."""
        self._open()
        self._check(check_id)
        self._record(LeftUnsure, check=check_id)
        return Finding(check_id, None)

    def skip(self, check_id: str) -> Event:
        """The check cannot be done now: not offered again (until undone or answered)."""
        self._open()
        self._check(check_id)
        return self._record(Skipped, check=check_id)

    def skip_repair(self, repair_id: str) -> Event:
        """The repair cannot be done now (no part on the van, no access): not proposed again.

        ``undo`` takes it back; doing the repair after all counts as usual.
        """
        self._open()
        if repair_id not in self.model.repairs:
            raise InputError("repair", f"unknown repair {repair_id!r}")
        return self._record(RepairSkipped, repair=repair_id)

    def acknowledge(self, caution_id: str, item_id: str | None = None) -> Event:
        """Record that a caution was read and acknowledged on the card of ``item_id``.

        An acknowledgement covers the check or repair ``item_id`` only (see
        :meth:`pending_cautions`); without ``item_id`` it is recorded but covers no
        card. It cannot be undone.

        Raises:
            InputError: an unknown caution, or an item that is not a check or
                repair carrying that caution.
        """
        if caution_id not in self.model.cautions:
            raise InputError("caution", f"unknown caution {caution_id!r}")
        if item_id is not None:
            self._item(item_id)
            if caution_id not in self.card_cautions(item_id):
                raise InputError("caution", f"{item_id} does not carry the caution {caution_id}")
        return self._record(Acknowledged, caution=caution_id, item=item_id,
                            step=len(self._evidence.steps))

    def remind(self, item_id: str, cautions: Sequence[str]) -> Event | None:
        """Record that the card of ``item_id`` showed ``cautions`` as one-line reminders."""
        if not cautions:
            return None
        self._item(item_id)
        return self._record(Reminded, item=item_id, cautions=tuple(cautions))

    def start_repair(self, repair_id: str) -> Event:
        """The technician is at ``repair_id`` (its card read): it stays pending until done.

        A session left while a repair is pending takes it up again when resumed.
        """
        self._open()
        if repair_id not in self.model.repairs:
            raise InputError("repair", f"unknown repair {repair_id!r}")
        return self._record(RepairStarted, repair=repair_id)

    def repair(self, repair_id: str, cured: bool, parts: Sequence[Any] = ()) -> Event:
        """Record a repair done, whether it cured the complaint, and the parts fitted.

        ``parts``: each a name, or ``{"part": name, "qty": n, "number": part number}``
        (quantity 1 and no part number when not given).

        Raises:
            InputError: an unknown repair, ``cured`` not true or false, a part
                without a name or with a quantity that is not a positive number.
        """
        self._open()
        if repair_id not in self.model.repairs:
            raise InputError("repair", f"unknown repair {repair_id!r}")
        if not isinstance(cured, bool):
            raise InputError("cured", f"expected true or false, got {cured!r}")
        fitted = tuple(part_fitted(p) for p in parts)
        return self._record(Repaired, repair=repair_id, cured=cured, parts=fitted)

    def note(self, text: str) -> Event:
        """A free-text note for the repair log (not after the end: the log is closed).

        Raises:
            InputError: an empty note, or the diagnosis is closed.
        """
        if self.ended:
            raise InputError("note", "the diagnosis is closed; a note can no longer be added")
        if not str(text).strip():
            raise InputError("note", "empty note")
        return self._record(Noted, text=str(text).strip())

    def attach(self, sha256: str, *, name: str = "", caption: str = "",
               media_type: str = "application/octet-stream", size: int = 0) -> Event:
        """Record a photo or file attached to the log (stored by the journal; no I/O here).

        Raises:
            InputError: not a SHA-256 hex digest, or the diagnosis is closed.
        """
        if self.ended:
            raise InputError("attach", "the diagnosis is closed; nothing can be attached now")
        digest = str(sha256).lower()
        if len(digest) != 64 or any(c not in "0123456789abcdef" for c in digest):
            raise InputError("attach", f"not a SHA-256 digest: {sha256!r}")
        return self._record(Attached, sha256=digest, name=str(name), caption=str(caption),
                            media_type=str(media_type), size=int(size))

    def note_history(self, cause: str, factor: float, *, days: int = 0,
                     sessions: Sequence[str] = ()) -> Event:
        """``cause`` was found on this very unit ``days`` ago: its prior odds × ``factor``.

        ``undo`` takes it back (the technician judges the earlier job unrelated).

        Raises:
            InputError: an unknown cause, or a factor that is not a positive number.
        """
        self._open()
        if cause not in self.model.causes:
            raise InputError("history", f"unknown cause {cause!r}")
        if isinstance(factor, bool) or not isinstance(factor, (int, float)) \
                or not 0 < factor < float("inf"):
            raise InputError("history", f"the factor must be a positive number, got {factor!r}")
        return self._record(HistoryNoted, cause=cause, factor=float(factor), days=int(days),
                            sessions=tuple(str(s) for s in sessions))

    def set_state(self, state_id: str, value: str) -> Event:
        """The unit is now ``state_id = value`` (power restored, brake refitted), as said.

        Raises:
            InputError: a state or value the pack does not declare.
        """
        self._open()
        var = self.model.states.get(state_id)
        if var is None:
            known = ", ".join(self.model.states) or "none"
            raise InputError("state", f"unknown state {state_id!r}; known: {known}")
        if value not in var.values:
            raise InputError(state_id, f"expected one of {', '.join(var.values)}, got {value!r}")
        return self._record(StateSet, state=state_id, value=value)

    def unit_state(self) -> dict[str, str]:
        """The state of the unit now (see :mod:`diagnose.reasoning.unitstate`)."""
        return unit_state(self.model, self._evidence)

    def waiting_for(self, check_id: str) -> tuple[str, ...]:
        """The checks and repairs that wait for ``check_id`` to be done first (the load support)."""
        pl = self.plan()
        out = [pl.check_ids[i] for i, needs in pl.check_needs.items() if check_id in needs]
        out += [pl.repair_ids[i] for i, needs in pl.repair_needs.items() if check_id in needs]
        return tuple(out)

    def ruled_out(self, below: float = 0.02) -> tuple[tuple[str, ...], int]:
        """The known causes of the complaints now below ``below``, and how many there are."""
        tree: set[str] = set()
        for k in self._evidence.complaints:
            tree.update(self.model.tree_causes(k))
        p = {e.cause: e.p for e in self.ranking().entries}
        tree &= set(p)  # the nameplate's exclusions are not "ruled out" by the answers
        return tuple(c for c in self.model.causes if c in tree and p[c] < below), len(tree)

    def setup_for(self, check_id: str) -> tuple[str, ...]:
        """What the unit's state needs first for ``check_id``, in words, with the minutes."""
        chk = self._check(check_id)
        state = self.unit_state()
        out = []
        for var, value in setup_steps(self.model, state, chk.requires):
            sv = self.model.states[var]
            minutes = sv.setup.get(value)
            extra = f" ({minutes:g} min)" if minutes is not None else " (no setup step)"
            out.append(f"{sv.title.lower()}: {sv.values.get(value, value)}{extra}")
        return tuple(out)

    def open_parameters(self) -> tuple[str, ...]:
        """Nameplate questions still to ask, in the pack's order: not answered and still needed.

        A question that cannot matter any more for this unit (AC volts after
        "converter") is not asked (see :mod:`diagnose.reasoning.nameplate`).
        """
        ev = self._evidence
        return tuple(p for p in self.model.parameters
                     if p not in ev.nameplate and parameter_needed(self.model, ev, p))

    def repair_observations(self, repair_id: str) -> tuple[Check, ...]:
        """Checks in plain sight during ``repair_id`` still worth answering (no extra minutes)."""
        rep = self.model.repairs.get(repair_id)
        if rep is None:
            raise InputError("repair", f"unknown repair {repair_id!r}")
        ev = self._evidence
        out = []
        for cid in rep.observes:
            chk = self.model.checks.get(cid)
            if chk is None or cid in ev.done or not only_if_matches(self.model, ev, chk):
                continue
            out.append(chk)
        return tuple(out)

    def set_mode(self, mode: str) -> Event:
        """Switch between "site" and "phone"."""
        self._open()
        if mode not in MODES:
            raise InputError("mode", f"expected site or phone, got {mode!r}")
        return self._record(ModeSet, mode=mode)

    def end(self, result: str | None = None, *, text: str = "",
            parts: Sequence[str] = (), finding: str | None = None) -> Event:
        """Close the diagnosis with ``result`` (default: what the evidence says).

        ``result``: "resolved" (a repair cured), "visit" (phone: send a technician
        with ``parts``), "escalated", or "abandoned". Given a result, or once a
        repair cured, the planner is not asked (a cure is closed even when
        planning fails); without one, the planner's action decides, and a visit
        takes its parts unless ``parts`` are given. ``finding``: the cause the
        technician confirms (a cause id, or "unknown": none of the known causes).

        Raises:
            InputError: the diagnosis is closed already, an unknown result or cause.
        """
        self._open()
        if result is not None and result not in END_RESULTS:
            raise InputError("result", f"expected one of {', '.join(END_RESULTS)}, got {result!r}")
        if finding is not None and finding not in self.model.causes and finding != "unknown":
            raise InputError("finding", f"unknown cause {finding!r}")
        parts = [str(p) for p in parts]
        if result is None and self._evidence.cured:
            result = "resolved"
        elif result is None:
            action = self.next_action()
            result = {"visit": "visit", "escalate": "escalated"}.get(action.kind, "abandoned")
            if action.kind == "visit" and not parts:
                parts = list(action.parts)
        top = self.ranking(limit=1).top
        cured = [r for r, c in self._evidence.repairs if c]
        return self._record(Ended, result=result, cause=top.cause, p=round(top.p, 6),
                            repair=cured[-1] if cured else None,
                            parts=tuple(parts) if result == "visit" else (), text=str(text),
                            finding=finding)

    def reopen_for_visit(self, who: str | None = None) -> Event:
        """Go on at the site with a phone diagnosis that ended with a site visit.

        The caller's answers stay; the session is open again in site mode, and
        its next end closes it for good. ``who``: the technician at the site.

        Raises:
            InputError: the diagnosis did not end with a site visit.
        """
        end = self._evidence.end
        if end is None or end.get("result") != "visit":
            raise InputError("session", "only a diagnosis that ended with a site visit can "
                                        "be taken up again")
        name = str(who or "").strip()
        return self._record(Reopened, mode="site", who=name or None)

    def undo(self) -> Event | None:
        """Undo the last event that can be undone; returns it (None when there is none)."""
        undone = {e.index for e in self._events if isinstance(e, Undone)}
        for i in range(len(self._events) - 1, -1, -1):
            e = self._events[i]
            if isinstance(e, (Ended, Reopened)) and i not in undone:
                return None  # nothing before the end (or the visit) can be changed any more
            if e.UNDOABLE and i not in undone:
                self._record(Undone, index=i, was=e.kind)
                return e
        return None

    def apply_step(self, step: Step | Mapping[str, Any]) -> Finding | Event:
        """Play one scripted step (the format of a pack's test cases and of ``--answers``).

        ``{check: id, answer: value}``, ``{check: id, answer: unsure}``,
        ``{check: id, skip: true}``, ``{repair: id, cured: bool}`` (with
        ``parts: [...]``, the parts fitted) or ``{repair: id, skip: true}``
        (the repair cannot be done now).
        """
        s = step if isinstance(step, Step) else _step(step)
        if s.check is not None:
            if s.skip:
                return self.skip(s.check)
            if s.answer is None:
                raise InputError(s.check, "a step needs `answer` or `skip: true`")
            return self.answer(s.check, s.answer)
        if s.repair is not None:
            if s.skip:
                return self.skip_repair(s.repair)
            return self.repair(s.repair, bool(s.cured), s.parts)
        raise InputError("step", "a step needs `check` or `repair`")

    # --- reasoning ---------------------------------------------------------------------------
    def posterior(self) -> Posterior:
        from diagnose.reasoning.posterior import posterior

        if "post" not in self._cache:
            self._cache["post"] = posterior(self.model, self._evidence,
                                            max_faults=self.max_faults)
        return self._cache["post"]

    def plan(self) -> Plan:
        """The next action with the scores of every check and repair."""
        if "plan" not in self._cache:
            self._cache["plan"] = plan(self.model, self._evidence, max_faults=self.max_faults,
                                       settings=self.settings, post=self.posterior())
        return self._cache["plan"]

    def ranking(self, limit: int | None = None) -> Ranking:
        """All causes and "unknown", most likely first (worked out once per state).

        ``limit``: only the ``limit`` most likely, and "unknown" after them when
        it is not among them (what a view of the leading causes needs; cheap with
        thousands of causes).
        """
        key = f"ranking:{limit}"
        if key not in self._cache:
            self._cache[key] = self.posterior().ranking(limit, unknown=limit is not None)
        return self._cache[key]

    def next_action(self) -> Action:
        return self.plan().action

    def checks_table(self, limit: int | None = None) -> ChecksTable:
        """Every check with minutes, expected bits, ECO, and why it is not offered.

        ``limit``: rows for the first ``limit`` checks only (every check is still
        ordered and counted in the table's ``total``).
        """
        from diagnose.reasoning.actions import ChecksTable

        pl = self.plan()
        return ChecksTable(pl.checks(limit), pl.ecr, self.mode, total=len(pl.check_ids))

    def explain_ranking(self, leading: int = 3) -> RankingExplanation:
        from diagnose.reasoning.explain import explain_ranking

        return explain_ranking(self.model, self._evidence, max_faults=self.max_faults,
                               leading=leading)

    def explain_check(self, check_id: str) -> CheckExplanation:
        from diagnose.reasoning.explain import explain_check

        return explain_check(self.model, self._evidence, check_id, max_faults=self.max_faults,
                             settings=self.settings)

    def card_cautions(self, item_id: str) -> tuple[str, ...]:
        """The cautions the card of a check or repair shows: its own and its hazards' here."""
        return card_cautions(self.model, self._evidence, self._item(item_id))

    def pending_cautions(self, item_id: str) -> tuple[Caution, ...]:
        """DANGER/WARNING cautions of a card still to be acknowledged.

        A caution is acknowledged once per hazard and state: an acknowledgement
        given on any card stands until the unit moves into a state that renews
        cautions (power restored, load support removed; see
        :mod:`diagnose.reasoning.safety`). One from an older journal (no step
        recorded) covers only the card it was given for; one without a card,
        none.
        """
        return tuple(c for c, settled in self._ack_state(item_id) if not settled)

    def reminders(self, item_id: str) -> tuple[Caution, ...]:
        """DANGER/WARNING cautions of a card acknowledged earlier and still standing."""
        return tuple(c for c, settled in self._ack_state(item_id) if settled)

    def _ack_state(self, item_id: str) -> list[tuple[Caution, bool]]:
        ev = self._evidence
        renewed = renewals(self.model, ev)
        # a card whose own setup moves the unit into a renewing state (restores the power)
        # asks again: the change is about to happen with it
        now = self.unit_state()
        item = self._item(item_id)
        renewing = any(now.get(var) != value and value in self.model.states[var].renews
                       for var, value in getattr(item, "requires", {}).items()
                       if var in self.model.states)
        out = []
        for cid in self.card_cautions(item_id):
            c = self.model.cautions.get(cid)
            if c is None or not c.needs_acknowledgement:
                continue
            settled = not renewing and any(
                caution == cid and (
                    (step is not None
                     and not lapsed_since(self.model, ev, step, item, renewed))
                    or (step is None and item == item_id))
                for caution, item, step in ev.acks)
            out.append((c, settled))
        return out

    def _item(self, item_id: str) -> Any:
        item: Any = self.model.checks.get(item_id) or self.model.repairs.get(item_id)
        if item is None:
            raise InputError("item", f"no check or repair {item_id!r}")
        return item

    # --- resume ------------------------------------------------------------------------------
    @classmethod
    def replay(cls, model: Model, events: Iterable[Event | Mapping[str, Any]], *,
               sink: Sink | None = None, session_id: str | None = None,
               clock: Callable[[], str] | None = None, settings: Settings | None = None) -> Session:
        """Rebuild a session from its events (for resume); new events go to ``sink``.

        Raises:
            InputError: the events were recorded with another pack, or are malformed.
        """
        evs = [e if isinstance(e, Event) else _event_of(e) for e in events]
        mode, max_faults = "site", 1
        first = evs[0] if evs else None
        if isinstance(first, Started):
            if first.pack not in ("", model.id):
                raise InputError("session", f"recorded with pack {first.pack}, not {model.id}")
            mode, max_faults = first.mode, first.max_faults
        session = cls(model, mode=mode, max_faults=max_faults, sink=sink,
                      session_id=session_id, clock=clock, settings=settings, _events=evs)
        return session


def part_fitted(item: Any) -> dict[str, Any]:
    """A part fitted as recorded: ``{"part", "qty", "number"}``.

    >>> part_fitted("friction disc")
    {'part': 'friction disc', 'qty': 1, 'number': ''}
    >>> part_fitted({"part": "mounting screw", "qty": 4, "number": "MS-6x20"})
    {'part': 'mounting screw', 'qty': 4, 'number': 'MS-6x20'}

    Raises:
        InputError: no name, or a quantity that is not a positive number.
    """
    d = item if isinstance(item, Mapping) else {"part": item}
    name = _text(d.get("part", "")) if not isinstance(d.get("part"), (Mapping, list)) else ""
    qty = d.get("qty", 1)
    if not name:
        raise InputError("parts", f"a part fitted needs a name, got {item!r}")
    if isinstance(qty, bool) or not isinstance(qty, (int, float)) or not qty > 0 \
            or qty != qty or qty == float("inf"):
        raise InputError("parts", f"{name}: the quantity must be a positive number, got {qty!r}")
    return {"part": name, "qty": qty, "number": _text(d.get("number") or "")}


def assumed_note(evidence: Evidence, params: Sequence[str],
                 defaults: Mapping[str, Any] | None = None) -> str:
    """The sentence a verdict that used assumed nameplate values carries ("" for none).

    ``defaults``: the pack's default of each parameter (for one never entered).

    >>> assumed_note(Evidence(nameplate={"max_gap": "0.6 mm"}), ["max_gap"])[:60]
    'uses assumed values, not read off the unit: max_gap = 0.6 mm'
    """
    if not params:
        return ""
    from diagnose.physics.verdict import unit_text

    defaults = defaults or {}
    listed = "; ".join(f"{p} = {unit_text(str(evidence.nameplate.get(p) or defaults.get(p)))}"
                       for p in params)
    return (f"uses assumed values, not read off the unit: {listed} (the pack's defaults); "
            "check them before trusting this verdict")


def _event_of(d: Mapping[str, Any]) -> Event:
    try:
        return Event.from_dict(d)
    except EventError as exc:
        raise InputError("session", f"a malformed event: {exc}") from None


def finding_weights(chk: Check, verdict: Verdict) -> dict[str, float]:
    """The outcome weights of a reading's verdict on ``chk``.

    A signature the check does not list counts as its plain verdict. A plain
    low or high that may hide a signature the inputs could not judge (see
    ``Verdict.unjudged``) counts as "this or that" (virtual evidence with the
    same weight on both), so that neither reading of it is favoured.
    """
    from diagnose.physics.registry import EVALUATORS

    spec = EVALUATORS.get(verdict.evaluator)
    base = dict(verdict.weights) if verdict.weights else {verdict.verdict: 1.0}
    out: dict[str, float] = {}
    for outcome, weight in base.items():
        if outcome not in chk.outcomes and spec is not None:
            sig = spec.signature(outcome) if hasattr(spec, "signature") else None
            outcome = (sig.fallback if sig is not None and sig.fallback else None) \
                or verdict.fallback or outcome
        out[outcome] = out.get(outcome, 0.0) + weight
        for name in verdict.unjudged:
            sig = spec.signature(name) if spec is not None else None
            hides = sig is not None and (sig.fallback == outcome or (
                sig.fallback is None and outcome in ("low", "high")))
            if hides and name in chk.outcomes:
                out[name] = out.get(name, 0.0) + weight
    total = sum(out.values())
    return {o: w / total for o, w in out.items()} if total > 0 else out


def normalise_parameter(param: Parameter, text: Any) -> str:
    """A nameplate answer checked against its parameter: unit, range, choices, "unknown".

    Raises:
        InputError: with the parameter id as field and a one-line reason.
    """
    raw = _text(text) if not isinstance(text, (int, float)) or isinstance(text, bool) else text
    if isinstance(raw, str):
        if not raw:
            raise InputError(param.id, "empty answer")
        if _squash(raw) == "unknown":
            if param.unknown_allowed:
                return "unknown"
            raise InputError(param.id, "this value is needed; 'unknown' is not allowed here")
    if param.choices:
        for choice in param.choices:
            if _squash(str(choice)) == _squash(str(raw)):
                return choice
        raise InputError(param.id, f"expected one of: {', '.join(param.choices)}")
    if param.unit or param.min is not None or param.max is not None:
        from diagnose.physics.units import parse_quantity

        value = parse_quantity(raw, param.unit, param.id, negative=True)
        lo, hi = param.min, param.max
        if (lo is not None and value < lo) or (hi is not None and value > hi):
            span = f"{'' if lo is None else f'{lo:g}'}..{'' if hi is None else f'{hi:g}'}"
            raise InputError(param.id, f"{_text(raw)} is outside {span} {param.unit}".rstrip())
        return f"{value:.6g} {param.unit}".rstrip()
    return str(raw)


def _in_unit(text: str, unit: str) -> str:
    """A named reading with its unit: a bare number is taken in ``unit``."""
    from diagnose.physics import units

    if unit and units.unit_of(text) is None and not units.is_unit(text):
        return f"{text} {unit}"
    return text


def _shown_readings(chk: Check, text: Any) -> str | tuple[str, ...]:
    """The reading(s) as the record keeps them: named readings as ``name=value`` each."""
    m = chk.measurement
    if m is not None and m.also:
        from diagnose.physics.inputs import named_readings

        wanted = {r.name: r.unit for r in m.readings}
        from diagnose.physics import units

        return tuple(f"{k}={v if units.is_open(v) else _in_unit(v, wanted[k])}"
                     for k, v in named_readings(text, wanted, chk.id).items())
    return tuple(_text(t) for t in text) if isinstance(text, (list, tuple)) else _text(text)


def _match_outcome(chk: Check, text: Any) -> str | None:
    if not isinstance(text, (str, bool)):
        return None
    key = _squash(_text(text))
    for o in chk.outcomes:
        if _squash(o) == key:
            return o
    return None


def _step(d: Mapping[str, Any]) -> Step:
    if not isinstance(d, Mapping):
        raise InputError("step", f"expected a mapping, got {d!r}")
    extra = set(d) - {"check", "answer", "skip", "repair", "cured", "parts"}
    if extra:
        raise InputError("step", f"unknown key {min(extra)!r}")
    for key in ("check", "repair"):
        if isinstance(d.get(key), (Mapping, list, tuple, set)):
            raise InputError("step", f"`{key}` must be an id, got {d[key]!r}")
    if "skip" in d and not isinstance(d["skip"], bool):
        raise InputError("skip", f"`skip` is true or false, got {d['skip']!r}")
    if "repair" in d and d.get("skip") is True:
        if "cured" in d:
            raise InputError(str(d["repair"]), "a skipped repair has no `cured`")
    elif "repair" in d and not isinstance(d.get("cured"), bool):
        raise InputError(str(d["repair"]), "a repair step needs `cured: true` or `cured: false` "
                                           "(or `skip: true`: it cannot be done now)")
    parts = d.get("parts", ())
    if "parts" in d and ("repair" not in d or not isinstance(parts, list)):
        raise InputError("parts", "`parts` is a list of the parts fitted, on a repair step")
    return Step(check=d.get("check"), answer=d.get("answer"), repair=d.get("repair"),
                cured=d.get("cured"), skip=bool(d.get("skip", False)), parts=tuple(parts))


def play_case(model: Model, case: Case, *, sink: Sink | None = None) -> Session:
    """A session that played a knowledge test case: nameplate, complaints, then its steps.

    Raises:
        InputError: a step the model or the physics refuses.
    """
    session = Session(model, mode=case.mode, max_faults=case.max_faults, sink=sink)
    for param, value in case.nameplate.items():
        session.set_nameplate(param, value)
    for k in case.complaints:
        session.add_complaint(k)
    for step in case.steps:
        session.apply_step(step)
    return session
