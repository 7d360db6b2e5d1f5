"""The journal store: sessions and events, schema versions, damaged and read-only files.

The tests of the store's guarantees run against both stores (the fixture
``journal_target``: an SQLite file, then a PostgreSQL database of a test
server of the tests' own, skipped without one). SQLite only, as they are
about the file: the path order, WAL mode and header, 0-byte files, backup,
the copy kept at a migration, damaged or foreign files, a read-only folder.
Their PostgreSQL counterparts are in ``test_journal_pg.py``.
"""

from __future__ import annotations

import ctypes
import hashlib
import json
import os
import sqlite3
import subprocess
import sys
from pathlib import Path

import pytest
from pgserver import raw_sql

from diagnose.cli import main
from diagnose.errors import JournalError
from diagnose.journal import store as store_mod
from diagnose.journal.store import APPLICATION_ID, SCHEMA_VERSION, Journal
from diagnose.journal.stores import open_journal
from diagnose.paths import journal_path, overlay_path

FIXTURES = Path(__file__).parent / "fixtures"
MINI = FIXTURES / "mini"


def mini_model(learned=None):
    from diagnose.kb.loader import load_model

    return load_model(str(MINI), learned=learned)


def minute_clock(start="2025-01-14T09:00:00+00:00", step=5):
    """Event times ``step`` minutes apart, from ``start``: reports with known minutes."""
    from datetime import datetime, timedelta

    t0 = datetime.fromisoformat(start)
    count = iter(range(10_000))
    return lambda: (t0 + timedelta(minutes=step * next(count))).isoformat()


def play(journal, model, steps, *, complaint="will_not_release", end=True, who=None,
         notes=(), identity=None, clock=None, nameplate=None):
    """A diagnosis through the session API into ``journal``: cautions acknowledged as needed."""
    from diagnose.journal.recorder import start_session

    s = start_session(journal, model, who=who, clock=clock or minute_clock())
    if identity:
        s.set_identity(**identity)
    for param, value in (nameplate or {"rated_voltage": "24 V", "rated_power": "20 W"}).items():
        s.set_nameplate(param, value)
    s.add_complaint(complaint)
    for step in steps:
        item = step.get("check") or step.get("repair")
        for c in s.pending_cautions(item):
            s.acknowledge(c.id, item)  # per card, as the shell asks
        s.apply_step(step)
    for text in notes:
        s.note(text)
    if end:
        s.end()
    return s


def _event(kind, **data):
    return {"kind": kind, "data": data, "time": "2025-01-14T09:00:00+01:00"}


def _digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.fixture()
def jpath(tmp_path):
    return tmp_path / "data" / "journal.sqlite3"


def fill(target):
    """One open and one closed session into the journal ``target``."""
    with open_journal(target) as j:
        a = j.new_session("mini-brake", "1.0.0", "h1", "site", who="ana",
                          started="2025-01-14T09:00:00+01:00")
        j.write(a, _event("complaint", complaint="will_not_release"))
        b = j.new_session("mini-brake", "1.0.0", "h1", "phone",
                          started="2025-01-14T10:00:00+01:00")
        j.write(b, _event("note", text="called back"))
        j.write(b, _event("end", result="escalated"))
    return target


def fill_ids(target):
    """The short ids of :func:`fill`'s open and closed session: ``250114-1`` and ``250114-2``
    in an SQLite file; in a team journal, made from their UUIDs (``250114-3fa2c1``)."""
    with open_journal(target, readonly=True) as j:
        return tuple(s.id for s in reversed(j.sessions()))


@pytest.fixture()
def filled(jpath):
    """An SQLite journal with one open and one closed session."""
    return fill(jpath)


@pytest.fixture()
def filled_target(journal_target):
    """A journal (SQLite, then PostgreSQL) with one open and one closed session."""
    return fill(journal_target)


# --- where it lives ---------------------------------------------------------------------


