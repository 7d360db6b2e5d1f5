"""The team journal: the journal's sessions and events on a PostgreSQL server.

``PgJournal(url)`` is the store of :mod:`diagnose.journal.store` with the same
public methods, the same schema versions and the same guarantees, kept in a
PostgreSQL database (through psycopg 3, imported only when a
``postgresql://`` journal is opened):

* **Every event is committed before ``write`` returns**: the connection is
  in autocommit, and an event is one statement (which locks the session's
  row, checks, inserts the event and updates the session) committed
  synchronously by the server, or, when that statement finds the session
  changed by another writer, one short transaction (see ``PgJournal.write``).
  Two writers of one session take turns on its row lock, and the primary key
  (session, seq) refuses a second event of one number: the chain stays whole.
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
n + 1, with the texts of :mod:`diagnose.journal.tables`; the few words that
differ are here, the numbers keep in step). They run in one
transaction, under an advisory lock, so that two programs opening a new
journal at once create it once.

References:
    PostgreSQL 15 documentation: "Explicit Locking" (row locks, advisory
    locks), "Transaction Isolation" (Read Committed), "WITH Queries"
    (data-modifying statements in WITH), "INSERT" (ON CONFLICT), "Privileges",
    "The Information Schema"; psycopg 3 documentation, "Transactions
    management", "Pipeline mode support".
"""

from __future__ import annotations

import re
from collections.abc import Callable, Iterator
from contextlib import contextmanager, nullcontext
from typing import Any
from urllib.parse import unquote

from diagnose.errors import JournalError
from diagnose.journal import tables as schema
from diagnose.journal.tables import (
    SCHEMA_VERSION,
    Entry,
    TableStore,
    copy_chained,
    entry,
    fill_session_uids,
    new_uid,
    normal_uid,
    now,
    suspect_condition,
)
from diagnose.paths import journal_path, mask_url
from diagnose.text import storable

#: The application marker in ``diagnose_meta``: a database without it is another program's.
APPLICATION = "diagnose-journal"
#: The first key of the advisory locks this program takes (the second names what is locked).
_LOCK_SPACE = 0x64676E  # "dgn"
_MIGRATE_LOCK = 1
CONNECT_TIMEOUT = 10  # seconds, unless the URL says connect_timeout
_INDENT = "\n            "


def _pg(sql: str) -> str:
    """A statement with ``?`` placeholders (diagnose.journal.holders) in psycopg's form."""
    return sql.replace("?", "%s")


def _pg_locked(sql: str) -> str:
    """As :func:`_pg`, a SELECT locking the rows it reads until the transaction ends."""
    return _pg(sql) + (" FOR UPDATE" if sql.startswith("SELECT") else "")


# _MIGRATIONS[n] takes a journal from schema n to n + 1, as store._MIGRATIONS does for
# SQLite, with the same texts (diagnose.journal.tables). Append only; never edit one that
# has shipped.
_MIGRATIONS: tuple[tuple[str | Callable[[Any], None], ...], ...] = (
    (
        f"CREATE TABLE diagnose_meta ({_INDENT}key TEXT PRIMARY KEY,{_INDENT}"
        f"value TEXT NOT NULL{schema.END_TABLE}",
        f"INSERT INTO diagnose_meta (key, value) VALUES ('application', '{APPLICATION}')",
        f"CREATE TABLE session ({schema.SESSION_1},{_INDENT}"
        f"created TIMESTAMPTZ NOT NULL DEFAULT clock_timestamp(){schema.END_TABLE}",
        f"CREATE TABLE event ({schema.EVENT_1}{schema.END_TABLE}",
        "CREATE INDEX session_by_pack ON session (pack_id, status)",
    ),
    schema.STEP_2,
    schema.STEP_3,
    (  # 4: a UUID for every session and event; the events hash-chained
        "ALTER TABLE session ADD COLUMN uid TEXT",
        lambda cur: fill_session_uids(cur, _pg),
        "ALTER TABLE session ALTER COLUMN uid SET NOT NULL",
        "CREATE UNIQUE INDEX session_by_uid ON session (uid)",
        f"CREATE TABLE event4 ({schema.EVENT_4}{schema.END_TABLE}",
        lambda cur: copy_chained(cur, _pg),  # the events copied with their uids and chain
        "DROP TABLE event",
        "ALTER TABLE event4 RENAME TO event",
    ),
    schema.STEP_5,
)


