"""Ids that never collide and an append-only record, in both stores.

Every session and event has a UUID besides its short id; commands take the
short id, the UUID or a unique prefix of it. Each event carries the hash of
the one before it in its session; `diagnose verify` finds an event altered
or taken out behind the program's back (by SQL here) and names it. Every
test runs against an SQLite file and a PostgreSQL database (``journal_target``).
"""

from __future__ import annotations

import json
import re
import sqlite3
import uuid
from pathlib import Path

import pytest
from pgserver import is_url, raw_sql
from test_journal_store import FIXTURES, _event, fill, mini_model, play

from diagnose.cli import main
from diagnose.errors import JournalError
from diagnose.journal import store as store_mod
from diagnose.journal.chain import check_chain, event_hash
from diagnose.journal.stores import open_journal

SRC = Path(__file__).resolve().parent.parent / "diagnose"


def _uids(target):
    return raw_sql(target, "SELECT uid FROM event ORDER BY session_id, seq")


def _ids(target):
    """The short ids of fill's two sessions, oldest first: ``250114-1`` and ``250114-2`` in an
    SQLite file, made from their UUIDs in a team journal (``250114-3fa2c1``)."""
    with open_journal(target, readonly=True) as j:
        return tuple(s.id for s in reversed(j.sessions()))


# --- ids ---------------------------------------------------------------------------------------


def test_every_session_and_event_has_a_uuid(journal_target):
    fill(journal_target)
    with open_journal(journal_target, readonly=True) as j:
        sessions = j.sessions()
    uids = [s.uid for s in sessions] + [u for (u,) in _uids(journal_target)]
    assert len(uids) == 2 + 3 and len(set(uids)) == len(uids)
    assert all(str(uuid.UUID(u)) == u for u in uids)  # lower case, with hyphens
    if is_url(journal_target):  # a team journal's short ids are made from the UUIDs
        assert [s.id for s in sessions] == [f"250114-{s.uid[:6]}" for s in sessions]
    else:
        assert [s.id for s in sessions] == ["250114-2", "250114-1"]  # the short ids stay


def test_a_session_is_found_by_short_id_uuid_or_prefix(journal_target, capsys):
    fill(journal_target)
    first, _ = _ids(journal_target)
    with open_journal(journal_target, readonly=True) as j:
        uid = j.session(first).uid
        for ref in (first, uid, uid.upper(), uid[:8], uid.replace("-", "")[:12]):
            assert j.session(ref).id == first, ref
            assert len(j.load_events(ref)) == 1
        with pytest.raises(JournalError, match="no session 250114-9"):
            j.session("250114-9")
        with pytest.raises(JournalError, match="no session"):
            j.session(uid[:7])  # fewer than 8 hex digits: not taken as a prefix
    base = ["--journal", journal_target]
    for command in (["report", uid[:8], "--format", "json"], ["export", uid], ["verify", uid]):
        assert main([*base, *command]) == 0, capsys.readouterr().err
        out = capsys.readouterr().out
        assert first in out, command


def test_a_prefix_that_fits_several_sessions_is_refused(journal_target, monkeypatch):
    ids = iter(["aaaaaaaa-0000-4000-8000-000000000001", "aaaaaaaa-0000-4000-8000-000000000002"])
    with open_journal(journal_target) as j:
        for _ in range(2):
            j.new_session("p", "1", "h", "site", uid=next(ids))
        with pytest.raises(JournalError, match="fits several sessions"):
            j.session("aaaaaaaa")
        assert j.session("aaaaaaaa000040008000000000000002").uid.endswith("2")


def test_a_uuid_written_again_changes_nothing(journal_target):
    """What a copy between journals needs: a session or event with a known UUID is a no-op."""
    sid_uid, ev_uid = str(uuid.uuid4()), str(uuid.uuid4())
    with open_journal(journal_target) as j:
        sid = j.new_session("p", "1", "h", "site", uid=sid_uid,
                            started="2025-01-14T09:00:00+01:00")
        assert j.new_session("p", "1", "h", "site", uid=sid_uid) == sid
        assert j.write(sid, _event("note", text="once"), uid=ev_uid) == 1
        assert j.write(sid, _event("note", text="once"), uid=ev_uid) == 1
        assert j.write(sid, _event("note", text="next")) == 2
        assert len(j.sessions()) == 1 and j.session(sid).events == 2
        assert j.verify_chain().ok