def test_path_order(monkeypatch, tmp_path):
    monkeypatch.setenv("DIAGNOSE_JOURNAL", str(tmp_path / "env.sqlite3"))
    assert journal_path(str(tmp_path / "opt.sqlite3")) == tmp_path / "opt.sqlite3"
    assert journal_path() == tmp_path / "env.sqlite3"
    monkeypatch.delenv("DIAGNOSE_JOURNAL")
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "xdg"))
    if sys.platform.startswith("linux"):
        assert journal_path() == tmp_path / "xdg" / "diagnose" / "journal.sqlite3"
        monkeypatch.setenv("XDG_DATA_HOME", "relative/not/allowed")
        assert journal_path() == Path.home() / ".local/share/diagnose/journal.sqlite3"
    assert overlay_path(tmp_path / "j.sqlite3", "p") == tmp_path / "learned" / "p.json"


# --- sessions and events ------------------------------------------------------------------


def test_new_file_is_wal_with_version(jpath):
    with Journal(jpath) as j:
        assert j.schema_version == SCHEMA_VERSION
    conn = sqlite3.connect(jpath)
    assert conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    assert conn.execute("PRAGMA application_id").fetchone()[0] == APPLICATION_ID
    conn.close()


def test_ids_are_date_and_counter(journal_target):
    """An SQLite journal counts the sessions of a day; a team journal, where journals synced
    in any order must agree, takes the first 6 hex digits of the session's UUID."""
    with open_journal(journal_target) as j:
        ids = [j.new_session("p", "1", "h", "site", started="2025-01-14T09:00:00+01:00")
               for _ in range(3)]
        other = j.new_session("p", "1", "h", "site", started="2025-02-01T09:00:00+01:00")
        uids = [j.session(i).uid for i in [*ids, other]]
    if journal_target.startswith("postgresql://"):
        assert ids == [f"250114-{u[:6]}" for u in uids[:3]]
        assert other == f"250201-{uids[3][:6]}"
    else:
        assert ids == ["250114-1", "250114-2", "250114-3"]
        assert other == "250201-1"


def test_a_team_journal_id_grows_on_a_collision(pg_url):
    with open_journal(pg_url) as j:
        a = j.new_session("p", "1", "h", "site", started="2025-01-14T09:00:00+01:00",
                          uid="abcdef12-0000-4000-8000-000000000001")
        b = j.new_session("p", "1", "h", "site", started="2025-01-14T10:00:00+01:00",
                          uid="abcdef12-0000-4000-8000-000000000002")
    assert (a, b) == ("250114-abcdef", "250114-abcdef12")


def test_events_round_trip_in_order(journal_target):
    class Ev:  # any object with kind, data and time will do
        def __init__(self, kind, data, time):
            self.kind, self.data, self.time = kind, data, time

    with open_journal(journal_target) as j:
        sid = j.new_session("p", "1", "h", "site")
        sent = [Ev("nameplate", {"param": "rated_voltage", "text": "24", "value": "24 V"},
                   "2025-01-14T09:00:00Z"),
                Ev("reading", {"check": "coil_resistance", "text": "28.8 ohm", "verdict": "ok",
                               "weights": {"ok": 1.0}, "summary": "", "figures": {}},
                   "2025-01-14T09:01:00Z"),
                Ev("note", {"text": "ünïcode <b>"}, "2025-01-14T09:02:00Z"),
                Ev("from_a_newer_program", {"what": [1, 2]}, "2025-01-14T09:03:00Z")]
        assert [j.write(sid, e) for e in sent] == [1, 2, 3, 4]
        got = j.load_events(sid)
    assert [(e.kind, e.data, e.time) for e in got] == [(e.kind, e.data, e.time) for e in sent]


def test_a_malformed_event_is_refused_before_it_is_written(journal_target):
    with open_journal(journal_target) as j:
        sid = j.new_session("p", "1", "h", "site")
        for kind, data in [("nameplate", {"values": {"rated_voltage": "24 V"}}),
                           ("repair", {"repair": "replace_fuse", "cured": "yes"}),
                           ("undo", {"index": 1.5})]:
            with pytest.raises(JournalError, match="malformed event"):
                j.write(sid, {"kind": kind, "data": data})
        assert j.load_events(sid) == [] and j.session(sid).events == 0


