"""The events a diagnosis is made of: one class per kind, one codec, one fold.

A diagnosis is the list of what happened in it. Each kind of event is a
frozen dataclass below (:class:`Answered`, :class:`ReadingTaken`,
:class:`Repaired`, ...); its fields are what the event says, and its
``KIND`` is the word the journal stores. The table :data:`KINDS` is built
from the classes, so the list of kinds is this code and nothing else.

**The codec.** :func:`encode` turns an event into a :class:`Row` (kind,
data as a JSON object, time, format) and :func:`decode` turns a row back
into its event, checking every field: a row altered by hand raises
:class:`EventError` with a one-line reason. ``format`` is the version of
the data's shape: :data:`FORMAT` is the one this program writes; an older
row is brought up to date by the steps in :data:`UPGRADES` before it is
read; a row of a newer format is refused (it was written by a newer
program). A kind this program does not know decodes to :class:`Other`,
which is kept on the record and changes nothing.

**The fold.** :func:`effective_indices` is the one rule for which events
still count (an ``undo`` and the event it names are both left out);
:func:`walk` yields them in order with their positions and :func:`fold`
folds them. The session's state (``diagnose.session.apply``), the repair
log and, through it, the statistics and the learned priors are all built
by this one fold.

``notice``, ``ack``, ``reminder``, ``repair_started``, ``end`` and ``undo``
cannot be undone: a safety acknowledgement stays on the record, and nothing
is recorded after the end.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, ClassVar, NamedTuple, TypeVar

#: The version of the events' data this program writes (see :data:`UPGRADES`).
FORMAT = 1

#: ``UPGRADES[n](kind, data)`` takes the data of a row of format ``n`` to format
#: ``n + 1``. Append only; never change a step that has shipped.
UPGRADES: dict[int, Callable[[str, dict[str, Any]], dict[str, Any]]] = {}


class EventError(ValueError):
    """A row that cannot be read back as an event; the message says why, in one line."""


class Row(NamedTuple):
    """An event as the journal stores it: kind, data (a JSON object), time, format."""

    kind: str
    data: dict[str, Any]
    time: str = ""
    format: int = FORMAT


# --- the kinds ------------------------------------------------------------------------------

def _optional(default: Any = None) -> Any:
    """A field left out of the stored data while it has its default (absent in older journals)."""
    return field(default=default, metadata={"optional": True})


@dataclass(frozen=True, kw_only=True)
class Event:
    """One thing that happened in a diagnosis; ``time`` is ISO 8601 text.

    ``kind`` is the word the journal stores; ``data`` is the event's data as
    stored (see :func:`encode`).
    """

    time: str = ""
    KIND: ClassVar[str] = ""
    UNDOABLE: ClassVar[bool] = True
    STEP: ClassVar[bool] = False  # counts as a step of the diagnosis ("step N")

    @property
    def kind(self) -> str:
        return self.KIND

    @property
    def data(self) -> dict[str, Any]:
        return encode(self).data

    def to_dict(self) -> dict[str, Any]:
        return {"kind": self.kind, "data": self.data, "time": self.time}

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> Event:
        """The event of a mapping ``{kind, data, time}`` (as ``to_dict`` gives).

        Raises:
            EventError: a malformed event.
        """
        return decode(Row(str(d.get("kind", "")), d.get("data") or {}, str(d.get("time", ""))))


@dataclass(frozen=True)
class Started(Event):
    """The session starts: the pack and its knowledge, the mode; always first."""

    KIND = "notice"
    UNDOABLE = False
    pack: str = ""
    version: str = ""
    content_hash: str = ""
    packs: tuple[str, ...] = ()
    text: str = ""
    mode: str = "site"
    max_faults: int = 1
    path: str = ""


@dataclass(frozen=True)
class IdentityGiven(Event):
    """Free facts about the unit and the call (serial, site, ...)."""

    KIND = "identity"
    fields: Mapping[str, str] = field(default_factory=dict)


@dataclass(frozen=True)
class NameplateRead(Event):
    """A nameplate value: as typed (``text``) and normalised (``value``: "24 V", "unknown").

    ``assumed``: taken from the pack's default, not read off the unit.
    """

    KIND = "nameplate"
    param: str
    value: str
    text: str = ""
    assumed: bool = _optional(False)


@dataclass(frozen=True)
class ComplaintReported(Event):
    """A complaint reported."""

    KIND = "complaint"
    complaint: str


@dataclass(frozen=True)
class Answered(Event):
    """The outcome of a check."""

    KIND = "answer"
    STEP = True
    check: str
    outcome: str


@dataclass(frozen=True)
class ReadingTaken(Event):
    """A measurement: the value(s) as typed, the verdict (or weights near a band edge), figures."""

    KIND = "reading"
    STEP = True
    check: str
    text: str | tuple[str, ...] = ""
    verdict: str | None = None
    weights: Mapping[str, float] = field(default_factory=dict)
    summary: str = ""
    figures: Mapping[str, Mapping[str, Any]] = field(default_factory=dict)
    assumed: tuple[str, ...] = _optional(())  # nameplate values it used that were not read

    @property
    def finding(self) -> dict[str, float]:
        """The outcome weights it gives (its verdict alone when no weights were kept)."""
        return dict(self.weights) if self.weights else {str(self.verdict): 1.0}


@dataclass(frozen=True)
class LeftUnsure(Event):
    """A check done without a clear answer."""

    KIND = "unsure"
    STEP = True
    check: str


@dataclass(frozen=True)
class Skipped(Event):
    """A check that cannot be done now."""

    KIND = "skip"
    STEP = True
    check: str


@dataclass(frozen=True)
class RepairSkipped(Event):
    """A repair that cannot be done now."""

    KIND = "skip_repair"
    STEP = True
    repair: str


@dataclass(frozen=True)
class Acknowledged(Event):
    """A DANGER or WARNING caution acknowledged for the card of ``item``.

    ``step``: how many steps were done when it was given. Both are absent in
    older journals (an acknowledgement that covers no card).
    """

    KIND = "ack"
    UNDOABLE = False
    caution: str
    item: str | None = _optional()
    step: int | None = _optional()


@dataclass(frozen=True)
class Reminded(Event):
    """Cautions acknowledged earlier, shown again as one-line reminders on ``item``'s card."""

    KIND = "reminder"
    UNDOABLE = False
    item: str = ""
    cautions: tuple[str, ...] = ()


