"""The journal: an embedded SQLite store of sessions and their events.

One file (see ``diagnose.paths``) in WAL mode holds every session:
its pack (id, version, content hash), mode and technician, and each event
(``kind``, ``data`` as JSON, ``time``, the ``format`` of its data; see
``diagnose.events``) in order. ``Journal.write`` is the
session's sink: one short committed transaction an event, so whatever a
person has seen on screen is on disk before the next prompt, and a killed
process loses nothing it had acknowledged.

Safety rules, in the order ``Journal`` applies them:

* An existing file is first opened **read-only** and checked: SQLite header,
  application id, schema version (``PRAGMA user_version``) and, before any
  write, ``PRAGMA quick_check``. A damaged file, another program's database
  or a journal from a newer diagnose raises ``JournalError`` and the file is
  left byte for byte as it was: no migration, no write, not even a change of
  journal mode.
* Migrations run in one ``BEGIN IMMEDIATE`` transaction, after a copy of the
  old file is kept beside it (``journal.sqlite3.schema1.bak``).
* Writers wait for each other (``busy_timeout`` and a bounded retry), so two
  sessions writing at once lose nothing.
* A full disk stops the write that did not fit and says so; what was
  committed before stays, and the session resumes once there is space.
* Every session and event has a UUID (``uid``) besides its short id
  (``250114-3``, unique within the journal); commands take either, or a
  unique prefix of the UUID of at least 8 hex digits (:meth:`Journal.resolve`).
  Writing a session or an event whose UUID is there already changes nothing
  (what a copy between journals needs to be idempotent).
* Events are only ever inserted: the program never updates or deletes an
  event row (the session row is updated: its status, outcome, unit and time
  of the last event). Each event carries the hash of the one before it in
  its session and its own (:mod:`diagnose.journal.chain`);
  :meth:`Journal.verify_chain` finds the first event altered or taken out.
* Events are read back checked: a row altered by hand (data that is not a
  JSON object, a field of the wrong type, a missing key, a ranking that is no
  list) raises ``JournalError`` naming the session and the event number; an
  event of a newer format is refused the same way.
* ``backup`` checks the journal's integrity first and writes the copy
  beside its target, renaming it into place; it never writes over the
  journal, another program's database or a path through a symbolic link.

References:
    SQLite, "Write-Ahead Logging" (https://sqlite.org/wal.html) and
    "Database File Format", section 1.3 (the header, user_version,
    application_id), https://sqlite.org/fileformat2.html.
"""

from __future__ import annotations

import dataclasses
import errno
import json
import os
import re
import shutil
import sqlite3
import time as _time
import uuid
from collections.abc import Iterator, Mapping
from contextlib import contextmanager
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import Any

from diagnose.errors import JournalError
from diagnose.events import EVENT_KEYS, FORMAT, Event, EventError, Row, decode, encode, problem
from diagnose.journal.chain import Verified, check_chain, event_hash
from diagnose.journal.holders import Holding, renew_row, take_row
from diagnose.paths import APPLICATION_ID
from diagnose.text import storable

SCHEMA_VERSION = 5
#: The identity keys kept as columns of a session, to find the past jobs on a unit.
UNIT_FIELDS = ("site", "machine", "axis", "serial")
HEADER = b"SQLite format 3\x00"
BUSY_TIMEOUT_MS = 5000
_RETRIES = 4  # on top of busy_timeout: a writer waits up to about 20 s in all
STATUSES = ("open", "closed")
_LOW_SPACE = 1 << 20  # bytes free below which an I/O error is taken for a full disk
DISK_FULL = "the disk is full: nothing more was written; free space and resume"

# What replaying a session reads from an event's data with no default
# (``diagnose.session.apply``, ``diagnose.journal.record``): an event without it
# was altered by hand. A reading needs its verdict or its weights besides.

