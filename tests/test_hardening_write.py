"""Writes that never surprise, and the journal's edge cases.

Every file the program writes (``-o`` of report, kb graph, kb schema, kb
analyze; ``backup``; ``kb new``) is written beside its target and renamed
into place; an existing file needs --force; the journal in use, a database
file and a path through a symbolic link are refused even with it. The
journal reads a 0-byte file like a missing one, refuses a schema version set
back by hand, names an event altered by hand, and says so when the disk is full.
"""

from __future__ import annotations

import errno
import hashlib
import os
import shutil
import sqlite3
from pathlib import Path

import pytest
from test_journal_store import FIXTURES, MINI, mini_model, play

from diagnose.cli import main
from diagnose.errors import InputError, JournalError
from diagnose.journal import store as store_mod
from diagnose.journal.store import DISK_FULL, Journal
from diagnose.paths import writable_target

STEPS = [{"check": "listen_click", "answer": "silent"},
         {"check": "coil_resistance", "answer": "OL"},
         {"repair": "replace_coil", "cured": True}]
OLD = "an earlier file, kept as it was\n"


def _digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.fixture()
def journal(tmp_path):
    """A journal with one closed and one open session: (path, closed id, open id)."""
    path = tmp_path / "data" / "journal.sqlite3"
    model = mini_model()
    with Journal(path) as j:
        closed = play(j, model, STEPS, who="Ana").session_id
        open_ = play(j, model, STEPS[:1], end=False).session_id
    return path, closed, open_


@pytest.fixture()
def cli(journal, capsys):
    """`diagnose --journal J --packs FIXTURES ...` in this process: (exit code, stdout, stderr)."""

    def run(*argv: str) -> tuple[int, str, str]:
        code = main(["--journal", str(journal[0]), "--packs", str(FIXTURES), *argv])
        out, err = capsys.readouterr()
        return code, out, err

    return run


def _one_line(err: str) -> bool:
    return err.count("\n") == 1 and "Traceback" not in err


# The commands that write with -o, each as the words before "-o FILE".
WRITERS = {
    "report": lambda sid: ["report", sid],
    "kb graph": lambda sid: ["kb", "graph", str(MINI)],
    "kb schema": lambda sid: ["kb", "schema"],
}


@pytest.fixture(params=list(WRITERS))
def writer(request, journal):
    """The argv of one -o command, up to -o."""
    return WRITERS[request.param](journal[1])


# --- -o: existing files, --force, atomic replacement ------------------------------------------


def test_an_existing_file_is_kept_without_force(cli, writer, tmp_path):
    out = tmp_path / "out.txt"
    out.write_text(OLD)
    code, _, err = cli(*writer, "-o", str(out))
    assert code == 2 and _one_line(err) and "exists already" in err and "--force" in err
    assert out.read_text() == OLD


def test_force_replaces_it_at_once(cli, writer, tmp_path):
    out = tmp_path / "out.txt"
    out.write_text(OLD)
    os.chmod(out, 0o640)
    code, _, err = cli(*writer, "-o", str(out), "--force")
    assert code == 0, err
    assert out.read_text() != OLD and out.stat().st_size > 0
    assert oct(out.stat().st_mode & 0o777) == oct(0o640)  # the file's permissions are kept
    assert sorted(p.name for p in tmp_path.iterdir()) == ["data", "out.txt"]


def test_a_new_file_is_written(cli, writer, tmp_path):
    out = tmp_path / "new.txt"
    code, screen, err = cli(*writer, "-o", str(out))
    assert code == 0, err
    code, screen, _ = cli(*writer)
    assert out.read_text(encoding="utf-8") == screen


@pytest.mark.parametrize("failing", ["replace", "fsync"])
def test_a_failed_write_leaves_the_file_and_no_temporary(cli, writer, tmp_path, monkeypatch,
                                                         failing):
    out = tmp_path / "out.txt"
    out.write_text(OLD)

    def boom(*args, **kwargs):
        raise OSError(errno.EIO, "Input/output error")

    monkeypatch.setattr(os, failing, boom)
    code, _, err = cli(*writer, "-o", str(out), "--force")
    monkeypatch.undo()
    assert code == 2 and _one_line(err) and "cannot write" in err
    assert out.read_text() == OLD
    assert sorted(p.name for p in tmp_path.iterdir()) == ["data", "out.txt"]