@dataclass(frozen=True)
class RepairStarted(Event):
    """The technician is at a repair (its card is read): pending until done or set aside."""

    KIND = "repair_started"
    UNDOABLE = False
    repair: str


@dataclass(frozen=True)
class Repaired(Event):
    """A repair done, whether it cured the complaint, and the parts fitted.

    Each part fitted is ``{"part": name, "qty": number, "number": part number}``.
    """

    KIND = "repair"
    STEP = True
    repair: str
    cured: bool
    parts: tuple[Mapping[str, Any], ...] = _optional(())


@dataclass(frozen=True)
class Noted(Event):
    """A free-text note for the repair log."""

    KIND = "note"
    text: str = ""


@dataclass(frozen=True)
class HistoryNoted(Event):
    """The cause was found on this unit ``days`` ago (``sessions``): its prior odds × factor."""

    KIND = "history"
    cause: str
    factor: float
    days: int = 0
    sessions: tuple[str, ...] = ()


@dataclass(frozen=True)
class Attached(Event):
    """A photo or file attached to the log, stored once by its content (``sha256``)."""

    KIND = "attachment"
    sha256: str
    name: str = ""
    caption: str = ""
    media_type: str = "application/octet-stream"
    size: int = 0


@dataclass(frozen=True)
class ModeSet(Event):
    """The diagnosis goes on on site or by phone."""

    KIND = "mode"
    mode: str


@dataclass(frozen=True)
class StateSet(Event):
    """The technician says the unit is now so (power restored, brake refitted, ...)."""

    KIND = "state"
    state: str
    value: str