# _MIGRATIONS[n] takes a journal from schema n to n + 1. Append only; never edit one
# that has shipped.
_MIGRATIONS: tuple[tuple[str, ...], ...] = (
    (
        """CREATE TABLE session (
            id TEXT PRIMARY KEY,
            pack_id TEXT NOT NULL,
            pack_version TEXT NOT NULL,
            content_hash TEXT NOT NULL,
            mode TEXT NOT NULL,
            who TEXT,
            started TEXT NOT NULL,
            updated TEXT NOT NULL,
            status TEXT NOT NULL DEFAULT 'open' CHECK (status IN ('open', 'closed')),
            outcome TEXT,
            cause TEXT,
            learned TEXT
        )""",
        """CREATE TABLE event (
            session_id TEXT NOT NULL REFERENCES session(id),
            seq INTEGER NOT NULL,
            kind TEXT NOT NULL,
            time TEXT NOT NULL,
            data TEXT NOT NULL,
            ranking TEXT,
            PRIMARY KEY (session_id, seq)
        ) WITHOUT ROWID""",
        "CREATE INDEX session_by_pack ON session (pack_id, status)",
    ),
    (  # 2: the version of each event's data, for the codec of diagnose.events
        "ALTER TABLE event ADD COLUMN format INTEGER NOT NULL DEFAULT 1",
    ),
    (  # 3: the unit of a session as searchable fields (filled from its identity events)
        "ALTER TABLE session ADD COLUMN site TEXT",
        "ALTER TABLE session ADD COLUMN machine TEXT",
        "ALTER TABLE session ADD COLUMN axis TEXT",
        "ALTER TABLE session ADD COLUMN serial TEXT",
        "CREATE INDEX session_by_serial ON session (serial)",
        "CREATE INDEX session_by_site ON session (site, machine)",
        # where an imported session came from (diagnose.journal.transfer), to import it once
        "ALTER TABLE session ADD COLUMN origin TEXT",
        "CREATE INDEX session_by_origin ON session (origin)",
    ),
    (  # 4: a UUID for every session and event; the events hash-chained (diagnose.journal.chain)
        "ALTER TABLE session ADD COLUMN uid TEXT",
        lambda conn: _fill_session_uids(conn),
        "CREATE UNIQUE INDEX session_by_uid ON session (uid)",
        """CREATE TABLE event4 (
            session_id TEXT NOT NULL REFERENCES session(id),
            seq INTEGER NOT NULL,
            uid TEXT NOT NULL UNIQUE,
            kind TEXT NOT NULL,
            time TEXT NOT NULL,
            data TEXT NOT NULL,
            ranking TEXT,
            format INTEGER NOT NULL DEFAULT 1,
            prev_hash TEXT,
            hash TEXT NOT NULL,
            PRIMARY KEY (session_id, seq)
        ) WITHOUT ROWID""",
        # The events are copied into the new table with their uids and chain, never updated.
        lambda conn: _copy_chained(conn),
        "DROP TABLE event",
        "ALTER TABLE event4 RENAME TO event",
    ),
    (  # 5: who holds a session, and the time of their last write (diagnose.journal.holders)
        "ALTER TABLE session ADD COLUMN holder TEXT",
        "ALTER TABLE session ADD COLUMN held TEXT",
    ),
)


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

    @property
    def unit(self) -> dict[str, str]:
        """The unit's identity fields that are known (site, machine, axis, serial)."""
        return {k: str(getattr(self, k)) for k in UNIT_FIELDS if getattr(self, k)}

    @property
    def is_open(self) -> bool:
        return self.status == "open"

    def to_dict(self) -> dict[str, Any]:
        return dataclasses.asdict(self)


def now() -> str:
    """The local time with its UTC offset, to the second, as the journal writes it."""
    return datetime.now().astimezone().isoformat(timespec="seconds")


