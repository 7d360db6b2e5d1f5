"""The team journal: the journal's sessions and events on a PostgreSQL server.

``PgJournal(url)`` is the store of :mod:`diagnose.journal.store` with the same
public methods, the same schema versions and the same guarantees, kept in a
PostgreSQL database (through psycopg 3, imported only when a
``postgresql://`` journal is opened):

* **Every event is committed before ``write`` returns**: one short
  transaction an event (the connection is in autocommit; each write is an
  explicit transaction, committed synchronously by the server).
* **A damaged, foreign or newer journal is refused** with ``JournalError``
  and left as it is: the database's schema version and an application marker
  are kept in the table ``diagnose_meta`` (``application`` =
  ``diagnose-journal``, ``schema`` = the version). A database holding other
  tables and no marker is another program's; a marker of a newer schema is
  a newer diagnose's.
* **Nothing is overwritten**: events are only inserted, never updated or
  deleted; each carries the hash of the event before it and its own
  (:mod:`diagnose.journal.chain`). The session row is updated (its status,
  outcome, unit and time of the last event), as in the SQLite journal.
* **Least privileges**: writing needs ``SELECT, INSERT`` on ``event``,
  ``SELECT, INSERT, UPDATE`` on ``session`` and ``SELECT`` on
  ``diagnose_meta``; reading needs ``SELECT`` on the three. Upgrading the
  schema needs the tables' owner. See the README, "A team journal on
  PostgreSQL".
* **No credentials are shown or stored**: the URL is shown with its password
  masked (:func:`diagnose.paths.mask_url`), and the server's error messages,
  which may repeat the connection string, are masked the same way.

Migrations mirror the SQLite ones (``_MIGRATIONS[n]`` takes schema n to
n + 1; the SQL differs, the numbers keep in step). They run in one
transaction, under an advisory lock, so that two programs opening a new
journal at once create it once.

References:
    PostgreSQL 15 documentation: "Explicit Locking" (row locks, advisory
    locks), "Privileges", "The Information Schema"; psycopg 3 documentation,
    "Transactions management".
"""

from __future__ import annotations

import json
import re
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import Any
from urllib.parse import unquote

from diagnose.errors import JournalError
from diagnose.events import Event
from diagnose.journal.chain import Verified, check_chain, event_hash
from diagnose.journal.holders import Holding, check_holder, take_row, utc_now
from diagnose.journal.store import (
    SCHEMA_VERSION,
    STATUSES,
    UNIT_FIELDS,
    SessionInfo,
    ambiguous,
    chained_rows,
    decode_row,
    end_fields,
    event_fields,
    new_uid,
    normal_uid,
    now,
    to_jsonable,
    uid_prefix,
)
from diagnose.paths import journal_path, mask_url
from diagnose.text import storable

#: The application marker in ``diagnose_meta``: a database without it is another program's.
APPLICATION = "diagnose-journal"
#: The first key of the advisory locks this program takes (the second names what is locked).
_LOCK_SPACE = 0x64676E  # "dgn"
_MIGRATE_LOCK = 1
CONNECT_TIMEOUT = 10  # seconds, unless the URL says connect_timeout


def _pg(sql: str) -> str:
    """A statement with ``?`` placeholders (diagnose.journal.holders) in psycopg's form."""
    return sql.replace("?", "%s")


def _pg_locked(sql: str) -> str:
    """As :func:`_pg`, a SELECT locking the rows it reads until the transaction ends."""
    return _pg(sql) + (" FOR UPDATE" if sql.startswith("SELECT") else "")


def _fill_session_uids(cur: Any) -> None:
    for (sid,) in cur.execute("SELECT id FROM session WHERE uid IS NULL").fetchall():
        cur.execute("UPDATE session SET uid = %s WHERE id = %s", (new_uid(), sid))


