"""The journal's tables as both stores keep them: rows, sessions, ids and chains.

The SQLite file (:class:`diagnose.journal.store.Journal`) and the team
journal on PostgreSQL (:class:`diagnose.journal.pgstore.PgJournal`) keep the
same tables (``session``, ``event``) of the same schema versions. What does
not depend on the database is here, once:

* an event as a row: its fields checked (:func:`event_fields`), read back
  through the codec (:func:`decode_row`), the session row's fields an event
  sets (:meth:`TableStore._session_sets`);
* the ids: UUIDs (:func:`new_uid`, :func:`normal_uid`) and a session named
  by its short id, UUID or a UUID prefix (:meth:`TableStore.resolve`);
* the listing of sessions and its filters (:meth:`TableStore.sessions`), the
  holders (:mod:`diagnose.journal.holders`), and the walk along every hash
  chain (:meth:`TableStore.verify_chain`);
* :class:`TableStore`, the base of both stores: each keeps only its SQL
  dialect, its connection and transactions, opening and migrating, and the
  way it appends an event.

Statements here are written with ``?`` placeholders; a store turns them into
its own (:meth:`TableStore._q`). They use only what both databases have.
"""

from __future__ import annotations

import dataclasses
import json
import os
import re
import uuid
from collections.abc import Callable, Mapping
from contextlib import AbstractContextManager
from dataclasses import dataclass
from datetime import datetime
from typing import Any, NamedTuple, TypeVar

from diagnose.errors import JournalError
from diagnose.events import EVENT_KEYS, FORMAT, Event, EventError, Row, decode, encode, problem
from diagnose.journal.chain import Verified, check_chain, event_hash
from diagnose.journal.holders import Holding, check_holder, take_row, utc_now
from diagnose.text import storable

SCHEMA_VERSION = 5
#: The identity keys kept as columns of a session, to find the past jobs on a unit.
UNIT_FIELDS = ("site", "machine", "axis", "serial")
STATUSES = ("open", "closed")
#: The fewest hex digits of a UUID that a command takes for a session.
MIN_PREFIX = 8
#: The columns of a session after its counts, in the order of :class:`SessionInfo`.
_LATER_COLUMNS = (*UNIT_FIELDS, "origin", "uid", "holder", "held")


@dataclass(frozen=True)
class SessionInfo:
    """One session's metadata, as ``sessions`` and ``session`` return it."""

    id: str
    pack_id: str
    pack_version: str
    content_hash: str
    mode: str
    who: str | None
    started: str
    updated: str
    status: str
    outcome: str | None = None
    cause: str | None = None
    learned: str | None = None
    events: int = 0
    last_kind: str | None = None
    site: str | None = None
    machine: str | None = None
    axis: str | None = None
    serial: str | None = None
    origin: str | None = None  # of an imported session: its key in the journal it came from
    uid: str | None = None  # the session's UUID (None in a journal of schema 3 or before)
    holder: str | None = None  # who holds it, or held it last (diagnose.journal.holders)
    held: str | None = None  # the time (UTC) of the holder's last write; None: released

    @property
    def unit(self) -> dict[str, str]:
        """The unit's identity fields that are known (site, machine, axis, serial)."""
        return {k: str(getattr(self, k)) for k in UNIT_FIELDS if getattr(self, k)}

    @property
    def is_open(self) -> bool:
        return self.status == "open"

    @property
    def holding(self) -> Holding:
        """The session's holder and the time of their last write."""
        return Holding(self.holder, self.held)

    def to_dict(self) -> dict[str, Any]:
        return dataclasses.asdict(self)


def now() -> str:
    """The local time with its UTC offset, to the second, as the journal writes it."""
    return datetime.now().astimezone().isoformat(timespec="seconds")