def test_a_full_disk_while_writing_says_so(cli, writer, tmp_path, monkeypatch):
    out = tmp_path / "out.txt"
    out.write_text(OLD)

    def full(*args, **kwargs):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(os, "fsync", full)
    code, _, err = cli(*writer, "-o", str(out), "--force")
    monkeypatch.undo()
    assert code == 2 and _one_line(err) and "the disk is full" in err
    assert out.read_text() == OLD
    assert sorted(p.name for p in tmp_path.iterdir()) == ["data", "out.txt"]


# --- -o: never the journal, a database or a symbolic link -------------------------------------


def test_never_onto_the_journal(cli, writer, journal, tmp_path):
    path = journal[0]
    before = _digest(path)
    twin = tmp_path / "twin.sqlite3"
    os.link(path, twin)  # the same file by another name
    dotted = path.parent / ".." / "data" / path.name
    for target in (path, dotted, twin, Path(f"{path}-wal")):
        code, _, err = cli(*writer, "-o", str(target), "--force")
        assert code == 2 and _one_line(err) and "journal in use" in err, target
    assert _digest(path) == before
    with Journal(path, readonly=True) as j:
        assert len(j.sessions()) == 2


def test_never_onto_the_journal_not_written_yet(capsys, tmp_path):
    target = tmp_path / "later.sqlite3"
    code = main(["--journal", str(target), "kb", "schema", "-o", str(target), "--force"])
    assert code == 2 and "journal in use" in capsys.readouterr().err
    assert not target.exists()


def test_never_onto_a_database(cli, writer, tmp_path):
    other = tmp_path / "photos.db"
    conn = sqlite3.connect(other)
    conn.execute("CREATE TABLE photos (id INTEGER)")
    conn.commit()
    conn.close()
    before = _digest(other)
    code, _, err = cli(*writer, "-o", str(other), "--force")
    assert code == 2 and _one_line(err) and "database" in err
    assert _digest(other) == before


def test_never_through_a_symbolic_link(cli, writer, tmp_path):
    real = tmp_path / "real.txt"
    real.write_text(OLD)
    (tmp_path / "link.txt").symlink_to(real)
    (tmp_path / "realdir").mkdir()
    (tmp_path / "linkdir").symlink_to(tmp_path / "realdir")
    (tmp_path / "dangling.txt").symlink_to(tmp_path / "nowhere.txt")
    for target in ("link.txt", "linkdir/new.txt", "dangling.txt"):
        code, _, err = cli(*writer, "-o", str(tmp_path / target), "--force")
        assert code == 2 and _one_line(err) and "symbolic link" in err, target
    assert real.read_text() == OLD
    assert not any((tmp_path / "realdir").iterdir()) and not (tmp_path / "nowhere.txt").exists()


def test_never_onto_a_folder(cli, writer, tmp_path):
    code, _, err = cli(*writer, "-o", str(tmp_path), "--force")
    assert code == 2 and _one_line(err) and "folder" in err


def test_kb_analyze_writes_through_the_same_guard(cli, tmp_path):
    out = tmp_path / "analysis.md"
    out.write_text(OLD)
    argv = ("kb", "analyze", str(MINI), "--no-effort")
    code, _, err = cli(*argv, "-o", str(out))
    assert code == 2 and "exists already" in err and out.read_text() == OLD
    code, _, err = cli(*argv, "-o", str(out), "--force")
    assert code == 0, err
    assert out.read_text() != OLD
    code, _, err = cli(*argv, "--json", "-o", str(out))
    assert code == 2 and "exists already" in err


@pytest.mark.parametrize("argv", [["report"], ["kb", "graph"], ["kb", "schema"],
                                  ["kb", "analyze"], ["backup"]])
def test_force_is_in_the_help(argv, capsys):
    with pytest.raises(SystemExit):
        main([*argv, "--help"])
    text = " ".join(capsys.readouterr().out.split())
    assert "--force" in text and "symbolic link" in text