def _copy_chained(cur: Any) -> None:
    uids = dict(cur.execute("SELECT id, uid FROM session").fetchall())
    rows = cur.execute("SELECT session_id, seq, kind, time, data, ranking, format FROM event "
                       "ORDER BY session_id, seq").fetchall()
    cur.executemany("INSERT INTO event4 (session_id, seq, uid, kind, time, data, ranking, "
                    "format, prev_hash, hash) VALUES (%s, %s, %s, %s, %s, %s, %s, %s, %s, %s)",
                    chained_rows(rows, uids))


# _MIGRATIONS[n] takes a journal from schema n to n + 1, as store._MIGRATIONS does for
# SQLite. Append only; never edit one that has shipped.
_MIGRATIONS: tuple[tuple[str | Callable[[Any], None], ...], ...] = (
    (
        """CREATE TABLE diagnose_meta (
            key TEXT PRIMARY KEY,
            value TEXT NOT NULL
        )""",
        f"INSERT INTO diagnose_meta (key, value) VALUES ('application', '{APPLICATION}')",
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
            learned TEXT,
            created TIMESTAMPTZ NOT NULL DEFAULT clock_timestamp()
        )""",
        """CREATE TABLE event (
            session_id TEXT NOT NULL REFERENCES session(id),
            seq INTEGER NOT NULL,
            kind TEXT NOT NULL,
            time TEXT NOT NULL,
            data TEXT NOT NULL,
            ranking TEXT,
            PRIMARY KEY (session_id, seq)
        )""",
        "CREATE INDEX session_by_pack ON session (pack_id, status)",
    ),
    (  # 2: the version of each event's data
        "ALTER TABLE event ADD COLUMN format INTEGER NOT NULL DEFAULT 1",
    ),
    (  # 3: the unit of a session as searchable fields; where an imported session came from
        "ALTER TABLE session ADD COLUMN site TEXT",
        "ALTER TABLE session ADD COLUMN machine TEXT",
        "ALTER TABLE session ADD COLUMN axis TEXT",
        "ALTER TABLE session ADD COLUMN serial TEXT",
        "CREATE INDEX session_by_serial ON session (serial)",
        "CREATE INDEX session_by_site ON session (site, machine)",
        "ALTER TABLE session ADD COLUMN origin TEXT",
        "CREATE INDEX session_by_origin ON session (origin)",
    ),
    (  # 4: a UUID for every session and event; the events hash-chained
        "ALTER TABLE session ADD COLUMN uid TEXT",
        _fill_session_uids,
        "ALTER TABLE session ALTER COLUMN uid SET NOT NULL",
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
        )""",
        _copy_chained,  # the events copied with their uids and chain, never updated
        "DROP TABLE event",
        "ALTER TABLE event4 RENAME TO event",
    ),
    (  # 5: who holds a session, and the time of their last write (diagnose.journal.holders)
        "ALTER TABLE session ADD COLUMN holder TEXT",
        "ALTER TABLE session ADD COLUMN held TEXT",
    ),
)


# --- messages that never show a password ----------------------------------------------------


def _password(url: str) -> str:
    found = re.search(r"://[^:/?#@\s]*:([^@/\n]*)@", url)
    return found.group(1) if found else ""


def sanitise(text: str, url: str) -> str:
    """``text`` (a server or driver message) with the password of ``url`` masked, one line.

    >>> sanitise('unexpected spaces found in "s3c retpw"\\n', "postgresql://a:s3c retpw@h/d")
    'unexpected spaces found in "***"'
    """
    text = mask_url(text)
    secret = _password(url)
    for form in {secret, unquote(secret)}:
        if len(form) >= 3:
            text = text.replace(form, "***")
    lines = [ln.strip() for ln in text.strip().splitlines() if ln.strip()]
    return lines[0] if lines else "unknown error"