@dataclass(frozen=True)
class Ended(Event):
    """The diagnosis ends: resolved, visit, escalated or abandoned.

    ``cause`` and ``p``: the tool's leading cause then; ``finding``: the cause the
    technician confirms ("what did you find?"), absent when not asked.
    """

    KIND = "end"
    UNDOABLE = False
    result: str = ""
    cause: str | None = None
    p: float | None = None
    repair: str | None = None
    parts: tuple[str, ...] = ()
    text: str = ""
    finding: str | None = _optional()


@dataclass(frozen=True)
class Reopened(Event):
    """A phone diagnosis that ended with a site visit goes on at the site (``mode``), by ``who``."""

    KIND = "reopen"
    UNDOABLE = False
    mode: str = "site"
    who: str | None = _optional()


@dataclass(frozen=True)
class HandedOver(Event):
    """The session passed from one holder to another (``giver`` to ``taker``): a phone call
    taken up at the site on another machine; ``forced``: taken over before the lease ran out."""

    KIND = "handover"
    UNDOABLE = False
    taker: str
    giver: str | None = _optional()
    forced: bool = _optional(False)


@dataclass(frozen=True)
class Undone(Event):
    """The event at position ``index`` is taken back (``kind``: what it was)."""

    KIND = "undo"
    UNDOABLE = False
    index: int
    was: str | None = _optional()


@dataclass(frozen=True)
class Other(Event):
    """An event of a kind this program does not know: kept on the record, changes nothing."""

    UNDOABLE = False
    name: str = ""
    raw: Mapping[str, Any] = field(default_factory=dict)

    @property
    def kind(self) -> str:
        return self.name


CLASSES: tuple[type[Event], ...] = (
    Started, IdentityGiven, NameplateRead, ComplaintReported, Answered, ReadingTaken,
    LeftUnsure, Skipped, RepairSkipped, Acknowledged, Reminded, RepairStarted, Repaired, Noted,
    Attached,
    HistoryNoted, ModeSet, StateSet, Ended, Reopened, HandedOver, Undone)

#: The stored key of a field whose name differs from it (``Undone.was`` is stored as "kind").
_KEY = {(Undone, "was"): "kind", (HandedOver, "taker"): "to", (HandedOver, "giver"): "from"}


@dataclass(frozen=True)
class Kind:
    """One kind of event as a table row: its class, stored keys and whether it can be undone."""

    name: str
    cls: type[Event]
    needs: tuple[str, ...]
    may: tuple[str, ...]
    undoable: bool
    means: str


def _kind_of(cls: type[Event]) -> Kind:
    needs, may = [], []
    for f in _fields(cls):
        key = _KEY.get((cls, f.name), f.name)
        if cls is IdentityGiven:
            continue
        (needs if _required(f) else may).append(key)
    return Kind(cls.KIND, cls, tuple(needs), tuple(may), cls.UNDOABLE,
                (cls.__doc__ or "").strip().splitlines()[0])


def _fields(cls: type[Event]) -> tuple[dataclasses.Field[Any], ...]:
    return tuple(f for f in dataclasses.fields(cls) if f.name != "time")


def _required(f: dataclasses.Field[Any]) -> bool:
    return f.default is dataclasses.MISSING and f.default_factory is dataclasses.MISSING


KINDS: dict[str, Kind] = {c.KIND: _kind_of(c) for c in CLASSES}
EVENT_KINDS: tuple[str, ...] = tuple(KINDS)
UNDOABLE: frozenset[str] = frozenset(k for k, v in KINDS.items() if v.undoable)
#: The keys of each kind's data that reading it back needs.
EVENT_KEYS: dict[str, tuple[str, ...]] = {k: v.needs for k, v in KINDS.items() if v.needs}
#: The kinds that are steps of the diagnosis (what "step N" counts).
STEP_KINDS = frozenset(k for k, v in KINDS.items() if v.cls.STEP)


# --- the codec ------------------------------------------------------------------------------