# --- the statements of the dialect -----------------------------------------------------------


_NEW_SESSION = ("INSERT INTO session (id, pack_id, pack_version, content_hash, mode, who, "
                "started, updated, learned, origin, uid) "
                "VALUES (%s, %s, %s, %s, %s, %s, %s, %s, %s, %s, %s) "
                "ON CONFLICT DO NOTHING RETURNING id")

# The rows verify_events looks at closely (diagnose.journal.tables.suspect_condition), with
# the data and ranking parsed once a row (d, r); a text that is not JSON stops the query.
_SUSPECT = suspect_condition(
    ["jsonb_typeof(d) <> 'object'", "r IS NOT NULL AND jsonb_typeof(r) <> 'array'"],
    lambda key: f"(d -> '{key}') IS NULL")


def _append_sql(sets: list[str], *, first: bool, held: bool, end: bool) -> str:
    """The one statement that appends an event after a known last one (``PgJournal.write``).

    It locks the session's row, then inserts the event only when the event
    before is the one expected (number and hash; the first event of a session
    needs none), the holder is still this program (``held``) and an ``end``
    does not end a closed session; the primary key (session, seq) refuses a
    second event of the same number. The session's row is updated (``sets``)
    when the event went in. It returns the event's number, or no row.
    """
    guards = ["true"]
    if not first:
        guards.append("EXISTS (SELECT 1 FROM event WHERE session_id = s.id "
                      "AND seq = %(last)s AND hash = %(prev)s)")
    if held:
        guards.append("(s.holder IS NULL OR s.holder = %(me)s)")
    if end:
        guards.append("s.status <> 'closed'")
    assigned = ", ".join(f"{k} = %(set_{k})s" for k in sets)
    return ("WITH s AS (SELECT id, status, holder FROM session WHERE id = %(sid)s FOR UPDATE), "
            "e AS (INSERT INTO event (session_id, seq, uid, kind, time, data, ranking, format, "
            "prev_hash, hash) SELECT s.id, %(seq)s, %(uid)s, %(kind)s, %(time)s, %(data)s, "
            "%(ranking)s, %(format)s, %(prev)s, %(hash)s FROM s "
            f"WHERE {' AND '.join(guards)} RETURNING seq), "
            f"u AS (UPDATE session SET {assigned} FROM e WHERE session.id = %(sid)s) "
            "SELECT seq FROM e")


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