# --- the chain ---------------------------------------------------------------------------------


def test_the_chain_follows_the_recipe(journal_target):
    """Recompute every hash by the module docstring's recipe, by hand."""
    import hashlib

    fill(journal_target)
    rows = raw_sql(journal_target, "SELECT s.uid, e.seq, e.kind, e.format, e.time, e.data, "
                   "e.prev_hash, e.hash FROM event e JOIN session s ON s.id = e.session_id "
                   "WHERE s.id = ? ORDER BY e.seq", (_ids(journal_target)[1],))
    prev = None
    for suid, seq, kind, fmt, time, data, prev_hash, digest in rows:
        text = json.dumps({"session": suid, "seq": seq, "kind": kind, "format": fmt,
                           "time": time, "data": json.loads(data), "prev": prev},
                          sort_keys=True, separators=(",", ":"), ensure_ascii=False)
        assert prev_hash == prev
        assert digest == hashlib.sha256(text.encode("utf-8")).hexdigest()
        prev = digest


@pytest.mark.parametrize("alter, seq, why", [
    ("UPDATE event SET data = '{\"text\":\"called back twice\"}' WHERE seq = 1",
     1, "hash does not match"),
    ("UPDATE event SET time = '2025-01-15T09:00:00+01:00' WHERE seq = 2", 2, "hash does not"),
    ("DELETE FROM event WHERE seq = 1", 2, "missing"),
    ("UPDATE event SET data = 'not json' WHERE seq = 2", 2, "not JSON"),
], ids=["data", "time", "deleted", "not-json"])
def test_verify_finds_an_altered_event_and_names_it(journal_target, capsys, alter, seq, why):
    fill(journal_target)
    first, second = _ids(journal_target)
    base = ["--journal", journal_target]
    assert main([*base, "verify"]) == 0
    out = capsys.readouterr().out
    assert out.count("\n") == 1 and "2 session(s), 3 event(s): every chain is whole" in out
    raw_sql(journal_target, alter + " AND session_id = ?", (second,))
    assert main([*base, "verify"]) == 1
    out = capsys.readouterr().out
    assert out.count("\n") == 1 and "Traceback" not in out
    assert f"session {second}, event {seq}:" in out and why in out
    assert main([*base, "verify", first]) == 0  # the other session's chain holds
    assert f"session {first}, 1 event(s): its chain is whole" in capsys.readouterr().out
    assert main([*base, "verify", second]) == 1


def test_verify_of_an_empty_journal(journal_target, capsys):
    assert main(["--journal", journal_target, "verify"]) == 0
    assert "nothing to verify" in capsys.readouterr().out


def test_check_chain_names_an_event_that_does_not_link():
    uid = str(uuid.uuid4())
    h1 = event_hash(uid, 1, "note", fmt=3, time="t", data={"text": "a"})
    h2 = event_hash(uid, 2, "note", fmt=3, time="t", data={"text": "b"}, prev=h1)
    rows = [(1, "note", 3, "t", '{"text":"a"}', None, h1),
            (2, "note", 3, "t", '{"text":"b"}', "0" * 64, h2)]
    broken = check_chain("250114-1", uid, rows)
    assert broken is not None and (broken.seq, "link" in broken.why) == (2, True)


def test_the_program_never_updates_or_deletes_an_event():
    """Events are only inserted: no UPDATE or DELETE of the event table in the program."""
    pattern = re.compile(r"\b(UPDATE|DELETE\s+FROM)\s+event\b", re.IGNORECASE)
    found = [f"{p.relative_to(SRC)}:{n}" for p in SRC.rglob("*.py")
             for n, line in enumerate(p.read_text(encoding="utf-8").splitlines(), 1)
             if pattern.search(line)]
    assert found == []


# --- a journal of schema 3 gets its ids and chain --------------------------------------------