def _plain(value: Any) -> Any:
    """A field's value as JSON data (tuples as lists, mappings as dicts)."""
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    return value


def encode(event: Event) -> Row:
    """The row the journal stores for ``event`` (format :data:`FORMAT`).

    >>> encode(Answered("fuse_state", "blown", time="2025-01-14T09:00:00+00:00"))[:3]
    ('answer', {'check': 'fuse_state', 'outcome': 'blown'}, '2025-01-14T09:00:00+00:00')
    >>> encode(Acknowledged("lockout")).data
    {'caution': 'lockout'}
    """
    if isinstance(event, Other):
        return Row(event.name, _plain(event.raw), event.time)
    if isinstance(event, IdentityGiven):
        return Row(event.KIND, {str(k): str(v) for k, v in event.fields.items()}, event.time)
    data: dict[str, Any] = {}
    for f in _fields(type(event)):
        value = getattr(event, f.name)
        if f.metadata.get("optional") and value == f.default:
            continue
        data[_KEY.get((type(event), f.name), f.name)] = _plain(value)
    return Row(event.KIND, data, event.time)


def decode(row: Row | tuple[Any, ...]) -> Event:
    """The event a stored row holds, every field checked.

    Raises:
        EventError: the row cannot be read (the message says why in one line).

    >>> decode(Row("answer", {"check": "fuse_state", "outcome": "blown"}))
    Answered(time='', check='fuse_state', outcome='blown')
    >>> problem(Row("answer", {"check": "fuse_state"}))
    'the answer event has no outcome'
    """
    kind, data, when, fmt = Row(*row)
    if not isinstance(kind, str) or not kind:
        raise EventError("it has no kind")
    if not isinstance(when, str):
        raise EventError("its time is not text")
    if not isinstance(data, dict):
        raise EventError("its data is not a JSON object")
    data = _upgraded(kind, data, fmt)
    known = KINDS.get(kind)
    if known is None:
        return Other(name=kind, raw=dict(data), time=when)
    if known.cls is IdentityGiven:
        return IdentityGiven(fields={str(k): _text(v) for k, v in data.items()}, time=when)
    missing = [k for k in known.needs if k not in data]
    if kind == "reading" and "verdict" not in data and "weights" not in data:
        missing.append("verdict")
    if missing:
        raise EventError(f"the {kind} event has no {' and no '.join(missing)}")
    values = {}
    for f in _fields(known.cls):
        key = _KEY.get((known.cls, f.name), f.name)
        if key in data:
            values[f.name] = _check(kind, key, f.type, data[key])
    return known.cls(**values, time=when)


def _upgraded(kind: str, data: dict[str, Any], fmt: Any) -> dict[str, Any]:
    if isinstance(fmt, bool) or not isinstance(fmt, int) or fmt < 1:
        raise EventError(f"its format {fmt!r} is not a version number")
    if fmt > FORMAT:
        raise EventError(f"it was written by a newer diagnose (event format {fmt}; this "
                         f"program reads up to {FORMAT}); upgrade diagnose")
    for n in range(fmt, FORMAT):
        data = UPGRADES[n](kind, dict(data))
    return data


def _text(value: Any) -> str:
    return "" if value is None else str(value)


def _check(kind: str, key: str, typ: Any, value: Any) -> Any:
    """``value`` of field ``key`` checked against its declared type (as text)."""
    where = f"the {kind} event's {key}"
    if typ in ("str", "str | None"):
        if value is None and typ == "str | None":
            return None
        if isinstance(value, (dict, list)):
            raise EventError(f"{where} is not text")
        return _text(value)
    if typ in ("int", "int | None"):
        if value is None and typ == "int | None":
            return None
        if isinstance(value, bool) or not isinstance(value, int):
            raise EventError(f"{where} is not a whole number")
        return value
    if typ == "float | None":
        if value is not None and not _is_number(value):
            raise EventError(f"{where} is not a number")
        return None if value is None else float(value)
    if typ == "float":
        if not _is_number(value) or not 0 < value < float("inf"):
            raise EventError(f"{where} is not a positive number")
        return float(value)
    if typ == "bool":
        if not isinstance(value, bool):
            raise EventError(f"{where} is not true or false")
        return value
    return _check_shape(where, typ, value)