# --- kb new ----------------------------------------------------------------------------------


def test_kb_new_refuses_a_symbolic_link_and_writes_at_once(tmp_path, capsys):
    pack = tmp_path / "pack"
    shutil.copytree(MINI, pack)
    elsewhere = tmp_path / "elsewhere.yaml"
    elsewhere.write_text("causes: []\n")
    (pack / "linked.yaml").symlink_to(elsewhere)
    code = main(["kb", "new", "cause", "a", "--pack", str(pack), "--file", "linked.yaml"])
    err = capsys.readouterr().err
    assert code == 2 and _one_line(err) and "symbolic link" in err
    assert elsewhere.read_text() == "causes: []\n"
    names = sorted(p.name for p in pack.iterdir())
    assert main(["kb", "new", "cause", "b", "--pack", str(pack)]) == 0
    assert sorted(p.name for p in pack.iterdir()) == sorted([*names, "causes-b.yaml"])


# --- backup ----------------------------------------------------------------------------------


def test_backup_says_integrity_and_keeps_an_existing_journal(cli, journal, tmp_path):
    target = tmp_path / "copy.sqlite3"
    code, out, err = cli("backup", str(target))
    assert code == 0, err
    assert "integrity: ok" in out
    with Journal(target, readonly=True) as j:
        assert len(j.sessions()) == 2
    other = tmp_path / "other.sqlite3"
    with Journal(other) as j:
        j.new_session("p", "1", "h", "site")
    before = _digest(other)
    code, _, err = cli("backup", str(other))
    assert code == 2 and _one_line(err) and "--force" in err
    assert _digest(other) == before
    code, out, err = cli("backup", str(other), "--force")
    assert code == 0, err
    with Journal(other, readonly=True) as j:
        assert len(j.sessions()) == 2
    assert not [p.name for p in tmp_path.iterdir() if p.name.endswith(".tmp")]


def test_backup_never_onto_the_source_a_link_or_a_database(cli, journal, tmp_path):
    path = journal[0]
    before = _digest(path)
    (tmp_path / "link.sqlite3").symlink_to(path)
    foreign = tmp_path / "photos.db"
    conn = sqlite3.connect(foreign)
    conn.execute("CREATE TABLE photos (id INTEGER)")
    conn.commit()
    conn.close()
    for target, why in ((path, "journal in use"), (tmp_path / "link.sqlite3", "symbolic link"),
                        (foreign, "database")):
        code, _, err = cli("backup", str(target), "--force")
        assert code == 2 and _one_line(err) and why in err, target
    assert _digest(path) == before