def test_sessions_filter_and_close(filled_target):
    a, b = fill_ids(filled_target)
    with open_journal(filled_target, readonly=True) as j:
        every = j.sessions()
        assert [s.id for s in every] == [b, a]  # newest first
        assert [s.id for s in j.sessions("open")] == [a]
        closed = j.sessions("closed")[0]
        assert (closed.outcome, closed.events, closed.last_kind) == ("escalated", 2, "end")
        assert j.session(a).who == "ana"
    with open_journal(filled_target) as j:
        j.close_session(a, "cured", cause="coil_open")
        assert j.session(a).cause == "coil_open"
        j.write(a, _event("note", text="a note after the end is kept"))
        with pytest.raises(JournalError, match="closed already"):
            j.write(a, _event("end", result="resolved"))
        with pytest.raises(JournalError, match="no session 999"):
            j.load_events("999")


def test_readonly_never_creates(journal_target):
    with pytest.raises(JournalError, match="no journal|nothing was recorded"):
        open_journal(journal_target, readonly=True)
    if journal_target.startswith("postgresql://"):
        assert raw_sql(journal_target, "SELECT count(*) FROM pg_tables "
                       "WHERE schemaname = 'public'") == [(0,)]
    else:
        assert not Path(journal_target).exists()


@pytest.mark.parametrize("command", [["sessions"], ["stats"], ["report", "1"]])
def test_reading_an_empty_file_given_as_journal(tmp_path, capsys, command):
    """A 0-byte journal reads like a missing one: no sessions (exit 0), no report (exit 1)."""
    from diagnose.cli import main

    empty = tmp_path / "empty.sqlite3"
    empty.write_bytes(b"")
    missing = tmp_path / "missing.sqlite3"
    code = main(["--journal", str(empty)] + command)
    out, err = capsys.readouterr()
    assert code == main(["--journal", str(missing)] + command)
    assert code == (1 if command[0] == "report" else 0)
    assert "Traceback" not in err and len(err.strip().splitlines()) == code
    assert empty.read_bytes() == b"" and not missing.exists()


def test_backup_is_a_full_copy(filled, tmp_path):
    with Journal(filled, readonly=True) as j:
        j.backup(tmp_path / "copy.sqlite3")
    with Journal(tmp_path / "copy.sqlite3", readonly=True) as j:
        assert len(j.sessions()) == 2


def test_migration_keeps_a_copy(filled, monkeypatch):
    extra = ("ALTER TABLE session ADD COLUMN place TEXT",)
    monkeypatch.setattr(store_mod, "_MIGRATIONS", store_mod._MIGRATIONS + (extra,))
    monkeypatch.setattr(store_mod, "SCHEMA_VERSION", SCHEMA_VERSION + 1)
    before = _digest(filled)
    with Journal(filled) as j:
        assert j.schema_version == SCHEMA_VERSION + 1
        assert len(j.sessions()) == 2
    copy = filled.with_name(f"journal.sqlite3.schema{SCHEMA_VERSION}.bak")
    with Journal(copy, readonly=True) as j:  # the kept copy is the old journal, readable
        assert len(j.sessions()) == 2
    assert _digest(filled) != before


# --- files that must be left alone ----------------------------------------------------------


def _corrupt_pages(path: Path) -> None:
    """Overwrite everything after the first page with junk: header fine, body broken."""
    with Journal(path) as j:  # enough rows for several pages
        sid = j.new_session("p", "1", "h", "site")
        for i in range(200):
            j.write(sid, _event("note", text="x" * 200 + str(i)))
    conn = sqlite3.connect(path)
    conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    conn.close()
    raw = bytearray(path.read_bytes())
    for i in range(4096, len(raw), 7):
        raw[i] = 0xA5
    path.write_bytes(bytes(raw))


def _newer(path: Path) -> None:
    with Journal(path) as j:
        j.new_session("p", "1", "h", "site")
    conn = sqlite3.connect(path)
    conn.execute(f"PRAGMA user_version = {SCHEMA_VERSION + 5}")
    conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    conn.close()