def _check_shape(where: str, typ: str, value: Any) -> Any:
    if typ == "tuple[str, ...]":
        if not isinstance(value, list):
            raise EventError(f"{where} is not a list")
        return tuple(_text(v) for v in value)
    if typ == "str | tuple[str, ...]":
        return tuple(_text(v) for v in value) if isinstance(value, list) else _text(value)
    if typ == "Mapping[str, float]":
        if not isinstance(value, dict) or not all(_is_number(w) for w in value.values()):
            raise EventError(f"{where} are not numbers by outcome")
        return {str(k): float(w) for k, w in value.items()}
    if typ == "tuple[Mapping[str, Any], ...]":
        if not isinstance(value, list) or not all(_part(p) for p in value):
            raise EventError(f"{where} are not parts with a name and a quantity")
        return tuple(dict(p) for p in value)
    if typ == "Mapping[str, Mapping[str, Any]]":
        if not isinstance(value, dict):
            raise EventError(f"{where} is not a JSON object")
        return {str(k): dict(v) for k, v in value.items() if isinstance(v, dict)}
    raise AssertionError(f"no check for a field of type {typ}")  # a bug: a new field type


def _part(value: Any) -> bool:
    """A part fitted: a name, a positive quantity, a part number (may be empty)."""
    return (isinstance(value, dict) and isinstance(value.get("part"), str)
            and _is_number(value.get("qty")) and value["qty"] > 0
            and isinstance(value.get("number", ""), str))


def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def problem(row: Row | tuple[Any, ...]) -> str:
    """What is wrong with a stored row, or "" when it reads back as an event.

    >>> problem(("complaint", {"complaint": "will_not_release"}, ""))
    ''
    >>> problem(("note", ["not", "an", "object"], ""))
    'its data is not a JSON object'
    >>> problem(("undo", {"index": "3"}, ""))
    "the undo event's index is not a whole number"
    """
    try:
        decode(row)
    except EventError as exc:
        return str(exc)
    return ""


# --- the fold -------------------------------------------------------------------------------

def effective_indices(events: Sequence[Event]) -> tuple[list[int], int]:
    """The positions of the events that still count, and how many events were undone.

    An ``undo`` and the event it names are both left out.

    >>> effective_indices([Noted("a"), Undone(0), Noted("b")])
    ([2], 1)
    """
    undone = {e.index for e in events if isinstance(e, Undone)}
    keep = [i for i, e in enumerate(events) if i not in undone and not isinstance(e, Undone)]
    return keep, len(undone)


def walk(events: Sequence[Event]) -> Iterator[tuple[int, Event]]:
    """The events that still count, in order, with their positions in ``events``."""
    keep, _ = effective_indices(events)
    for i in keep:
        yield i, events[i]


S = TypeVar("S")


def fold(events: Iterable[Event], step: Callable[[S, Event], S], start: S) -> S:
    """``start`` with ``step`` applied to each event that still counts, in order.

    >>> fold([Noted("a"), Noted("b"), Undone(1)], lambda s, e: s + [e.text], [])
    ['a']
    """
    state = start
    for _, event in walk(list(events)):
        state = step(state, event)
    return state


def started(events: Sequence[Event]) -> Started:
    """The notice a session starts with (an empty one when its first event is not one).

    >>> started([Started(pack="mini-brake", max_faults=2)]).max_faults, started([]).pack
    (2, '')
    """
    first = events[0] if events else None
    return first if isinstance(first, Started) else Started()


def effective(events: Iterable[Event]) -> list[Event]:
    """The events that still count (:func:`effective_indices`), in order."""
    return [e for _, e in walk(list(events))]


def steps_taken(events: Iterable[Event]) -> int:
    """How many steps of the diagnosis count (answers, readings, repairs, ...), undos applied."""
    return sum(1 for e in effective(events) if e.STEP)