def _damage_in_the_middle(path: Path) -> None:
    """Fill the journal with pages, then overwrite one page in the middle with junk."""
    with Journal(path) as j:
        sid = j.new_session("p", "1", "h", "site")
        for i in range(200):
            j.write(sid, {"kind": "note", "data": {"text": "x" * 200 + str(i)},
                          "time": "2025-01-14T09:00:00Z"})
    conn = sqlite3.connect(path)
    conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    page = conn.execute("PRAGMA page_size").fetchone()[0]
    pages = conn.execute("PRAGMA page_count").fetchone()[0]
    conn.close()
    with open(path, "r+b") as fh:
        fh.seek(page * (pages // 2))
        fh.write(b"\xa5" * page)


def test_backup_refuses_a_damaged_journal(tmp_path, capsys):
    path = tmp_path / "journal.sqlite3"
    _damage_in_the_middle(path)
    before = _digest(path)
    target = tmp_path / "copy.sqlite3"
    code = main(["--journal", str(path), "backup", str(target)])
    err = capsys.readouterr().err
    assert code == 1 and _one_line(err) and "damaged" in err and "integrity" in err
    assert not target.exists() and _digest(path) == before
    assert all(p.name.startswith("journal.sqlite3") for p in tmp_path.iterdir())


def test_writable_target_lets_a_backup_replace_only_a_journal(tmp_path):
    with Journal(tmp_path / "old.sqlite3") as j:
        j.new_session("p", "1", "h", "site")
    with pytest.raises(InputError, match="database"):
        writable_target(tmp_path / "old.sqlite3", journal=tmp_path / "j.sqlite3", force=True)
    assert writable_target(tmp_path / "old.sqlite3", journal=tmp_path / "j.sqlite3",
                           force=True, journal_copy=True) == tmp_path / "old.sqlite3"


# --- the journal's edge cases ------------------------------------------------------------------


def _alter(path: Path, sid: str, seq: int, data: str) -> None:
    conn = sqlite3.connect(path)
    conn.execute("UPDATE event SET data = ? WHERE session_id = ? AND seq = ?", (data, sid, seq))
    conn.commit()
    conn.close()


@pytest.mark.parametrize("data, why", [
    ('{"complaint": "will_not_rel', "not JSON"),
    ("[1, 2]", "not a JSON object"),
    ("{}", "has no complaint"),
], ids=["invalid-json", "not-an-object", "missing-key"])
@pytest.mark.parametrize("which", ["closed", "open"])
def test_an_event_altered_by_hand_is_named(cli, journal, data, why, which):
    path, closed, open_ = journal
    sid = closed if which == "closed" else open_
    with Journal(path, readonly=True) as j:
        seq = 1 + [e.kind for e in j.load_events(sid)].index("complaint")
    _alter(path, sid, seq, data)
    before = _digest(path)
    commands = [("sessions",), ("report", sid)] + ([("resume", sid)] if which == "open" else [])
    for argv in commands:
        code, _, err = cli(*argv)
        assert code == 1 and _one_line(err), (argv, err)
        assert f"session {sid}, event {seq}" in err and why in err and "damaged" in err
    assert _digest(path) == before


def test_a_damaged_ranking_is_named(cli, journal):
    path, closed, _ = journal
    conn = sqlite3.connect(path)
    conn.execute("UPDATE event SET ranking = '{\"cause\": 1' WHERE session_id = ? AND seq = 4",
                 (closed,))
    conn.commit()
    conn.close()
    code, _, err = cli("report", closed)
    assert code == 1 and _one_line(err) and f"session {closed}, event 4" in err


@pytest.mark.parametrize("command", [["sessions"], ["stats"], ["sessions", "--json"]])
def test_a_zero_byte_journal_reads_like_a_missing_one(tmp_path, capsys, command):
    empty = tmp_path / "empty.sqlite3"
    empty.write_bytes(b"")
    assert main(["--journal", str(empty), *command]) == 0
    out, err = capsys.readouterr()
    missing = tmp_path / "missing.sqlite3"
    assert main(["--journal", str(missing), *command]) == 0
    assert err == "" and out == capsys.readouterr().out.replace(str(missing), str(empty))
    assert empty.read_bytes() == b"" and not missing.exists()


def test_a_zero_byte_journal_takes_a_new_journal(tmp_path):
    empty = tmp_path / "empty.sqlite3"
    empty.write_bytes(b"")
    with Journal(empty) as j:
        sid = j.new_session("p", "1", "h", "site")
    with Journal(empty, readonly=True) as j:
        assert [s.id for s in j.sessions()] == [sid]


def test_a_schema_version_set_back_is_damaged_not_empty(journal, capsys):
    path = journal[0]
    conn = sqlite3.connect(path)
    conn.execute("PRAGMA user_version = 0")
    conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    conn.close()
    before = _digest(path)
    for argv in (["sessions"], ["stats"], ["report", journal[1]], ["backup", "x.sqlite3"]):
        assert main(["--journal", str(path), *argv]) == 1
        err = capsys.readouterr().err
        assert _one_line(err) and "damaged" in err and "no schema version" in err, argv
        assert "empty" not in err
    with pytest.raises(JournalError, match="no schema version"):
        Journal(path)
    assert _digest(path) == before


class _FullDisk:
    """A connection whose writes of events fail as on a full disk."""

    def __init__(self, conn: sqlite3.Connection, error: str) -> None:
        self._conn = conn
        self._error = error

    def execute(self, sql: str, *args):
        if sql.lstrip().upper().startswith("INSERT INTO EVENT"):
            raise sqlite3.OperationalError(self._error)
        return self._conn.execute(sql, *args)

    def __getattr__(self, name: str):
        return getattr(self._conn, name)


def test_a_full_disk_says_so_and_keeps_what_was_written(tmp_path, monkeypatch):
    path = tmp_path / "journal.sqlite3"
    with Journal(path) as j:
        sid = j.new_session("p", "1", "h", "site")
        j.write(sid, {"kind": "note", "data": {"text": "kept"}, "time": "2025-01-14T09:00:00Z"})
        j._conn = _FullDisk(j._conn, "database or disk is full")
        with pytest.raises(JournalError) as caught:
            j.write(sid, {"kind": "note", "data": {"text": "lost"}, "time": "2025-01-14T09:01Z"})
        j._conn = j._conn._conn
    assert DISK_FULL in str(caught.value) and "\n" not in str(caught.value)
    assert DISK_FULL == "the disk is full: nothing more was written; free space and resume"
    with Journal(path, readonly=True) as j:
        assert [e.data["text"] for e in j.load_events(sid)] == ["kept"]


def test_an_io_error_with_no_space_left_is_a_full_disk(tmp_path, monkeypatch):
    usage = shutil.disk_usage(tmp_path)
    monkeypatch.setattr(shutil, "disk_usage", lambda _: usage._replace(free=4096))
    err = store_mod._translate(tmp_path / "j.sqlite3", sqlite3.OperationalError("disk I/O error"))
    assert DISK_FULL in str(err)
    monkeypatch.setattr(shutil, "disk_usage", lambda _: usage._replace(free=10 << 30))
    err = store_mod._translate(tmp_path / "j.sqlite3", sqlite3.OperationalError("disk I/O error"))
    assert "disk is full" not in str(err)


def test_a_full_disk_during_a_run_is_one_line(tmp_path, monkeypatch, capsys):
    import yaml

    path = tmp_path / "journal.sqlite3"
    answers = tmp_path / "a.yaml"
    answers.write_text(yaml.safe_dump({
        "nameplate": {"rated_voltage": "24 V", "rated_power": "20 W"},
        "complaints": ["will_not_release"], "steps": STEPS}), encoding="utf-8")
    connect = Journal._connect_rw
    monkeypatch.setattr(Journal, "_connect_rw",
                        lambda self: _FullDisk(connect(self), "database or disk is full"))
    code = main(["--journal", str(path), "--packs", str(FIXTURES), "run", "mini-brake",
                 "--answers", str(answers)])
    err = capsys.readouterr().err
    assert code == 1 and _one_line(err) and DISK_FULL in err


# --- the same refusals from the installed program, under limits -------------------------------


@pytest.mark.parametrize("target", ["journal", "existing", "symlink", "journal-by-link"])
@pytest.mark.parametrize("argv", [["report", "SID"], ["kb", "graph", str(MINI)],
                                  ["backup"]], ids=["report -o", "kb graph -o", "backup"])
def test_refused_writes_in_a_limited_subprocess(journal, tmp_path, target, argv):
    """One line, exit 2, within 2 s and 200 MB, the journal and the target byte for byte kept."""
    from hostile import diagnose

    path, closed, _ = journal
    existing = tmp_path / "kept.md"
    existing.write_text(OLD, encoding="utf-8")
    link = tmp_path / "link.md"
    link.symlink_to(existing)
    journal_link = tmp_path / "journal-link"
    journal_link.symlink_to(path)
    dest = {"journal": path, "existing": existing, "symlink": link,
            "journal-by-link": journal_link}[target]
    argv = [closed if a == "SID" else a for a in argv]
    words = [*argv, str(dest)] if argv == ["backup"] else [*argv, "-o", str(dest)]
    before, kept = _digest(path), existing.read_bytes()
    proc = diagnose("--journal", str(path), "--packs", str(FIXTURES), *words)
    err = proc.stderr.strip()
    assert proc.returncode == 2 and len(err.splitlines()) == 1, (proc.returncode, err)
    assert err.startswith("diagnose: ")
    assert _digest(path) == before and existing.read_bytes() == kept