def _foreign(path: Path) -> None:
    conn = sqlite3.connect(path)
    conn.execute("CREATE TABLE photos (id INTEGER)")
    conn.commit()
    conn.close()


@pytest.mark.parametrize("spoil, message", [
    (lambda p: p.write_bytes(b"this is a text file, not a journal\n" * 20), "damaged"),
    (lambda p: p.write_bytes(b"SQLite format 3\x00" + b"\x00" * 40), "damaged"),
    (_corrupt_pages, "damaged"),
    (_newer, "newer diagnose"),
    (_foreign, "another program"),
], ids=["text", "truncated", "bad-pages", "newer", "foreign"])
def test_bad_file_is_refused_and_kept(jpath, spoil, message, capsys):
    jpath.parent.mkdir(parents=True)
    spoil(jpath)
    before = _digest(jpath)
    with pytest.raises(JournalError, match=message):
        Journal(jpath)
    with pytest.raises(JournalError, match=message), Journal(jpath, readonly=True) as j:
        j.sessions()  # corrupt pages may show only when read
    for argv in (["sessions"], ["report", "250114-1"], ["stats"]):
        assert main(["--journal", str(jpath), *argv]) == 1
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and message in err and "Traceback" not in err
    assert _digest(jpath) == before


def _read_only_child() -> None:
    """In the child: no write where the file mode forbids it, even as root."""
    if os.geteuid() == 0:
        libc = ctypes.CDLL(None, use_errno=True)
        for cap in (1, 2, 3):  # CAP_DAC_OVERRIDE, CAP_DAC_READ_SEARCH, CAP_FOWNER
            if libc.prctl(24, cap, 0, 0, 0) != 0:  # PR_CAPBSET_DROP
                os._exit(77)


_WRITER = """
import sys
from diagnose.errors import JournalError
from diagnose.journal.store import Journal
try:
    with Journal(sys.argv[1]) as j:
        j.new_session("p", "1", "h", "site")
except JournalError as exc:
    print(exc)
    sys.exit(1)
"""


def _run_restricted(code: str, *args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-c", code, *args], capture_output=True, text=True,
                          preexec_fn=_read_only_child, timeout=30, check=False)


@pytest.mark.skipif(not hasattr(os, "geteuid"), reason="POSIX file modes")
def test_read_only_location(filled, tmp_path):
    folder = filled.parent
    # Make a -wal-free file first so that only the main file is left.
    conn = sqlite3.connect(filled)
    conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    conn.close()
    before = _digest(filled)
    os.chmod(filled, 0o444)
    os.chmod(folder, 0o555)
    try:
        res = _run_restricted(_WRITER, str(filled))
        if res.returncode == 77:
            pytest.skip("cannot drop the root override here")
        assert res.returncode == 1, res.stderr
        assert "read-only" in res.stdout and "--journal" in res.stdout
        fresh = _run_restricted(_WRITER, str(folder / "sub" / "new.sqlite3"))
        assert fresh.returncode == 1 and "cannot create the folder" in fresh.stdout
        # Reading still works from a read-only place.
        reader = _run_restricted(
            "import sys; from diagnose.journal.store import Journal;"
            "print(len(Journal(sys.argv[1], readonly=True).sessions()))", str(filled))
        assert reader.stdout.strip() == "2", reader.stderr
    finally:
        os.chmod(folder, 0o755)
        os.chmod(filled, 0o644)
    assert _digest(filled) == before


# --- two writers ------------------------------------------------------------------------------

_BUSY = """
import sys
from diagnose.journal.stores import open_journal
path, who, n = sys.argv[1], sys.argv[2], int(sys.argv[3])
with open_journal(path) as j:
    sid = j.new_session("p", "1", "h", "site", who=who)
    for i in range(n):
        j.write(sid, {"kind": "note", "data": {"text": f"{who} {i}"},
                      "time": "2025-01-14T09:00:00Z"})
print(sid)
"""