def to_jsonable(value: Any) -> Any:
    """``value`` as plain JSON data: objects with ``to_dict``, dataclasses, sets and paths too.

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


# --- checking a file before anything writes to it ----------------------------------


def _ro_uri(path: Path, immutable: bool = False) -> str:
    extra = "&immutable=1" if immutable else ""
    return f"{path.resolve().as_uri()}?mode=ro{extra}"


def _connect_ro(path: Path) -> sqlite3.Connection:
    try:
        conn = sqlite3.connect(_ro_uri(path), uri=True, isolation_level=None)
        conn.execute("SELECT count(*) FROM sqlite_master").fetchone()
        return conn
    except sqlite3.OperationalError:
        # A WAL journal in a folder we may not write, with no -shm file left: read the
        # main file as it stands (there is no -wal file either, or we could not open it).
        if (path.parent / (path.name + "-wal")).exists():
            raise
        conn = sqlite3.connect(_ro_uri(path, immutable=True), uri=True, isolation_level=None)
        conn.execute("SELECT count(*) FROM sqlite_master").fetchone()
        return conn


def _damaged(path: Path, why: str) -> JournalError:
    return JournalError(
        f"the journal {path} is damaged or not a diagnose journal ({why}); it was left as it is. "
        "Restore a backup or move it away, then try again")


def inspect(path: Path, *, thorough: bool = False) -> int:
    """Check an existing journal without writing to it; return its schema version.

    A missing or empty file is version 0 (a new journal). ``thorough`` adds
    ``PRAGMA quick_check``, which reads every page.

    Raises:
        JournalError: the file is damaged, is not a diagnose journal, was written
            by a newer diagnose, or cannot be read.
    """
    try:
        size = path.stat().st_size
    except FileNotFoundError:
        return 0
    except OSError as exc:
        raise JournalError(f"cannot read the journal {path}: {exc.strerror}") from None
    if size == 0:
        return 0
    try:
        with open(path, "rb") as fh:
            head = fh.read(100)
    except OSError as exc:
        raise JournalError(f"cannot read the journal {path}: {exc.strerror}") from None
    if len(head) < 100 or not head.startswith(HEADER):
        raise _damaged(path, "it does not start with an SQLite header")
    try:
        conn = _connect_ro(path)
    except sqlite3.DatabaseError as exc:
        raise _damaged(path, str(exc)) from None
    try:
        version = conn.execute("PRAGMA user_version").fetchone()[0]
        app = conn.execute("PRAGMA application_id").fetchone()[0]
        tables = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type='table'")}
        if app not in (0, APPLICATION_ID) or (app == 0 and (tables or version)):
            raise _damaged(path, "another program's database")
        if version == 0 and tables:  # a schema version set back by hand: not an empty journal
            raise _damaged(path, "it holds tables but no schema version")
        if version > SCHEMA_VERSION:
            raise JournalError(
                f"the journal {path} was written by a newer diagnose (schema {version}; this "
                f"program knows up to {SCHEMA_VERSION}); it was left as it is. Upgrade diagnose, "
                "or give another file with --journal")
        if version and not {"session", "event"} <= tables:
            raise _damaged(path, "its tables are missing")
        if thorough:
            found = [r[0] for r in conn.execute("PRAGMA quick_check(5)")]
            if found != ["ok"]:
                raise _damaged(path, "; ".join(found))
        return int(version)
    except sqlite3.DatabaseError as exc:
        raise _damaged(path, str(exc)) from None
    finally:
        conn.close()


def _translate(path: Path, exc: sqlite3.Error) -> JournalError:
    text = str(exc)
    low = text.lower()
    if is_disk_full(exc, path):  # first: a full disk can look like a read-only or I/O failure
        return JournalError(f"cannot write the journal {path}: {DISK_FULL}")
    if "readonly" in low or "read-only" in low or "unable to open" in low:
        return JournalError(
            f"cannot write the journal {path}: the file or its folder is read-only. Choose "
            "another place with --journal PATH or DIAGNOSE_JOURNAL")
    if "locked" in low or "busy" in low:
        return JournalError(f"the journal {path} is busy (another diagnose is writing); "
                            "try again")
    if "malformed" in low or "not a database" in low or "corrupt" in low:
        return _damaged(path, text)
    return JournalError(f"journal {path}: {text}")


def is_disk_full(exc: BaseException, path: Path) -> bool:
    """Whether ``exc``, raised while writing the file ``path``, comes of a full disk.

    It does when the database says so ("database or disk is full"), when the
    system says ENOSPC (or EDQUOT), and when an I/O error or a file that
    cannot be opened strikes with (almost) no space left in ``path``'s folder:
    the database reports a full disk met while writing its log that way.
    """
    if isinstance(exc, OSError):
        return exc.errno in (errno.ENOSPC, getattr(errno, "EDQUOT", errno.ENOSPC))
    low = str(exc).lower()
    name = str(getattr(exc, "sqlite_errorname", ""))
    if "database or disk is full" in low or name == "SQLITE_FULL":
        return True
    if "disk i/o error" in low or "unable to open" in low or name.startswith(
            ("SQLITE_IOERR", "SQLITE_CANTOPEN")):
        try:
            return shutil.disk_usage(path.parent).free < _LOW_SPACE
        except OSError:
            return False
    return False


def _is_busy(exc: sqlite3.Error) -> bool:
    low = str(exc).lower()
    return "locked" in low or "busy" in low


# --- the store ------------------------------------------------------------------------


class Journal:
    """The journal file: sessions and their events.

    ``Journal(path)`` opens (or creates) the file for writing after the checks
    above; ``Journal(path, readonly=True)`` only reads and never creates.
    Use it as a context manager or call ``close``.

    >>> import tempfile, pathlib
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> with Journal(folder / "j.sqlite3") as j:
    ...     sid = j.new_session("mini-brake", "1.0.0", "abc", "site", who="ana")
    ...     seq = j.write(sid, {"kind": "note", "data": {"text": "hello"}, "time": now()})
    ...     [e.kind for e in j.load_events(sid)], j.session(sid).events
    (['note'], 1)
    """

    def __init__(self, path: str | os.PathLike[str], *, readonly: bool = False) -> None:
        self.path = Path(path)
        self.readonly = readonly
        self.held: dict[str, str] = {}  # the sessions this program holds: id -> holder
        if readonly:
            if not self.path.exists():
                raise JournalError(f"there is no journal at {self.path} yet: nothing was "
                                   "recorded there")
            if inspect(self.path) == 0:  # an empty file: a journal not written to yet
                raise JournalError(f"the journal {self.path} is empty: nothing was recorded "
                                   "there yet")
            try:
                self._conn = _connect_ro(self.path)
            except sqlite3.Error as exc:
                raise _translate(self.path, exc) from None
            return
        version = inspect(self.path, thorough=True)
        self._conn = self._connect_rw()
        try:
            self._prepare(version)
        except BaseException:
            self._conn.close()
            raise

    # -- opening -------------------------------------------------------------------
    def _connect_rw(self) -> sqlite3.Connection:
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise JournalError(
                f"cannot create the folder {self.path.parent} for the journal: {exc.strerror}. "
                "Choose another place with --journal PATH or DIAGNOSE_JOURNAL") from None
        try:
            conn = sqlite3.connect(self.path, isolation_level=None, timeout=BUSY_TIMEOUT_MS / 1000)
            conn.execute(f"PRAGMA busy_timeout = {BUSY_TIMEOUT_MS}")
            conn.execute("PRAGMA foreign_keys = ON")
            conn.execute("PRAGMA synchronous = FULL")  # an answer survives a power cut too
        except sqlite3.Error as exc:
            raise _translate(self.path, exc) from None
        return conn

    def _prepare(self, version: int) -> None:
        conn = self._conn
        # Switching a new file to write-ahead logging needs the file to itself, and the
        # busy handler is not asked for that: two writers starting on one new journal
        # wait for each other here, up to the busy timeout.
        waited = 0.0
        while True:
            try:
                if conn.execute("PRAGMA journal_mode").fetchone()[0].lower() != "wal":
                    mode = conn.execute("PRAGMA journal_mode = WAL").fetchone()[0]
                    if mode.lower() != "wal":
                        raise JournalError(f"the journal {self.path} cannot use write-ahead "
                                           f"logging here (mode {mode})")
                break
            except sqlite3.Error as exc:
                if _is_busy(exc) and waited < BUSY_TIMEOUT_MS / 1000:
                    _time.sleep(0.05)
                    waited += 0.05
                    continue
                raise _translate(self.path, exc) from None
        if version < SCHEMA_VERSION:
            if version > 0:
                self._keep_copy(version)
            self._migrate()

    def _keep_copy(self, version: int) -> None:
        """Copy the journal aside before a migration changes it."""
        target = self.path.with_name(f"{self.path.name}.schema{version}.bak")
        if os.path.lexists(target):
            return
        from diagnose.errors import InputError

        try:
            self._copy_to(target, field="journal")
        except InputError as exc:
            raise JournalError(f"cannot keep a copy of the journal before upgrading it: "
                               f"{exc.message}") from None

    def _migrate(self) -> None:
        with self._transaction() as conn:
            # Another process may have migrated while we waited for the lock.
            current = conn.execute("PRAGMA user_version").fetchone()[0]
            if current > SCHEMA_VERSION:
                raise JournalError(f"the journal {self.path} was just upgraded by a newer "
                                   "diagnose; upgrade diagnose too")
            for step in _MIGRATIONS[current:SCHEMA_VERSION]:
                for statement in step:
                    if callable(statement):  # rows a migration fills in Python
                        statement(conn)
                    else:
                        conn.execute(statement)
            if 0 < current < 3:
                _fill_unit_fields(conn)
            conn.execute(f"PRAGMA application_id = {APPLICATION_ID}")
            conn.execute(f"PRAGMA user_version = {SCHEMA_VERSION}")

    @contextmanager
    def _transaction(self) -> Iterator[sqlite3.Connection]:
        """One short write transaction, taken at once and retried while another writer holds it."""
        if self.readonly:
            raise JournalError(f"the journal {self.path} is open for reading only")
        conn = self._conn
        for attempt in range(_RETRIES):
            try:
                conn.execute("BEGIN IMMEDIATE")
                break
            except sqlite3.OperationalError as exc:
                if not _is_busy(exc) or attempt == _RETRIES - 1:
                    raise _translate(self.path, exc) from None
                _time.sleep(0.05 * (attempt + 1))
            except sqlite3.Error as exc:
                raise _translate(self.path, exc) from None
        try:
            yield conn
            conn.execute("COMMIT")
        except BaseException as exc:
            if conn.in_transaction:
                try:
                    conn.execute("ROLLBACK")
                except sqlite3.Error:
                    pass  # the database rolled back itself (a full disk does that)
            if isinstance(exc, sqlite3.Error):
                raise _translate(self.path, exc) from None
            raise

    def _read(self, sql: str, params: tuple[Any, ...] = ()) -> list[tuple[Any, ...]]:
        try:
            return self._conn.execute(sql, params).fetchall()
        except sqlite3.Error as exc:
            raise _translate(self.path, exc) from None

    # -- public API ----------------------------------------------------------------
    def close(self) -> None:
        """Release the sessions this program holds (leaving them), then close."""
        for sid in list(self.held):
            try:
                self.release(sid)
            except JournalError:
                pass  # the lease runs out instead
        self._conn.close()

    def __enter__(self) -> Journal:  # noqa: PYI034 (no subclasses)
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    @property
    def schema_version(self) -> int:
        return int(self._read("PRAGMA user_version")[0][0])

    def new_session(self, pack_id: str, pack_version: str, content_hash: str, mode: str,
                    who: str | None = None, *, started: str | None = None,
                    learned: str | None = None, wanted: str | None = None,
                    origin: str | None = None, uid: str | None = None) -> str:
        """Record a new open session; return its id, the date and a counter: ``250114-3``.

        ``learned`` says which learned priors the session ranks with (None: the pack's own).
        ``wanted``: the id to use if it is free (an imported session keeps its id when it
        can); ``origin``: where an imported session came from. ``uid``: the session's
        UUID (a new one when None); a session with that UUID here already is kept as it
        is and its id returned.
        """
        when = started or now()
        day = when[2:10].replace("-", "")
        uid = new_uid() if uid is None else normal_uid(uid)
        with self._transaction() as conn:
            there = conn.execute("SELECT id FROM session WHERE uid = ?", (uid,)).fetchone()
            if there is not None:
                return str(there[0])
            free = wanted and conn.execute("SELECT 1 FROM session WHERE id = ?",
                                           (wanted,)).fetchone() is None
            if free:
                sid = str(wanted)
            else:
                rows = conn.execute("SELECT id FROM session WHERE id LIKE ?",
                                    (f"{day}-%",)).fetchall()
                taken = [int(r[0].split("-", 1)[1]) for r in rows
                         if r[0].split("-", 1)[1].isdigit()]
                sid = f"{day}-{max(taken, default=0) + 1}"
            conn.execute(
                "INSERT INTO session (id, pack_id, pack_version, content_hash, mode, who, "
                "started, updated, learned, origin, uid) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                (sid, pack_id, pack_version, content_hash, mode,
                 None if who is None else storable(who), when, when, learned, origin, uid))
        return sid

    def write(self, session_id: str, event: Any, *, ranking: Any = None,
              uid: str | None = None) -> int:
        """Append one event to a session, committed before this returns; the session's sink.

        ``event`` has ``kind``, ``data`` (JSON-able) and ``time`` (ISO text), as an
        object or a mapping. ``ranking`` (a list of ``{"cause", "p"}``), when given,
        is the ranking after the event, kept beside it for the repair log. An
        ``end`` event also closes the session with the ``result`` and ``cause`` of
        its data; a closed session still takes notes and acknowledgements.
        ``uid`` is the event's UUID (a new one when None); an event with that UUID
        here already is not written again. Returns the event's number (from 1).

        Raises:
            JournalError: unknown session, a second end, or the file cannot be written.
        """
        kind, data, when, fmt = event_fields(event)
        payload = json.dumps(data, ensure_ascii=False, separators=(",", ":"))
        payload = storable(payload)
        ranked = None if ranking is None else json.dumps(to_jsonable(ranking),
                                                         separators=(",", ":"))
        uid = new_uid() if uid is None else normal_uid(uid)
        with self._transaction() as conn:
            row = conn.execute("SELECT status, uid, holder FROM session WHERE id = ?",
                               (session_id,)).fetchone()
            if row is None:
                session_id = self._resolve(session_id, conn)
                row = conn.execute("SELECT status, uid, holder FROM session WHERE id = ?",
                                   (session_id,)).fetchone()
            there = conn.execute("SELECT seq FROM event WHERE uid = ?", (uid,)).fetchone()
            if there is not None:  # written before (a copy run again): nothing to add
                return int(there[0])
            if session_id in self.held:
                renew_row(conn, str, session_id, self.held[session_id], row[2])
            if row[0] == "closed" and kind == "end":
                raise JournalError(f"session {session_id} is closed already")
            last = conn.execute("SELECT seq, hash FROM event WHERE session_id = ? "
                                "ORDER BY seq DESC LIMIT 1", (session_id,)).fetchone()
            seq, prev = (1, None) if last is None else (last[0] + 1, last[1])
            digest = event_hash(row[1], seq, kind, fmt=fmt, time=when, data=json.loads(payload),
                                prev=prev)
            conn.execute("INSERT INTO event (session_id, seq, uid, kind, time, data, ranking, "
                         "format, prev_hash, hash) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                         (session_id, seq, uid, kind, when, payload, ranked, fmt, prev, digest))
            unit = {k: str(data[k]).strip() for k in UNIT_FIELDS
                    if kind == "identity" and str(data.get(k) or "").strip()}
            if unit:
                conn.execute(f"UPDATE session SET {', '.join(f'{k} = ?' for k in unit)} "
                             "WHERE id = ?", (*unit.values(), session_id))
            if kind == "reopen":  # a phone diagnosis goes on at the site visit
                conn.execute("UPDATE session SET updated = ?, status = 'open', outcome = NULL, "
                             "cause = NULL WHERE id = ?", (when, session_id))
            elif kind == "end":
                outcome, cause = end_fields(data)
                conn.execute("UPDATE session SET updated = ?, status = 'closed', outcome = ?, "
                             "cause = ? WHERE id = ?", (when, outcome, cause, session_id))
            else:
                conn.execute("UPDATE session SET updated = ? WHERE id = ?", (when, session_id))
        return int(seq)

    def take(self, session_id: str, holder: str, *, force: bool = False,
             lease: float | None = None) -> Holding:
        """Take session ``session_id`` for ``holder`` (see :mod:`diagnose.journal.holders`).

        Returns the holding before (whom it was taken from).

        Raises:
            SessionHeld: another holder wrote within the lease (and not ``force``).
        """
        session_id = self.resolve(session_id)
        with self._transaction() as conn:
            before = take_row(conn, str, session_id, holder, force=force, lease=lease)
        self.held[session_id] = holder
        return before

    def release(self, session_id: str) -> None:
        """Leave session ``session_id``: another may take it at once (its holder's name stays)."""
        holder = self.held.pop(session_id, None)
        if holder is not None:
            with self._transaction() as conn:
                conn.execute("UPDATE session SET held = NULL WHERE id = ? AND holder = ?",
                             (session_id, holder))

    def holding(self, session_id: str) -> Holding:
        """Who holds session ``session_id``, and when they last wrote."""
        row = self._read("SELECT holder, held FROM session WHERE id = ?",
                         (self.resolve(session_id),))
        return Holding(*row[0])

    def stored_events(self, session_id: str) -> list[tuple[Any, ...]]:
        """The rows of a session's events as stored, for a copy to another journal:
        ``(seq, uid, kind, data text, time, ranking text, format, hash)`` in order."""
        return self._read("SELECT seq, uid, kind, data, time, ranking, format, hash FROM event "
                          "WHERE session_id = ? ORDER BY seq", (self.resolve(session_id),))

    def close_session(self, session_id: str, outcome: str, cause: str | None = None) -> None:
        """Mark a session closed with its ``outcome`` (``resolved``, ``escalated``, ...) and cause.

        A session normally closes with its ``end`` event; this is for a face that ends
        one without a session object.
        """
        with self._transaction() as conn:
            cur = conn.execute("UPDATE session SET status = 'closed', outcome = ?, cause = ?, "
                               "updated = ? WHERE id = ?", (outcome, cause, now(), session_id))
            if cur.rowcount == 0:
                raise JournalError(f"no session {session_id} in the journal {self.path}")

    def load_events(self, session_id: str) -> list[Event]:
        """The events of a session in the order they were written, decoded and checked.

        Raises:
            JournalError: no such session, or an event was damaged (altered by hand)
                or written by a newer diagnose.
        """
        session_id = self.session(session_id).id
        return [self._decode(session_id, row)[0] for row in self._event_rows(session_id)]

    def _event_rows(self, session_id: str) -> list[tuple[Any, ...]]:
        return self._read(f"SELECT seq, kind, data, time, ranking, {self._format} FROM event "
                          "WHERE session_id = ? ORDER BY seq", (session_id,))

    @property
    def _format(self) -> str:
        """The column of the events' format (a journal of schema 1, read only: all format 1)."""
        return "format" if "format" in self._columns("event") else "1"

    def load_rankings(self, session_id: str) -> list[list[dict[str, Any]] | None]:
        """The ranking kept beside each event (None where none was), in event order.

        Raises:
            JournalError: an event was damaged (altered by hand).
        """
        session_id = self.resolve(session_id)
        return [self._decode(session_id, row)[1] for row in self._event_rows(session_id)]

    def verify_events(self, session_id: str | None = None) -> None:
        """Check the stored events before a session is replayed or listed.

        Every event must read back through the codec (``diagnose.events``). One
        session's events are all read and checked; for the whole journal
        (``session_id`` None) the database's own JSON functions first pick
        out the rows worth a closer look, so that a long journal lists quickly.

        Raises:
            JournalError: the first damaged event, by session and number.
        """
        select = f"SELECT session_id, seq, kind, data, time, ranking, {self._format} FROM event"
        if session_id is not None:
            session_id = self.resolve(session_id)
            rows = self._read(f"{select} WHERE session_id = ? ORDER BY seq", (session_id,))
        else:
            try:
                rows = self._conn.execute(
                    f"{select} WHERE {_SUSPECT} ORDER BY session_id, seq").fetchall()
            except sqlite3.OperationalError as exc:
                if "no such function" not in str(exc):
                    raise _translate(self.path, exc) from None
                rows = self._read(f"{select} ORDER BY session_id, seq")  # no JSON functions
            except sqlite3.Error as exc:
                raise _translate(self.path, exc) from None
        for sid, *row in rows:
            self._decode(sid, tuple(row))

    def _decode(self, session_id: str, row: tuple[Any, ...]) -> tuple[Event, Any]:
        """The event and ranking of a stored row ``(seq, kind, data, time, ranking, format)``."""
        return decode_row(self.path, session_id, row)

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

    def resolve(self, ref: str, conn: sqlite3.Connection | None = None) -> str:
        """The short id of the session ``ref`` names: its short id, UUID or UUID prefix.

        Raises:
            JournalError: no such session, or the prefix fits several.
        """
        return self._resolve(ref, conn)

    def _resolve(self, ref: str, conn: sqlite3.Connection | None = None) -> str:
        def rows(sql: str, params: tuple[Any, ...]) -> list[tuple[Any, ...]]:
            return (conn.execute(sql, params).fetchall() if conn is not None
                    else self._read(sql, params))

        ref = str(ref).strip()
        if rows("SELECT id FROM session WHERE id = ?", (ref,)):
            return ref
        prefix = uid_prefix(ref)
        found: list[tuple[Any, ...]] = []
        if prefix and "uid" in self._columns("session"):
            found = rows("SELECT id FROM session WHERE replace(uid, '-', '') LIKE ? "
                         "ORDER BY id LIMIT 3", (prefix + "%",))
        if len(found) == 1:
            return str(found[0][0])
        if found:
            raise JournalError(ambiguous(ref, [str(r[0]) for r in found]))
        latest = [s.id for s in self._sessions("", ())[:3]]
        hint = f"; latest: {', '.join(latest)}" if latest else ""
        raise JournalError(f"no session {ref} in the journal {self.path}{hint}")

    def verify_chain(self, session_id: str | None = None) -> Verified:
        """Check the hash chain of one session's events, or of every session's.

        Returns what was checked and the first break (None when every chain holds);
        see :mod:`diagnose.journal.chain`.

        Raises:
            JournalError: no such session, or a journal from before the chains.
        """
        if "hash" not in self._columns("event"):
            raise JournalError(f"the journal {self.path} is of schema {self.schema_version}, "
                               "from before the hash chains; open it once for writing (any "
                               "command that records) to upgrade it")
        if session_id is not None:
            sessions = [(self.resolve(session_id),)]
        else:
            sessions = self._read("SELECT id FROM session ORDER BY started, rowid")
        events = 0
        for (sid,) in sessions:
            uid = self._read("SELECT uid FROM session WHERE id = ?", (sid,))[0][0]
            rows = self._read("SELECT seq, kind, format, time, data, prev_hash, hash FROM event "
                              "WHERE session_id = ? ORDER BY seq", (sid,))
            broken = check_chain(sid, uid, rows)
            if broken is not None:
                return Verified(len(sessions), events, broken, session_id and sid)
            events += len(rows)
        return Verified(len(sessions), events, None, session_id and sessions[0][0])

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
            if key != "since" and key not in self._columns("session"):
                return []  # a journal from before these fields: nothing to match
            where.append({"serial": "lower(trim(s.serial)) = lower(trim(?))",
                          "since": "substr(s.started, 1, 10) >= ?"}.get(
                key, f"instr(lower(s.{key}), lower(trim(?))) > 0"))
            params.append(str(value))
        clause = f"WHERE {' AND '.join(where)}" if where else ""
        return self._sessions(clause, tuple(params))

    def _sessions(self, clause: str, params: tuple[Any, ...]) -> list[SessionInfo]:
        have = self._columns("session")
        unit = ", ".join(f"s.{k}" if k in have else "NULL"
                         for k in (*UNIT_FIELDS, "origin", "uid"))
        rows = self._read(
            "SELECT s.id, s.pack_id, s.pack_version, s.content_hash, s.mode, s.who, s.started, "
            "s.updated, s.status, s.outcome, s.cause, s.learned, "
            "(SELECT count(*) FROM event e WHERE e.session_id = s.id), "
            "(SELECT kind FROM event e WHERE e.session_id = s.id ORDER BY seq DESC LIMIT 1), "
            f"{unit} FROM session s {clause} ORDER BY s.started DESC, s.rowid DESC", params)
        return [SessionInfo(*r) for r in rows]

    def _columns(self, table: str) -> frozenset[str]:
        """The columns of ``table`` (a journal of an older schema, read only, has fewer)."""
        cache = self.__dict__.setdefault("_column_cache", {})
        if table not in cache:
            cache[table] = frozenset(r[1] for r in self._read(f"PRAGMA table_info({table})"))
        return cache[table]

    def integrity(self) -> list[str]:
        """What ``PRAGMA integrity_check`` finds (``["ok"]`` for a sound journal; up to 5 lines).

        References:
            SQLite, "PRAGMA integrity_check", https://sqlite.org/pragma.html.
        """
        try:
            return [str(r[0]) for r in self._conn.execute("PRAGMA integrity_check(5)")]
        except sqlite3.DatabaseError as exc:  # damage bad enough to stop the check itself
            if _is_busy(exc):
                raise _translate(self.path, exc) from None
            return [str(exc)]

    def backup(self, target: str | os.PathLike[str], *, force: bool = False) -> Path:
        """Copy the whole journal, consistently, to ``target`` (the online backup).

        The journal's integrity is checked first; the copy is written beside
        ``target``, checked, synced and renamed into place. An existing
        target is replaced only with ``force`` and only if it is a diagnose
        journal not in use; the journal itself, another program's database
        and a path through a symbolic link never are.

        Raises:
            InputError: the target is refused or cannot be written.
            JournalError: the journal is damaged, or the copy cannot be made.
        """
        from diagnose.paths import writable_target

        dest = writable_target(target, journal=self.path, force=force, field="FILE",
                               journal_copy=True)
        found = self.integrity()
        if found != ["ok"]:
            raise JournalError(
                f"the journal {self.path} is damaged (integrity: {'; '.join(found)}); no copy "
                "was made, as a copy of a damaged journal is no backup. Restore an earlier "
                "backup, or move the file away for repair")
        return self._copy_to(dest, field="FILE")

    def _copy_to(self, dest: Path, *, field: str) -> Path:
        """The online backup into a file beside ``dest``, renamed over it once complete."""
        from diagnose.paths import replace_atomically

        def fill(tmp: Path) -> None:
            out = sqlite3.connect(tmp, isolation_level=None)
            try:
                self._conn.backup(out)
                if [r[0] for r in out.execute("PRAGMA quick_check(1)")] != ["ok"]:
                    raise JournalError(f"the copy {dest} did not read back sound; it was not "
                                       "kept. Try again")
            finally:
                out.close()

        try:
            return replace_atomically(dest, fill, field=field)
        except sqlite3.Error as exc:
            why = ("the disk is full: the copy was not kept; free space and try again"
                   if is_disk_full(exc, dest) else str(exc))
            raise JournalError(f"cannot write the backup {dest}: {why}") from None


def _ranking_problem(ranking: Any) -> str:
    if ranking is None:
        return ""
    if not isinstance(ranking, list) or not all(
            isinstance(r, dict) and _is_number(r.get("p", 0)) for r in ranking):
        return "its ranking is not a list of causes with numbers"
    return ""


def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _damaged_event(path: Path, session_id: str, seq: Any, why: str) -> JournalError:
    return JournalError(
        f"the journal {path} is damaged: session {session_id}, event {seq}: {why} (altered by "
        "hand?); it was left as it is. Restore a backup, or mend or delete that event")


def _suspect_rows() -> str:
    """An SQL condition, quick to test, for the event rows worth checking in Python.

    It holds for text that is not a JSON object, a ranking that is not a
    JSON list, and an event of a kind in ``EVENT_KEYS`` whose text does not
    name one of its keys. It may hold for sound rows too (JSON with NaN or
    Infinity, which the database's parser refuses): every row it picks is
    checked again through the codec (``diagnose.events.decode``).
    """
    arms = ["WHEN typeof(kind) != 'text' OR typeof(time) != 'text' THEN 1",
            "WHEN NOT json_valid(data) THEN 1",
            "WHEN json_type(data) != 'object' THEN 1",
            "WHEN ranking IS NOT NULL AND NOT json_valid(ranking) THEN 1",
            "WHEN ranking IS NOT NULL AND json_type(ranking) != 'array' THEN 1",
            "WHEN kind = 'reading' AND instr(data, '\"verdict\"') = 0 "
            "AND instr(data, '\"weights\"') = 0 THEN 1",
            "WHEN kind = 'undo' THEN 1"]  # few, and the index must be a whole number
    for kind, keys in EVENT_KEYS.items():
        absent = " OR ".join(f"instr(data, '\"{k}\"') = 0" for k in keys)
        arms.append(f"WHEN kind = '{kind}' AND ({absent}) THEN 1")
    return "CASE " + " ".join(arms) + " ELSE 0 END"


_SUSPECT = _suspect_rows()


def _fill_unit_fields(conn: sqlite3.Connection) -> None:
    """Fill a migrated journal's unit fields from the identity events already recorded."""
    rows = conn.execute("SELECT session_id, data FROM event WHERE kind = 'identity' "
                        "ORDER BY session_id, seq").fetchall()
    for sid, text in rows:
        try:
            data = json.loads(text)
        except (TypeError, ValueError):
            continue  # a damaged row is named when it is read, not here
        unit = {k: str(data[k]).strip() for k in UNIT_FIELDS
                if isinstance(data, dict) and str(data.get(k) or "").strip()}
        if unit:
            conn.execute(f"UPDATE session SET {', '.join(f'{k} = ?' for k in unit)} "
                         "WHERE id = ?", (*unit.values(), sid))


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


#: The fewest hex digits of a UUID that a command takes for a session.
MIN_PREFIX = 8


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


def _fill_session_uids(conn: sqlite3.Connection) -> None:
    """Give every session of a migrated journal a UUID (schema 4)."""
    for (sid,) in conn.execute("SELECT id FROM session WHERE uid IS NULL").fetchall():
        conn.execute("UPDATE session SET uid = ? WHERE id = ?", (new_uid(), sid))


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


def _copy_chained(conn: sqlite3.Connection) -> None:
    """Copy the events into the schema 4 table with their UUIDs and chain."""
    uids = dict(conn.execute("SELECT id, uid FROM session").fetchall())
    rows = conn.execute("SELECT session_id, seq, kind, time, data, ranking, format FROM event "
                        "ORDER BY session_id, seq").fetchall()
    conn.executemany("INSERT INTO event4 (session_id, seq, uid, kind, time, data, ranking, "
                     "format, prev_hash, hash) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                     chained_rows(rows, uids))