def to_jsonable(value: Any) -> Any:
    """``value`` as plain JSON data: objects with ``to_dict``, dataclasses, sets and paths too.

    >>> from pathlib import Path
    >>> to_jsonable({"a": (1, 2), "b": {3}, "c": Path("x")})
    {'a': [1, 2], 'b': [3], 'c': 'x'}
    """
    if isinstance(value, (str, int, float, bool)) or value is None:
        return value
    if isinstance(value, Mapping):
        return {str(k): to_jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [to_jsonable(v) for v in value]
    if isinstance(value, (set, frozenset)):
        return sorted((to_jsonable(v) for v in value), key=str)
    if hasattr(value, "to_dict"):
        return to_jsonable(value.to_dict())
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return to_jsonable({f.name: getattr(value, f.name) for f in dataclasses.fields(value)})
    if isinstance(value, os.PathLike):
        return os.fspath(value)
    return str(value)


def event_fields(event: Any) -> tuple[str, dict[str, Any], str, int]:
    """The row of an event: a typed one through the codec, a mapping or object as it is."""
    if isinstance(event, Event):
        row = encode(event)
        return row.kind, row.data, str(row.time or now()), row.format
    if isinstance(event, Mapping):
        kind, data, when = event.get("kind"), event.get("data", {}), event.get("time")
    else:
        kind, data, when = (getattr(event, "kind", None), getattr(event, "data", {}),
                            getattr(event, "time", None))
    if not isinstance(kind, str) or not kind:
        raise JournalError(f"cannot record an event without a kind: {event!r}")
    fmt = event.get("format", FORMAT) if isinstance(event, Mapping) else FORMAT
    row = Row(kind, to_jsonable(data or {}), str(when or now()), fmt)
    why = problem(row)
    if why:  # a bug of the caller: the journal keeps only what reads back
        raise JournalError(f"cannot record a malformed event: {why}")
    return row.kind, row.data, row.time, row.format


class Entry(NamedTuple):
    """An event ready to be appended: its fields, its data and ranking as stored text, its UUID."""

    kind: str
    data: dict[str, Any]
    time: str
    format: int
    text: str  # the data as stored (JSON)
    ranking: str | None  # the ranking as stored (JSON), or None
    uid: str
    given: bool  # the UUID came with the event (a copy from another journal)

    def digest(self, session_uid: str, seq: int, prev: str | None) -> str:
        """The event's hash as number ``seq`` of the session after ``prev``."""
        return event_hash(session_uid, seq, self.kind, fmt=self.format, time=self.time,
                          data=json.loads(self.text), prev=prev)


def entry(event: Any, ranking: Any = None, uid: str | None = None) -> Entry:
    """``event`` (see :meth:`TableStore.write`) as an :class:`Entry`.

    Raises:
        JournalError: no kind, a malformed event, or ``uid`` is not a UUID.
    """
    kind, data, when, fmt = event_fields(event)
    text = storable(json.dumps(data, ensure_ascii=False, separators=(",", ":")))
    ranked = None if ranking is None else json.dumps(to_jsonable(ranking), separators=(",", ":"))
    return Entry(kind, data, when, fmt, text, ranked,
                 new_uid() if uid is None else normal_uid(uid), uid is not None)


def end_fields(data: Mapping[str, Any]) -> tuple[str | None, str | None]:
    """The outcome and cause an ``end`` event's data gives its session's row."""
    outcome = data.get("result", data.get("outcome"))
    cause = data.get("cause")
    return (str(outcome) if outcome is not None else None,
            str(cause) if cause is not None else None)


def new_uid() -> str:
    """A new UUID (version 4, RFC 9562) as text: lower case, with hyphens."""
    return str(uuid.uuid4())


def normal_uid(text: str) -> str:
    """``text`` as a UUID in the journal's form (lower case, with hyphens).

    Raises:
        JournalError: it is not a UUID.

    >>> normal_uid("0B7D4F0E7A0F4C399D1F5B2B2F0C1A10")
    '0b7d4f0e-7a0f-4c39-9d1f-5b2b2f0c1a10'
    """
    try:
        return str(uuid.UUID(str(text)))
    except ValueError:
        raise JournalError(f"{text!r} is not a UUID") from None


def uid_prefix(ref: str) -> str:
    """The hex digits of ``ref`` when it may be (the start of) a UUID, else "".

    >>> uid_prefix("0b7d4f0e-7a0f"), uid_prefix("250114-1"), uid_prefix("0b7d4f0")
    ('0b7d4f0e7a0f', '', '')
    """
    text = str(ref).strip().lower()
    if not re.fullmatch(r"[0-9a-f-]+", text):
        return ""
    digits = text.replace("-", "")
    return digits if MIN_PREFIX <= len(digits) <= 32 else ""


def ambiguous(ref: str, ids: list[str]) -> str:
    """The message for a UUID prefix that fits several sessions."""
    more = ", ..." if len(ids) > 2 else ""
    return (f"the id {ref} fits several sessions ({', '.join(ids[:2])}{more}); "
            "give more of its UUID, or the short id")


def _ranking_problem(ranking: Any) -> str:
    if ranking is None:
        return ""
    if not isinstance(ranking, list) or not all(
            isinstance(r, dict) and _is_number(r.get("p", 0)) for r in ranking):
        return "its ranking is not a list of causes with numbers"
    return ""


def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _damaged_event(where: Any, session_id: str, seq: Any, why: str) -> JournalError:
    return JournalError(
        f"the journal {where} is damaged: session {session_id}, event {seq}: {why} (altered by "
        "hand?); it was left as it is. Restore a backup, or mend or delete that event")


def decode_row(where: Any, session_id: str, row: tuple[Any, ...]) -> tuple[Event, Any]:
    """The event and ranking of a stored row ``(seq, kind, data, time, ranking, format)``.

    Raises:
        JournalError: the row is damaged (named by session and event number in the
            journal ``where``) or of a newer format.
    """
    seq, kind, text, when, ranked, fmt = row
    try:
        data = json.loads(text) if isinstance(text, (str, bytes)) else None
        ranking = None if ranked is None else json.loads(ranked)
    except ValueError as exc:
        raise _damaged_event(where, session_id, seq, f"not JSON: {exc}") from None
    why = _ranking_problem(ranking)
    if why:
        raise _damaged_event(where, session_id, seq, why)
    try:
        return decode(Row(kind, data, when, fmt)), ranking
    except EventError as exc:
        raise _damaged_event(where, session_id, seq, str(exc)) from None


def suspect_condition(first: list[str], lacks: Callable[[str], str]) -> str:
    """An SQL condition, quick to test, for the event rows worth checking in Python.

    ``first`` are a database's own tests (text that is not a JSON object, a
    ranking that is not a JSON list); ``lacks(key)`` is its test that an
    event's data does not name ``key``. To those come an event of a kind in
    ``EVENT_KEYS`` without one of its keys, a reading with neither verdict nor
    weights, and every ``undo`` (few, and the index must be a whole number).
    It may hold for sound rows too: every row it picks is checked again
    through the codec (``diagnose.events.decode``).

    >>> suspect_condition(["NOT ok(data)"], lambda k: f"lacks({k})").split(" THEN 1 ")[:2]
    ['CASE WHEN NOT ok(data)', "WHEN kind = 'reading' AND lacks(verdict) AND lacks(weights)"]
    """
    arms = [f"WHEN {test} THEN 1" for test in first]
    arms += [f"WHEN kind = 'reading' AND {lacks('verdict')} AND {lacks('weights')} THEN 1",
             "WHEN kind = 'undo' THEN 1"]
    for kind, keys in EVENT_KEYS.items():
        absent = " OR ".join(lacks(k) for k in keys)
        arms.append(f"WHEN kind = '{kind}' AND ({absent}) THEN 1")
    return "CASE " + " ".join(arms) + " ELSE 0 END"


def chained_rows(rows: list[tuple[Any, ...]], uids: Mapping[str, str]) -> list[tuple[Any, ...]]:
    """The events of a journal before schema 4 with a UUID and their chain (for a migration).

    ``rows`` are ``(session_id, seq, kind, time, data, ranking, format)`` ordered by
    session and seq; ``uids`` the sessions' UUIDs. Returns ``(session_id, seq, uid,
    kind, time, data, ranking, format, prev_hash, hash)``. Data that is not JSON (a
    row damaged before) is hashed as its text, and so is named by ``verify``.
    """
    out: list[tuple[Any, ...]] = []
    prev: dict[str, str] = {}
    for sid, seq, kind, when, text, ranked, fmt in rows:
        try:
            data = json.loads(text)
        except (TypeError, ValueError):
            data = str(text)
        fmt = int(fmt) if isinstance(fmt, int) else 1
        before = prev.get(sid)
        digest = event_hash(uids.get(sid) or "", seq, str(kind), fmt=fmt, time=str(when),
                            data=data, prev=before)
        out.append((sid, seq, new_uid(), kind, when, text, ranked, fmt, before, digest))
        prev[sid] = digest
    return out


# --- the schema both databases keep --------------------------------------------------
# Each store's _MIGRATIONS[n] takes a journal from schema n to n + 1 with these texts and
# its own few words (SQLite's WITHOUT ROWID, PostgreSQL's marker table and row times).
# Append only; never edit one that has shipped.

_INDENT = "\n            "


def _columns(*lines: str) -> str:
    return "".join(_INDENT + line for line in lines)


#: The columns of the first session table (schema 1).
SESSION_1 = _columns(
    "id TEXT PRIMARY KEY,", "pack_id TEXT NOT NULL,", "pack_version TEXT NOT NULL,",
    "content_hash TEXT NOT NULL,", "mode TEXT NOT NULL,", "who TEXT,",
    "started TEXT NOT NULL,", "updated TEXT NOT NULL,",
    "status TEXT NOT NULL DEFAULT 'open' CHECK (status IN ('open', 'closed')),",
    "outcome TEXT,", "cause TEXT,", "learned TEXT")
#: The columns of the first event table (schema 1).
EVENT_1 = _columns(
    "session_id TEXT NOT NULL REFERENCES session(id),", "seq INTEGER NOT NULL,",
    "kind TEXT NOT NULL,", "time TEXT NOT NULL,", "data TEXT NOT NULL,", "ranking TEXT,",
    "PRIMARY KEY (session_id, seq)")
#: The columns of the event table with UUIDs and the chain (schema 4, made as event4).
EVENT_4 = _columns(
    "session_id TEXT NOT NULL REFERENCES session(id),", "seq INTEGER NOT NULL,",
    "uid TEXT NOT NULL UNIQUE,", "kind TEXT NOT NULL,", "time TEXT NOT NULL,",
    "data TEXT NOT NULL,", "ranking TEXT,", "format INTEGER NOT NULL DEFAULT 1,",
    "prev_hash TEXT,", "hash TEXT NOT NULL,", "PRIMARY KEY (session_id, seq)")
END_TABLE = "\n        )"
#: 1 to 2: the version of each event's data, for the codec of diagnose.events.
STEP_2 = ("ALTER TABLE event ADD COLUMN format INTEGER NOT NULL DEFAULT 1",)
#: 2 to 3: the unit of a session as searchable fields, and where an imported session
#: came from (diagnose.journal.transfer), to import it once.
STEP_3 = (
    "ALTER TABLE session ADD COLUMN site TEXT",
    "ALTER TABLE session ADD COLUMN machine TEXT",
    "ALTER TABLE session ADD COLUMN axis TEXT",
    "ALTER TABLE session ADD COLUMN serial TEXT",
    "CREATE INDEX session_by_serial ON session (serial)",
    "CREATE INDEX session_by_site ON session (site, machine)",
    "ALTER TABLE session ADD COLUMN origin TEXT",
    "CREATE INDEX session_by_origin ON session (origin)",
)
#: 4 to 5: who holds a session, and the time of their last write (diagnose.journal.holders).
STEP_5 = (
    "ALTER TABLE session ADD COLUMN holder TEXT",
    "ALTER TABLE session ADD COLUMN held TEXT",
)


def fill_session_uids(cur: Any, q: Callable[[str], str]) -> None:
    """Give every session of a journal migrated to schema 4 a UUID (``q``: the placeholders)."""
    for (sid,) in cur.execute("SELECT id FROM session WHERE uid IS NULL").fetchall():
        cur.execute(q("UPDATE session SET uid = ? WHERE id = ?"), (new_uid(), sid))


def copy_chained(cur: Any, q: Callable[[str], str]) -> None:
    """Copy the events into the schema 4 table (event4) with their UUIDs and chain."""
    uids = dict(cur.execute("SELECT id, uid FROM session").fetchall())
    rows = cur.execute("SELECT session_id, seq, kind, time, data, ranking, format FROM event "
                       "ORDER BY session_id, seq").fetchall()
    cur.executemany(q(_INSERT_EVENT.replace("INTO event ", "INTO event4 ")),
                    chained_rows(rows, uids))


_T = TypeVar("_T", bound="TableStore")
_INSERT_EVENT = ("INSERT INTO event (session_id, seq, uid, kind, time, data, ranking, format, "
                 "prev_hash, hash) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)")


class TableStore:
    """What both journal stores do the same way on the same tables.

    A store sets ``label`` (the journal as shown), ``readonly`` and ``held``
    (the sessions this program holds: id -> holder), and gives its dialect:
    :meth:`_q` (its placeholders), :meth:`_locked` (a row lock), :meth:`_read`,
    :meth:`_transaction`, and the class attributes below.
    """

    label: str
    readonly: bool
    held: dict[str, str]
    #: The column giving the order in which session rows arrived.
    _ARRIVAL = "rowid"
    #: How sessions started in the same second are listed (newest first).
    _TIES = "s.rowid DESC"
    #: The database's function telling where a text is in another (0: not there).
    _INSTR = "instr"
    #: The events' format column (a journal of schema 1 has none: every event format 1).
    _format = "format"

    # -- the dialect (a store overrides these) ---------------------------------------------
    def _q(self, sql: str) -> str:
        """A statement with ``?`` placeholders in the database's form."""
        return sql

    def _locked(self, sql: str) -> str:
        """As :meth:`_q`, a SELECT locking the rows it reads until the transaction ends."""
        return self._q(sql)

    def _read(self, sql: str, params: tuple[Any, ...] = ()) -> list[tuple[Any, ...]]:
        raise NotImplementedError

    def _transaction(self) -> AbstractContextManager[Any]:
        """One write transaction (its cursor), committed when the block ends."""
        raise NotImplementedError

    def _locked_last(self, cur: Any, session_id: str) -> tuple[Any, ...] | None:
        """In a transaction: the session's status, UUID and holder, and the number and hash
        of its last event (None, None: no event yet), its appending locked to this writer;
        None when there is no such session.

        The session's row is locked first (one writer at a time appends to a session), and
        the last event read by a statement of its own, begun once the lock is held: a
        statement that waited for a lock may read other rows as they were before it waited.
        """
        row = cur.execute(self._locked("SELECT status, uid, holder FROM session WHERE id = ?"),
                          (session_id,)).fetchone()
        if row is None:
            return None
        last = cur.execute(self._q("SELECT seq, hash FROM event WHERE session_id = ? "
                                   "ORDER BY seq DESC LIMIT 1"), (session_id,)).fetchone()
        return (*row, *(last or (None, None)))

    def _has(self, table: str, column: str) -> bool:
        """Whether ``table`` has ``column`` (a journal of an older schema, read only, may not)."""
        return True

    def _suspect_rows(self, select: str) -> list[tuple[Any, ...]]:
        """The rows of ``select`` (every event) worth checking, ordered by session and seq."""
        return self._read(f"{select} ORDER BY session_id, seq")

    # -- opening and closing ---------------------------------------------------------------
    def close(self) -> None:
        """Release the sessions this program holds (leaving them), then close."""
        for sid in list(self.held):
            try:
                self.release(sid)
            except JournalError:
                pass  # the lease runs out instead
        self._close()

    def _close(self) -> None:
        raise NotImplementedError

    def __enter__(self: _T) -> _T:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def _writable(self) -> None:
        if self.readonly:
            raise JournalError(f"the journal {self.label} is open for reading only")

    # -- writing -----------------------------------------------------------------------------
    def _append(self, cur: Any, session_id: str, item: Entry) -> tuple[str, int, str | None]:
        """Append ``item`` inside the write transaction ``cur``: the session's short id, the
        event's number and its hash (None: an event of that UUID was there already).

        Raises:
            JournalError: unknown session, taken over, or a second end.
        """
        row = self._locked_last(cur, session_id)
        if row is None:
            session_id = self._resolve(session_id, cur)
            row = self._locked_last(cur, session_id)
        if item.given:
            there = cur.execute(self._q("SELECT seq FROM event WHERE uid = ?"),
                                (item.uid,)).fetchone()
            if there:  # written before (a copy run again): nothing to add
                return session_id, int(there[0]), None
        status, session_uid, holder, last, prev = row
        if session_id in self.held:
            check_holder(session_id, self.held[session_id], holder)
        if status == "closed" and item.kind == "end":
            raise JournalError(f"session {session_id} is closed already")
        seq = 1 if last is None else int(last) + 1
        digest = item.digest(session_uid, seq, prev)
        cur.execute(self._q(_INSERT_EVENT), (session_id, seq, item.uid, item.kind, item.time,
                                             item.text, item.ranking, item.format, prev, digest))
        sets = self._session_sets(session_id, item)
        cur.execute(self._q(f"UPDATE session SET {', '.join(f'{k} = ?' for k in sets)} "
                            "WHERE id = ?"), (*sets.values(), session_id))
        return session_id, seq, digest

    def _session_sets(self, session_id: str, item: Entry) -> dict[str, Any]:
        """The columns of the session's row that appending ``item`` sets, and their values."""
        sets: dict[str, Any] = {k: str(item.data[k]).strip() for k in UNIT_FIELDS
                                if item.kind == "identity"
                                and str(item.data.get(k) or "").strip()}
        sets["updated"] = item.time
        if item.kind == "reopen":  # a phone diagnosis goes on at the site visit
            sets.update(status="open", outcome=None, cause=None)
        elif item.kind == "end":
            outcome, cause = end_fields(item.data)
            sets.update(status="closed", outcome=outcome, cause=cause)
        if session_id in self.held:  # the holder's write renews the hold
            sets.update(holder=self.held[session_id], held=utc_now())
        return sets

    def take(self, session_id: str, holder: str, *, force: bool = False,
             lease: float | None = None) -> Holding:
        """Take session ``session_id`` for ``holder`` (see :mod:`diagnose.journal.holders`).

        Returns the holding before (whom it was taken from).

        Raises:
            SessionHeld: another holder wrote within the lease (and not ``force``).
        """
        session_id = self.resolve(session_id)
        with self._transaction() as cur:
            before = take_row(cur, self._locked, session_id, holder, force=force, lease=lease)
        self.held[session_id] = holder
        return before

    def release(self, session_id: str) -> None:
        """Leave session ``session_id``: another may take it at once (its holder's name stays)."""
        holder = self.held.pop(session_id, None)
        if holder is not None:
            self._apply("UPDATE session SET held = NULL WHERE id = ? AND holder = ?",
                        (session_id, holder))

    def _apply(self, sql: str, params: tuple[Any, ...]) -> int:
        """One statement in a write transaction of its own; the rows it changed."""
        with self._transaction() as cur:
            return int(cur.execute(self._q(sql), params).rowcount)

    def close_session(self, session_id: str, outcome: str, cause: str | None = None) -> None:
        """Mark a session closed with its ``outcome`` (``resolved``, ``escalated``, ...) and cause.

        A session normally closes with its ``end`` event; this is for a face that ends
        one without a session object.
        """
        changed = self._apply("UPDATE session SET status = 'closed', outcome = ?, cause = ?, "
                              "updated = ? WHERE id = ?", (outcome, cause, now(), session_id))
        if changed == 0:
            raise JournalError(f"no session {session_id} in the journal {self.label}")

    # -- reading -----------------------------------------------------------------------------
    def holding(self, session_id: str) -> Holding:
        """Who holds session ``session_id``, and when they last wrote."""
        row = self._read(self._q("SELECT holder, held FROM session WHERE id = ?"),
                         (self.resolve(session_id),))
        return Holding(*row[0])

    def stored_events(self, session_id: str) -> list[tuple[Any, ...]]:
        """The rows of a session's events as stored, for a copy to another journal:
        ``(seq, uid, kind, data text, time, ranking text, format, hash)`` in order."""
        return self._read(self._q("SELECT seq, uid, kind, data, time, ranking, format, hash "
                                   "FROM event WHERE session_id = ? ORDER BY seq"),
                          (self.resolve(session_id),))

    def load_events(self, session_id: str) -> list[Event]:
        """The events of a session in the order they were written, decoded and checked.

        Raises:
            JournalError: no such session, or an event was damaged (altered by hand)
                or written by a newer diagnose.
        """
        session_id = self.session(session_id).id
        return [self._decode(session_id, row)[0] for row in self._event_rows(session_id)]

    def load_rankings(self, session_id: str) -> list[list[dict[str, Any]] | None]:
        """The ranking kept beside each event (None where none was), in event order.

        Raises:
            JournalError: an event was damaged (altered by hand).
        """
        session_id = self.resolve(session_id)
        return [self._decode(session_id, row)[1] for row in self._event_rows(session_id)]

    def _event_rows(self, session_id: str) -> list[tuple[Any, ...]]:
        return self._read(self._q(f"SELECT seq, kind, data, time, ranking, {self._format} "
                                  "FROM event WHERE session_id = ? ORDER BY seq"), (session_id,))

    def verify_events(self, session_id: str | None = None) -> None:
        """Check the stored events before a session is replayed or listed.

        Every event must read back through the codec (``diagnose.events``). One
        session's events are all read and checked; for the whole journal
        (``session_id`` None) the database itself first picks out the rows worth
        a closer look (:func:`suspect_condition`), so that a long journal lists
        quickly.

        Raises:
            JournalError: the first damaged event, by session and number.
        """
        select = f"SELECT session_id, seq, kind, data, time, ranking, {self._format} FROM event"
        if session_id is not None:
            rows = self._read(self._q(f"{select} WHERE session_id = ? ORDER BY seq"),
                              (self.resolve(session_id),))
        else:
            rows = self._suspect_rows(select)
        for sid, *row in rows:
            self._decode(sid, tuple(row))

    def _decode(self, session_id: str, row: tuple[Any, ...]) -> tuple[Event, Any]:
        """The event and ranking of a stored row ``(seq, kind, data, time, ranking, format)``."""
        return decode_row(self.label, session_id, row)

    def session(self, session_id: str) -> SessionInfo:
        """One session's metadata, by its short id, its UUID or a unique prefix of the UUID.

        Raises:
            JournalError: no such session (the message names the latest ones), or the
                prefix fits several.
        """
        found = self._sessions("WHERE s.id = ?", (session_id,))
        if not found:
            found = self._sessions("WHERE s.id = ?", (self.resolve(session_id),))
        return found[0]

    def resolve(self, ref: str, cur: Any = None) -> str:
        """The short id of the session ``ref`` names: its short id, UUID or UUID prefix
        (read in the write transaction ``cur`` when given).

        Raises:
            JournalError: no such session, or the prefix fits several.
        """
        return self._resolve(ref, cur)

    def _resolve(self, ref: str, cur: Any = None) -> str:
        def rows(sql: str, params: tuple[Any, ...]) -> list[tuple[Any, ...]]:
            return (cur.execute(self._q(sql), params).fetchall() if cur is not None
                    else self._read(self._q(sql), params))

        ref = str(ref).strip()
        if rows("SELECT id FROM session WHERE id = ?", (ref,)):
            return ref
        prefix = uid_prefix(ref)
        found: list[tuple[Any, ...]] = []
        if prefix and self._has("session", "uid"):
            found = rows("SELECT id FROM session WHERE replace(uid, '-', '') LIKE ? "
                         "ORDER BY id LIMIT 3", (prefix + "%",))
        if len(found) == 1:
            return str(found[0][0])
        if found:
            raise JournalError(ambiguous(ref, [str(r[0]) for r in found]))
        latest = [s.id for s in self._sessions("", (), limit=3)]
        hint = f"; latest: {', '.join(latest)}" if latest else ""
        raise JournalError(f"no session {ref} in the journal {self.label}{hint}")

    def sessions(self, status: str | None = None, pack_id: str | None = None,
                 **unit: str | None) -> list[SessionInfo]:
        """Sessions, newest first; ``status`` is ``open``, ``closed`` or None for all.

        ``unit`` filters by the unit: ``serial`` (the same, ignoring case and
        spaces at the ends), ``site``, ``machine``, ``axis`` (containing the
        words, ignoring case), and ``since`` (started on or after an ISO date).
        """
        if status is not None and status not in STATUSES:
            raise ValueError(f"status must be one of {STATUSES}, not {status!r}")
        where, params = [], []
        if status:
            where.append("s.status = ?")
            params.append(status)
        if pack_id:
            where.append("s.pack_id = ?")
            params.append(pack_id)
        for key, value in unit.items():
            if value is None or not str(value).strip():
                continue
            if key not in (*UNIT_FIELDS, "since"):
                raise ValueError(f"no filter {key!r}")
            if key != "since" and not self._has("session", key):
                return []  # a journal from before these fields: nothing to match
            where.append({"serial": "lower(trim(s.serial)) = lower(trim(?))",
                          "since": "substr(s.started, 1, 10) >= ?"}.get(
                key, f"{self._INSTR}(lower(s.{key}), lower(trim(?))) > 0"))
            params.append(str(value))
        clause = f"WHERE {' AND '.join(where)}" if where else ""
        return self._sessions(clause, tuple(params))

    def _sessions(self, clause: str, params: tuple[Any, ...], *,
                  limit: int | None = None) -> list[SessionInfo]:
        later = ", ".join(f"s.{k}" if self._has("session", k) else "NULL"
                          for k in _LATER_COLUMNS)
        rows = self._read(self._q(
            "SELECT s.id, s.pack_id, s.pack_version, s.content_hash, s.mode, s.who, s.started, "
            "s.updated, s.status, s.outcome, s.cause, s.learned, "
            "(SELECT count(*) FROM event e WHERE e.session_id = s.id), "
            "(SELECT kind FROM event e WHERE e.session_id = s.id ORDER BY seq DESC LIMIT 1), "
            f"{later} FROM session s {clause} ORDER BY s.started DESC, {self._TIES}"
            + ("" if limit is None else f" LIMIT {int(limit)}")), params)
        return [SessionInfo(*r[:12], int(r[12]), *r[13:]) for r in rows]

    def verify_chain(self, session_id: str | None = None) -> Verified:
        """Check the hash chain of one session's events, or of every session's.

        Returns what was checked and the first break (None when every chain holds);
        see :mod:`diagnose.journal.chain`.

        Raises:
            JournalError: no such session, or a journal from before the chains.
        """
        if not self._has("event", "hash"):
            raise JournalError(f"the journal {self.label} is of schema {self.schema_version}, "
                               "from before the hash chains; open it once for writing (any "
                               "command that records) to upgrade it")
        if session_id is not None:
            sessions = self._read(self._q("SELECT id, uid FROM session WHERE id = ?"),
                                  (self.resolve(session_id),))
        else:
            sessions = self._read(f"SELECT id, uid FROM session ORDER BY started, "
                                  f"{self._ARRIVAL}")
        events = 0
        for sid, uid in sessions:
            rows = self._read(self._q("SELECT seq, kind, format, time, data, prev_hash, hash "
                                      "FROM event WHERE session_id = ? ORDER BY seq"), (sid,))
            broken = check_chain(sid, uid, rows)
            if broken is not None:
                return Verified(len(sessions), events, broken, session_id and sid)
            events += len(rows)
        return Verified(len(sessions), events, None, session_id and sessions[0][0])

    @property
    def schema_version(self) -> int:
        raise NotImplementedError