class PgJournal(TableStore):
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
        # What this program wrote last to each session (seq, hash), and the sessions' UUIDs:
        # the next event's link, for writes in one statement (see write).
        self._last: dict[str, tuple[int, str | None]] = {}
        self._uids: dict[str, str] = {}
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
        """One write transaction, committed when the block ends (before the caller goes on).

        In pipeline mode where the client library has it: BEGIN goes with the first
        statement, and the statements whose results are not read go with the COMMIT.
        """
        import psycopg

        self._writable()
        piped = self._conn.pipeline() if psycopg.Pipeline.is_supported() else nullcontext()
        try:
            with piped, self._conn.transaction(), self._conn.cursor() as cur:
                yield cur
        except psycopg.Error as exc:
            raise self._translate(exc) from None

    def _read(self, sql: str, params: tuple[Any, ...] = ()) -> list[tuple[Any, ...]]:
        import psycopg

        try:
            return self._conn.execute(sql, params).fetchall()
        except psycopg.Error as exc:
            raise self._translate(exc) from None

    # -- the dialect (diagnose.journal.tables.TableStore) ---------------------------------
    _ARRIVAL = "created"
    # Ties broken by the UUID, not the order of arrival: a synced journal's order does not
    # depend on which laptop synced first.
    _TIES = "s.uid DESC"
    _INSTR = "strpos"

    def _q(self, sql: str) -> str:
        return _pg(sql)

    def _locked(self, sql: str) -> str:
        return _pg_locked(sql)

    def _close(self) -> None:
        self._conn.close()

    def _locked_last(self, cur: Any, session_id: str) -> tuple[Any, ...] | None:
        row = super()._locked_last(cur, session_id)
        if row is not None:
            self._uids[session_id] = row[1]  # for the next write in one statement
        return row

    def _apply(self, sql: str, params: tuple[Any, ...]) -> int:
        """One statement, committed by itself (the connection is in autocommit)."""
        import psycopg

        self._writable()
        try:
            return int(self._conn.execute(_pg(sql), params).rowcount)
        except psycopg.Error as exc:
            raise self._translate(exc) from None

    def _suspect_rows(self, select: str) -> list[tuple[Any, ...]]:
        import psycopg

        try:
            return self._conn.execute(f"{select} e, LATERAL (SELECT e.data::jsonb AS d, "
                                      f"e.ranking::jsonb AS r) j WHERE ({_SUSPECT}) = 1 "
                                      "ORDER BY session_id, seq").fetchall()
        except psycopg.errors.DataError:  # a text that is not JSON: every row is read
            return self._read(f"{select} ORDER BY session_id, seq")
        except psycopg.Error as exc:
            raise self._translate(exc) from None

    # -- public API (as diagnose.journal.store.Journal) ------------------------------------
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
        Each try is one statement that inserts the row unless its id or UUID is
        taken (the database's unique keys decide, so writers need no lock).
        """
        when = started or now()
        day = when[2:10].replace("-", "")
        uid = new_uid() if uid is None else normal_uid(uid)
        self._writable()
        digits = uid.replace("-", "")
        row = (pack_id, pack_version, content_hash, mode,
               None if who is None else storable(who), when, when, learned, origin, uid)
        for n in range(6, 33, 2):
            made = self._read(_NEW_SESSION, (f"{day}-{digits[:n]}", *row))
            if made:
                sid = str(made[0][0])
                self._last[sid], self._uids[sid] = (0, None), uid
                return sid
            there = self._read("SELECT id FROM session WHERE uid = %s", (uid,))
            if there:  # recorded before (a copy run again): kept as it is
                return str(there[0][0])
        raise JournalError(f"no free id for session {uid} in the journal {self.label}")

    def write(self, session_id: str, event: Any, *, ranking: Any = None,
              uid: str | None = None) -> int:
        """Append one event to a session, committed before this returns (see ``Journal.write``).

        A team journal's writes are many and short, so most are one statement
        (:func:`_append_sql`): this program remembers the number and hash of the
        last event it wrote to each session, and while that is still the
        session's last event the statement locks the session's row, checks the
        holder, inserts the event and updates the session in one round trip,
        committed by itself. Otherwise (the first write after a resume, another
        writer in between, a UUID there already, a holder changed, a second end)
        nothing is written by it, and one transaction reads the last event under
        the row lock, checks and appends (:meth:`TableStore._append`).

        Raises:
            JournalError: unknown session, a second end, or the server refuses.
        """
        item = entry(event, ranking, uid)
        self._writable()
        seq = self._append_at_once(session_id, item)
        if seq is None:
            with self._transaction() as cur:
                session_id, seq, digest = self._append(cur, session_id, item)
            if digest is not None:
                self._last[session_id] = (seq, digest)
        return seq

    def _append_at_once(self, session_id: str, item: Entry) -> int | None:
        """Append ``item`` in one statement after the last event this program wrote there;
        its number, or None when that was not the session's last event (nothing written)."""
        import psycopg

        known, session_uid = self._last.get(session_id), self._uids.get(session_id)
        if known is None or session_uid is None:
            return None
        last, prev = known
        seq = last + 1
        digest = item.digest(session_uid, seq, prev)
        sets = self._session_sets(session_id, item)
        params: dict[str, Any] = {
            "sid": session_id, "seq": seq, "last": last, "uid": item.uid, "kind": item.kind,
            "time": item.time, "data": item.text, "ranking": item.ranking,
            "format": item.format, "prev": prev, "hash": digest,
            "me": self.held.get(session_id), **{f"set_{k}": v for k, v in sets.items()}}
        sql = _append_sql(list(sets), first=last == 0, held=session_id in self.held,
                          end=item.kind == "end")
        try:
            row = self._conn.execute(sql, params).fetchone()
        except psycopg.errors.UniqueViolation:  # another writer was first, or a copy again
            row = None
        except psycopg.Error as exc:
            raise self._translate(exc) from None
        if row is None:
            self._last.pop(session_id, None)
            return None
        self._last[session_id] = (seq, digest)
        return seq

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