def _reason(exc: BaseException, url: str) -> str:
    """Why a connection failed, in a few words (the password never among them)."""
    text = sanitise(str(exc), url)
    low = text.lower()
    if "connection refused" in low:
        return "connection refused"
    if "timeout" in low:
        return "no answer from the server (timed out)"
    if "failed to resolve host" in low or "could not translate host" in low:
        return "the server's name is not known"
    return re.sub(r"^(connection failed: )?(connection to server at [^:]*failed: )?", "",
                  text) or text


def _connect(url: str, label: str) -> Any:
    try:
        import psycopg
        from psycopg.conninfo import conninfo_to_dict
    except ImportError:
        raise JournalError(f"the journal {label} is on a PostgreSQL server, which needs the "
                           "psycopg package: pip install 'diagnose[team]'") from None
    try:
        given = conninfo_to_dict(url)
    except psycopg.Error as exc:
        raise JournalError(f"the journal URL {label} is not valid: "
                           f"{sanitise(str(exc), url)}") from None
    extra: dict[str, Any] = {"autocommit": True}
    if "connect_timeout" not in given:
        extra["connect_timeout"] = CONNECT_TIMEOUT
    if "application_name" not in given:
        extra["application_name"] = "diagnose"
    try:
        return psycopg.connect(url, **extra)
    except psycopg.Error as exc:
        raise JournalError(f"cannot reach the journal at {label}: {_reason(exc, url)}") from None