def _schema3_sqlite(path: Path) -> None:
    conn = sqlite3.connect(path, isolation_level=None)
    for step in store_mod._MIGRATIONS[:3]:
        for statement in step:
            conn.execute(statement)
    conn.execute(f"PRAGMA application_id = {store_mod.APPLICATION_ID}")
    conn.execute("PRAGMA user_version = 3")
    conn.execute("INSERT INTO session (id, pack_id, pack_version, content_hash, mode, started, "
                 "updated) VALUES ('250114-1', 'p', '1', 'h', 'site', 't', 't')")
    for seq, text in enumerate(["a", "b", "c"], 1):
        conn.execute("INSERT INTO event (session_id, seq, kind, time, data, format) "
                     "VALUES ('250114-1', ?, 'note', '2025-01-14T09:00:00Z', ?, 1)",
                     (seq, json.dumps({"text": text})))
    conn.close()


def test_a_schema_3_journal_gets_uuids_and_its_chain(tmp_path):
    path = tmp_path / "journal.sqlite3"
    _schema3_sqlite(path)
    with open_journal(path) as j:
        assert j.schema_version == store_mod.SCHEMA_VERSION
        assert uuid.UUID(j.session("250114-1").uid)
        assert [e.text for e in j.load_events("250114-1")] == ["a", "b", "c"]
        assert str(j.verify_chain()) == "1 session(s), 3 event(s): every chain is whole"
        j.write("250114-1", _event("note", text="d"))
        assert j.verify_chain().ok
    assert (tmp_path / "journal.sqlite3.schema3.bak").exists()
    assert len({u for (u,) in _uids(path)}) == 4


def test_a_schema_3_team_journal_gets_uuids_and_its_chain(pg_url):
    import psycopg

    from diagnose.journal import pgstore

    with psycopg.connect(pg_url, autocommit=True) as conn:
        for step in pgstore._MIGRATIONS[:3]:
            for statement in step:
                conn.execute(statement)
        conn.execute("INSERT INTO diagnose_meta VALUES ('schema', '3')")
        conn.execute("INSERT INTO session (id, pack_id, pack_version, content_hash, mode, "
                     "started, updated) VALUES ('250114-1', 'p', '1', 'h', 'site', 't', 't')")
        for seq in (1, 2):
            conn.execute("INSERT INTO event (session_id, seq, kind, time, data, format) "
                         "VALUES ('250114-1', %s, 'note', 't', %s, 1)",
                         (seq, json.dumps({"text": str(seq)})))
    with open_journal(pg_url) as j:
        assert j.schema_version == store_mod.SCHEMA_VERSION
        assert [e.text for e in j.load_events("250114-1")] == ["1", "2"]
        assert str(j.verify_chain()) == "1 session(s), 2 event(s): every chain is whole"


# --- a whole diagnosis -------------------------------------------------------------------------


def test_a_recorded_diagnosis_verifies_and_resumes_by_uuid(journal_target, tmp_path, capsys):
    model = mini_model()
    with open_journal(journal_target) as j:
        s = play(j, model, [{"check": "coil_resistance", "answer": "28.8 ohm"}], end=False)
        uid = j.session(s.session_id).uid
    assert main(["--journal", journal_target, "verify"]) == 0
    capsys.readouterr()
    answers = tmp_path / "rest.yaml"
    answers.write_text("steps:\n  - repair: replace_coil\n    cured: true\n", encoding="utf-8")
    code = main(["--journal", journal_target, "--packs", str(FIXTURES), "run", "--resume",
                 uid[:8], "--answers", str(answers), "--json"])
    out = capsys.readouterr()
    assert code == 0, out.err
    assert json.loads(out.out)["session"] == s.session_id
    assert main(["--journal", journal_target, "verify", s.session_id]) == 0
    assert "its chain is whole" in capsys.readouterr().out


def test_targets_are_told_apart():
    from diagnose.paths import is_journal_url

    assert is_url("postgresql://x/y") and is_journal_url("postgres://x/y")
    assert not is_journal_url("journal.sqlite3")