def test_two_writers_lose_nothing(journal_target):
    n = 150
    procs = [subprocess.Popen([sys.executable, "-c", _BUSY, journal_target, who, str(n)],
                              stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
             for who in ("ana", "ben")]
    outs = [p.communicate(timeout=60) for p in procs]
    assert [p.returncode for p in procs] == [0, 0], outs
    ids = {o[0].strip() for o in outs}
    assert len(ids) == 2  # no id handed out twice
    with open_journal(journal_target, readonly=True) as j:
        for s in j.sessions():
            texts = [e.data["text"] for e in j.load_events(s.id)]
            assert texts == [f"{s.who} {i}" for i in range(n)]
        assert j.verify_chain().ok


_SAME = """
import sys
from diagnose.journal.stores import open_journal
path, sid, who, n = sys.argv[1], sys.argv[2], sys.argv[3], int(sys.argv[4])
with open_journal(path) as j:
    for i in range(n):
        j.write(sid, {"kind": "note", "data": {"text": f"{who} {i}"},
                      "time": "2025-01-14T09:00:00Z"})
"""


def test_two_writers_on_one_session_take_turns(journal_target):
    """Two programs appending to one session at once: every event kept, in one chain."""
    with open_journal(journal_target) as j:
        sid = j.new_session("p", "1", "h", "site")
    n = 100
    procs = [subprocess.Popen([sys.executable, "-c", _SAME, journal_target, sid, who, str(n)],
                              stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
             for who in ("ana", "ben")]
    outs = [p.communicate(timeout=60) for p in procs]
    assert [p.returncode for p in procs] == [0, 0], outs
    with open_journal(journal_target) as j:
        texts = [e.data["text"] for e in j.load_events(sid)]
        for who in ("ana", "ben"):  # each writer's events all there, in its order
            assert [t for t in texts if t.startswith(who)] == [f"{who} {i}" for i in range(n)]
        assert len(texts) == 2 * n and j.verify_chain(sid).ok
        # Two journals open on one session, writing in turn: each goes on after the other.
        with open_journal(journal_target) as other:
            for i in range(3):
                assert j.write(sid, _event("note", text=f"j {i}")) == 2 * n + 2 * i + 1
                assert other.write(sid, _event("note", text=f"o {i}")) == 2 * n + 2 * i + 2
        assert j.verify_chain(sid).ok and j.session(sid).events == 2 * n + 6


def test_events_are_json_text(journal_target):
    with open_journal(journal_target) as j:
        sid = j.new_session("p", "1", "h", "site")
        j.write(sid, _event("note", text="c", figures={"ohms": 28.8}, done={"a"}))
    ((data,),) = raw_sql(journal_target, "SELECT data FROM event")
    assert json.loads(data) == {"text": "c", "figures": {"ohms": 28.8}, "done": ["a"]}


# --- the commands ------------------------------------------------------------------------------


def test_cli_sessions_resume_backup(filled_target, tmp_path, capsys):
    base = ["--journal", str(filled_target)]
    a, b = fill_ids(filled_target)
    assert main([*base, "sessions", "--json"]) == 0
    assert [s["id"] for s in json.loads(capsys.readouterr().out)] == [b, a]
    assert main([*base, "sessions", "--open", "--json"]) == 0
    assert [s["id"] for s in json.loads(capsys.readouterr().out)] == [a]
    assert main([*base, "sessions", "--closed"]) == 0
    out = capsys.readouterr().out
    assert b in out and "escalated" in out and a not in out
    assert main([*base, "resume", b]) == 1
    assert "closed" in capsys.readouterr().err
    assert main([*base, "resume", "nope"]) == 1
    assert "no session nope" in capsys.readouterr().err
    if filled_target.startswith("postgresql://"):
        assert main([*base, "backup", str(tmp_path / "copy.sqlite3")]) == 1
        assert "pg_dump" in capsys.readouterr().err
        return
    assert main([*base, "backup", str(tmp_path / "copy.sqlite3")]) == 0
    with Journal(tmp_path / "copy.sqlite3", readonly=True) as j:
        assert len(j.sessions()) == 2
    empty = ["--journal", str(tmp_path / "none.sqlite3")]
    assert main([*empty, "sessions"]) == 0
    assert "no sessions" in capsys.readouterr().out
    assert not (tmp_path / "none.sqlite3").exists()