class PgJournal:
    """The journal in a PostgreSQL database: sessions and their events.

    ``PgJournal(url)`` connects, checks the database and creates or upgrades
    its tables; ``PgJournal(url, readonly=True)`` only reads and never
    creates. ``path`` is the local folder's stand-in (attachments and learned
    priors are kept beside it, see :func:`diagnose.paths.journal_path`);
    ``label`` is the URL with its password masked, for every message.
    """

    def __init__(self, url: str, *, readonly: bool = False, empty_ok: bool = False) -> None:
        self.url = url
        self.label = mask_url(url)
        self.path = journal_path(url)
        self.readonly = readonly
        self.held: dict[str, str] = {}  # the sessions this program holds: id -> holder
        self._conn = _connect(url, self.label)
        try:
            version = self.inspect()
            self.empty = version == 0
            if readonly and self.empty and not empty_ok:
                raise JournalError(f"the journal {self.label} is empty: nothing was recorded "
                                   "there yet")
            if not readonly and version < SCHEMA_VERSION:
                self._migrate()
        except BaseException:
            self._conn.close()
            raise

    def __str__(self) -> str:
        return self.label

    # -- checking and creating -------------------------------------------------------------
    def inspect(self) -> int:
        """The schema version of the database (0: nothing recorded yet); nothing is written.

        Raises:
            JournalError: another program's database, a newer diagnose's, or damaged.
        """
        tables = {r[0] for r in self._read(
            "SELECT c.relname FROM pg_catalog.pg_class c JOIN pg_catalog.pg_namespace n "
            "ON n.oid = c.relnamespace WHERE n.nspname = current_schema() "
            "AND c.relkind IN ('r', 'p', 'v', 'm', 'f')")}
        if not tables:
            return 0
        if "diagnose_meta" not in tables:
            raise self._damaged("another program's database: it holds tables but no "
                                "diagnose marker")
        meta = dict(self._read("SELECT key, value FROM diagnose_meta"))
        if meta.get("application") != APPLICATION:
            raise self._damaged("another program's database")
        try:
            version = int(meta.get("schema", "0"))
        except ValueError:
            raise self._damaged("its schema version is not a number") from None
        if version > SCHEMA_VERSION:
            raise JournalError(
                f"the journal {self.label} was written by a newer diagnose (schema {version}; "
                f"this program knows up to {SCHEMA_VERSION}); it was left as it is. Upgrade "
                "diagnose, or give another journal with --journal")
        if version and not {"session", "event"} <= tables:
            raise self._damaged("its tables are missing")
        return version

    def _damaged(self, why: str) -> JournalError:
        return JournalError(f"the journal {self.label} is damaged or not a diagnose journal "
                            f"({why}); it was left as it is. Give another database with "
                            "--journal")

    def _migrate(self) -> None:
        with self._transaction() as cur:
            cur.execute("SELECT pg_advisory_xact_lock(%s, %s)", (_LOCK_SPACE, _MIGRATE_LOCK))
            current = self.inspect()  # another program may have done it while we waited
            if current >= SCHEMA_VERSION:
                return
            for step in _MIGRATIONS[current:SCHEMA_VERSION]:
                for statement in step:
                    if callable(statement):
                        statement(cur)
                    else:
                        cur.execute(statement)
            cur.execute("INSERT INTO diagnose_meta (key, value) VALUES ('schema', %s) "
                        "ON CONFLICT (key) DO UPDATE SET value = EXCLUDED.value",
                        (str(SCHEMA_VERSION),))

    # -- talking to the server -------------------------------------------------------------
    def _translate(self, exc: BaseException) -> JournalError:
        import psycopg

        text = sanitise(str(exc), self.url)
        if isinstance(exc, psycopg.errors.InsufficientPrivilege):
            return JournalError(f"the journal {self.label} refused: {text} (see the least "
                                "privileges in the README, \"A team journal on PostgreSQL\")")
        if isinstance(exc, psycopg.errors.ReadOnlySqlTransaction):
            return JournalError(f"the journal {self.label} is read-only here: {text}")
        if isinstance(exc, psycopg.OperationalError):
            return JournalError(f"lost the journal at {self.label}: {text}; what was "
                                "acknowledged is kept, try again")
        return JournalError(f"journal {self.label}: {text}")

    @contextmanager
    def _transaction(self) -> Iterator[Any]:
        """One write transaction, committed when the block ends (before the caller goes on)."""
        import psycopg

        if self.readonly:
            raise JournalError(f"the journal {self.label} is open for reading only")
        try:
            with self._conn.transaction(), self._conn.cursor() as cur:
                yield cur
        except psycopg.Error as exc:
            raise self._translate(exc) from None

    def _read(self, sql: str, params: tuple[Any, ...] = ()) -> list[tuple[Any, ...]]:
        import psycopg

        try:
            return self._conn.execute(sql, params).fetchall()
        except psycopg.Error as exc:
            raise self._translate(exc) from None

    # -- public API (as diagnose.journal.store.Journal) ------------------------------------
    def close(self) -> None:
        """Release the sessions this program holds (leaving them), then close."""
        for sid in list(self.held):
            try:
                self.release(sid)
            except JournalError:
                pass  # the lease runs out instead
        self._conn.close()

    def __enter__(self) -> PgJournal:  # noqa: PYI034 (no subclasses)
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    @property
    def schema_version(self) -> int:
        rows = self._read("SELECT value FROM diagnose_meta WHERE key = 'schema'")
        return int(rows[0][0]) if rows else 0

    def new_session(self, pack_id: str, pack_version: str, content_hash: str, mode: str,
                    who: str | None = None, *, started: str | None = None,
                    learned: str | None = None, wanted: str | None = None,
                    origin: str | None = None, uid: str | None = None) -> str:
        """Record a new open session; return its short id (see ``Journal.new_session``).

        In a team journal the short id is made from the session's UUID, not
        from the order of arrival, so that journals synced into it in any order
        give every session the same id: the day it started and the first 6 hex
        digits of its UUID (``250114-3fa2c1``), 2 digits more while that is taken
        (for one session in millions). ``wanted`` is therefore not used here.
        """
        when = started or now()
        day = when[2:10].replace("-", "")
        uid = new_uid() if uid is None else normal_uid(uid)
        with self._transaction() as cur:
            # One writer at a time hands out the ids of a day.
            cur.execute("SELECT pg_advisory_xact_lock(%s, hashtext(%s))", (_LOCK_SPACE, day))
            there = cur.execute("SELECT id FROM session WHERE uid = %s", (uid,)).fetchone()
            if there is not None:
                return str(there[0])
            digits = uid.replace("-", "")
            for n in range(6, 33, 2):
                sid = f"{day}-{digits[:n]}"
                if cur.execute("SELECT 1 FROM session WHERE id = %s", (sid,)).fetchone() is None:
                    break
            cur.execute(
                "INSERT INTO session (id, pack_id, pack_version, content_hash, mode, who, "
                "started, updated, learned, origin, uid) "
                "VALUES (%s, %s, %s, %s, %s, %s, %s, %s, %s, %s, %s)",
                (sid, pack_id, pack_version, content_hash, mode,
                 None if who is None else storable(who), when, when, learned, origin, uid))
        return sid

    def write(self, session_id: str, event: Any, *, ranking: Any = None,
              uid: str | None = None) -> int:
        """Append one event to a session, committed before this returns (see ``Journal.write``).

        Raises:
            JournalError: unknown session, a second end, or the server refuses.
        """
        kind, data, when, fmt = event_fields(event)
        payload = storable(json.dumps(data, ensure_ascii=False, separators=(",", ":")))
        ranked = None if ranking is None else json.dumps(to_jsonable(ranking),
                                                         separators=(",", ":"))
        given, uid = uid is not None, new_uid() if uid is None else normal_uid(uid)
        # The session's row lock (one writer at a time appends to a session) and its last
        # event, in one round trip: a team journal's writes are many and short.
        locked = ("SELECT s.status, s.uid, s.holder, e.seq, e.hash FROM session s LEFT JOIN "
                  "LATERAL (SELECT seq, hash FROM event WHERE session_id = s.id ORDER BY seq "
                  "DESC LIMIT 1) e ON true WHERE s.id = %s FOR UPDATE OF s")
        with self._transaction() as cur:
            row = cur.execute(locked, (session_id,)).fetchone()
            if row is None:
                session_id = self._resolve(session_id, cur)
                row = cur.execute(locked, (session_id,)).fetchone()
            there = given and cur.execute("SELECT seq FROM event WHERE uid = %s",
                                          (uid,)).fetchone()
            if there:  # written before (a copy run again): nothing to add
                return int(there[0])
            if session_id in self.held:
                check_holder(session_id, self.held[session_id], row[2])
            if row[0] == "closed" and kind == "end":
                raise JournalError(f"session {session_id} is closed already")
            seq, prev = (1, None) if row[3] is None else (row[3] + 1, row[4])
            digest = event_hash(row[1], seq, kind, fmt=fmt, time=when, data=json.loads(payload),
                                prev=prev)
            cur.execute("INSERT INTO event (session_id, seq, uid, kind, time, data, ranking, "
                        "format, prev_hash, hash) "
                        "VALUES (%s, %s, %s, %s, %s, %s, %s, %s, %s, %s)",
                        (session_id, seq, uid, kind, when, payload, ranked, fmt, prev, digest))
            sets: dict[str, Any] = {k: str(data[k]).strip() for k in UNIT_FIELDS
                                    if kind == "identity" and str(data.get(k) or "").strip()}
            sets["updated"] = when
            if kind == "reopen":
                sets.update(status="open", outcome=None, cause=None)
            elif kind == "end":
                outcome, cause = end_fields(data)
                sets.update(status="closed", outcome=outcome, cause=cause)
            if session_id in self.held:  # the holder's write renews the hold
                sets.update(holder=self.held[session_id], held=utc_now())
            cur.execute(f"UPDATE session SET {', '.join(f'{k} = %s' for k in sets)} "
                        "WHERE id = %s", (*sets.values(), session_id))
        return int(seq)

    def take(self, session_id: str, holder: str, *, force: bool = False,
             lease: float | None = None) -> Holding:
        """Take session ``session_id`` for ``holder`` (see ``Journal.take``).

        Raises:
            SessionHeld: another holder wrote within the lease (and not ``force``).
        """
        session_id = self.resolve(session_id)
        with self._transaction() as cur:
            before = take_row(cur, _pg_locked, session_id, holder, force=force, lease=lease)
        self.held[session_id] = holder
        return before

    def release(self, session_id: str) -> None:
        """Leave session ``session_id`` (see ``Journal.release``)."""
        holder = self.held.pop(session_id, None)
        if holder is not None:
            with self._transaction() as cur:
                cur.execute("UPDATE session SET held = NULL WHERE id = %s AND holder = %s",
                            (session_id, holder))

    def holding(self, session_id: str) -> Holding:
        """Who holds session ``session_id``, and when they last wrote."""
        row = self._read("SELECT holder, held FROM session WHERE id = %s",
                         (self.resolve(session_id),))
        return Holding(*row[0])

    def stored_events(self, session_id: str) -> list[tuple[Any, ...]]:
        """The rows of a session's events as stored (see ``Journal.stored_events``)."""
        return self._read("SELECT seq, uid, kind, data, time, ranking, format, hash FROM event "
                          "WHERE session_id = %s ORDER BY seq", (self.resolve(session_id),))

    def close_session(self, session_id: str, outcome: str, cause: str | None = None) -> None:
        """Mark a session closed with its ``outcome`` and cause (see ``Journal.close_session``)."""
        with self._transaction() as cur:
            cur.execute("UPDATE session SET status = 'closed', outcome = %s, cause = %s, "
                        "updated = %s WHERE id = %s", (outcome, cause, now(), session_id))
            if cur.rowcount == 0:
                raise JournalError(f"no session {session_id} in the journal {self.label}")

    def load_events(self, session_id: str) -> list[Event]:
        """The events of a session in order, decoded and checked (see ``Journal.load_events``)."""
        session_id = self.session(session_id).id
        return [self._decode(session_id, row)[0] for row in self._event_rows(session_id)]

    def load_rankings(self, session_id: str) -> list[list[dict[str, Any]] | None]:
        """The ranking kept beside each event, in event order."""
        session_id = self.resolve(session_id)
        return [self._decode(session_id, row)[1] for row in self._event_rows(session_id)]

    def _event_rows(self, session_id: str) -> list[tuple[Any, ...]]:
        return self._read("SELECT seq, kind, data, time, ranking, format FROM event "
                          "WHERE session_id = %s ORDER BY seq", (session_id,))

    def verify_events(self, session_id: str | None = None) -> None:
        """Check the stored events read back through the codec (see ``Journal.verify_events``).

        Raises:
            JournalError: the first damaged event, by session and number.
        """
        select = "SELECT session_id, seq, kind, data, time, ranking, format FROM event"
        if session_id is not None:
            rows = self._read(f"{select} WHERE session_id = %s ORDER BY seq",
                              (self.resolve(session_id),))
        else:
            rows = self._read(f"{select} ORDER BY session_id, seq")
        for sid, *row in rows:
            self._decode(sid, tuple(row))

    def _decode(self, session_id: str, row: tuple[Any, ...]) -> tuple[Event, Any]:
        return decode_row(self.label, session_id, row)

    def session(self, session_id: str) -> SessionInfo:
        """One session's metadata, by its short id, UUID or a unique UUID prefix."""
        found = self._sessions("WHERE s.id = %s", (session_id,))
        if not found:
            found = self._sessions("WHERE s.id = %s", (self.resolve(session_id),))
        return found[0]

    def resolve(self, ref: str) -> str:
        """The short id of the session ``ref`` names: its short id, UUID or UUID prefix."""
        return self._resolve(ref, None)

    def _resolve(self, ref: str, cur: Any) -> str:
        def rows(sql: str, params: tuple[Any, ...]) -> list[tuple[Any, ...]]:
            return cur.execute(sql, params).fetchall() if cur is not None else self._read(
                sql, params)

        ref = str(ref).strip()
        if rows("SELECT id FROM session WHERE id = %s", (ref,)):
            return ref
        prefix = uid_prefix(ref)
        found: list[tuple[Any, ...]] = []
        if prefix:
            found = rows("SELECT id FROM session WHERE replace(uid, '-', '') LIKE %s "
                         "ORDER BY id LIMIT 3", (prefix + "%",))
        if len(found) == 1:
            return str(found[0][0])
        if found:
            raise JournalError(ambiguous(ref, [str(r[0]) for r in found]))
        latest = [s.id for s in self._sessions("", ())[:3]]
        hint = f"; latest: {', '.join(latest)}" if latest else ""
        raise JournalError(f"no session {ref} in the journal {self.label}{hint}")

    def sessions(self, status: str | None = None, pack_id: str | None = None,
                 **unit: str | None) -> list[SessionInfo]:
        """Sessions, newest first, filtered as ``Journal.sessions`` does."""
        if status is not None and status not in STATUSES:
            raise ValueError(f"status must be one of {STATUSES}, not {status!r}")
        where, params = [], []
        if status:
            where.append("s.status = %s")
            params.append(status)
        if pack_id:
            where.append("s.pack_id = %s")
            params.append(pack_id)
        for key, value in unit.items():
            if value is None or not str(value).strip():
                continue
            if key not in (*UNIT_FIELDS, "since"):
                raise ValueError(f"no filter {key!r}")
            where.append({"serial": "lower(trim(s.serial)) = lower(trim(%s))",
                          "since": "substr(s.started, 1, 10) >= %s"}.get(
                key, f"strpos(lower(s.{key}), lower(trim(%s))) > 0"))
            params.append(str(value))
        clause = f"WHERE {' AND '.join(where)}" if where else ""
        return self._sessions(clause, tuple(params))

    def _sessions(self, clause: str, params: tuple[Any, ...]) -> list[SessionInfo]:
        rows = self._read(
            "SELECT s.id, s.pack_id, s.pack_version, s.content_hash, s.mode, s.who, s.started, "
            "s.updated, s.status, s.outcome, s.cause, s.learned, "
            "(SELECT count(*) FROM event e WHERE e.session_id = s.id), "
            "(SELECT kind FROM event e WHERE e.session_id = s.id ORDER BY seq DESC LIMIT 1), "
            "s.site, s.machine, s.axis, s.serial, s.origin, s.uid "
            # Ties broken by the UUID, not the order of arrival: a synced journal's order
            # does not depend on which laptop synced first.
            f"FROM session s {clause} ORDER BY s.started DESC, s.uid DESC", params)
        return [SessionInfo(*r[:12], int(r[12]), *r[13:]) for r in rows]

    def verify_chain(self, session_id: str | None = None) -> Verified:
        """Check the hash chain of one session's events, or of every session's."""
        if session_id is not None:
            sessions = [(self.resolve(session_id),)]
        else:
            sessions = self._read("SELECT id FROM session ORDER BY started, created")
        events = 0
        for (sid,) in sessions:
            uid = self._read("SELECT uid FROM session WHERE id = %s", (sid,))[0][0]
            rows = self._read("SELECT seq, kind, format, time, data, prev_hash, hash FROM event "
                              "WHERE session_id = %s ORDER BY seq", (sid,))
            broken = check_chain(sid, uid, rows)
            if broken is not None:
                return Verified(len(sessions), events, broken, session_id and sid)
            events += len(rows)
        return Verified(len(sessions), events, None, session_id and sessions[0][0])

    def integrity(self) -> list[str]:
        """``["ok"]`` when the journal's tables can be read (the server keeps its own pages)."""
        self._read("SELECT count(*) FROM event")
        return ["ok"]

    def backup(self, target: Any, *, force: bool = False) -> Any:
        """Refused: a team journal is backed up on its server.

        Raises:
            JournalError: always, saying how.
        """
        raise JournalError(f"the journal {self.label} is on a PostgreSQL server: back it up "
                           "there (pg_dump); `diagnose backup` copies an SQLite journal")
