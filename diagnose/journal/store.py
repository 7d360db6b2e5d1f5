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

import errno
import json
import os
import shutil
import sqlite3
import time as _time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from diagnose.errors import JournalError
from diagnose.journal import tables as schema
from diagnose.journal.tables import (
    SCHEMA_VERSION,
    UNIT_FIELDS,
    SessionInfo,
    TableStore,
    copy_chained,
    entry,
    fill_session_uids,
    new_uid,
    normal_uid,
    now,
    suspect_condition,
)
from diagnose.paths import APPLICATION_ID
from diagnose.text import storable

#: What other modules took from here before diagnose.journal.tables held it.
__all__ = ["SCHEMA_VERSION", "UNIT_FIELDS", "SessionInfo", "Journal", "inspect", "now",
           "is_disk_full", "DISK_FULL"]
HEADER = b"SQLite format 3\x00"
BUSY_TIMEOUT_MS = 5000
_RETRIES = 4  # on top of busy_timeout: a writer waits up to about 20 s in all
_LOW_SPACE = 1 << 20  # bytes free below which an I/O error is taken for a full disk
DISK_FULL = "the disk is full: nothing more was written; free space and resume"

# _MIGRATIONS[n] takes a journal from schema n to n + 1 (the texts are those of
# diagnose.journal.tables, as the team journal's). Append only; never edit one that has
# shipped.
_MIGRATIONS: tuple[tuple[str | Callable[[Any], None], ...], ...] = (
    (
        f"CREATE TABLE session ({schema.SESSION_1}{schema.END_TABLE}",
        f"CREATE TABLE event ({schema.EVENT_1}{schema.END_TABLE} WITHOUT ROWID",
        "CREATE INDEX session_by_pack ON session (pack_id, status)",
    ),
    schema.STEP_2,
    schema.STEP_3,
    (  # 4: a UUID for every session and event; the events hash-chained (diagnose.journal.chain)
        "ALTER TABLE session ADD COLUMN uid TEXT",
        lambda conn: fill_session_uids(conn, str),
        "CREATE UNIQUE INDEX session_by_uid ON session (uid)",
        f"CREATE TABLE event4 ({schema.EVENT_4}{schema.END_TABLE} WITHOUT ROWID",
        # The events are copied into the new table with their uids and chain, never updated.
        lambda conn: copy_chained(conn, str),
        "DROP TABLE event",
        "ALTER TABLE event4 RENAME TO event",
    ),
    schema.STEP_5,
)



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


class Journal(TableStore):
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
        self.label = str(self.path)
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
        self._writable()
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
        item = entry(event, ranking, uid)
        with self._transaction() as conn:
            seq = self._append(conn, session_id, item)[1]
        return seq

    def _close(self) -> None:
        self._conn.close()

    def _has(self, table: str, column: str) -> bool:
        return column in self._columns(table)

    @property
    def _format(self) -> str:  # type: ignore[override]
        """The column of the events' format (a journal of schema 1, read only: all format 1)."""
        return "format" if "format" in self._columns("event") else "1"

    def _suspect_rows(self, select: str) -> list[tuple[Any, ...]]:
        try:
            return self._conn.execute(
                f"{select} WHERE {_SUSPECT} ORDER BY session_id, seq").fetchall()
        except sqlite3.OperationalError as exc:
            if "no such function" not in str(exc):
                raise _translate(self.path, exc) from None
            return self._read(f"{select} ORDER BY session_id, seq")  # no JSON functions
        except sqlite3.Error as exc:
            raise _translate(self.path, exc) from None


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




# An SQL condition, quick to test, for the event rows worth checking in Python: text
# that is not a JSON object, a ranking that is not a JSON list (the JSON functions of
# SQLite), and what diagnose.journal.tables.suspect_condition adds for every store.
_SUSPECT = suspect_condition(
    ["typeof(kind) != 'text' OR typeof(time) != 'text'",
     "NOT json_valid(data)",
     "json_type(data) != 'object'",
     "ranking IS NOT NULL AND NOT json_valid(ranking)",
     "ranking IS NOT NULL AND json_type(ranking) != 'array'"],
    lambda key: f"instr(data, '\"{key}\"') = 0")


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
