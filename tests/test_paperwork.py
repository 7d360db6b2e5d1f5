"""What a diagnosis leaves behind: assumed values marked, parts fitted, the finding, the unit.

Sessions go through the session API into a real journal; what is checked is
what a technician, a customer or a service manager reads: the repair log
(Markdown and HTML) and `diagnose sessions`.
"""

from __future__ import annotations

import json
import sqlite3

import pytest
from test_journal_store import MINI, mini_model

from diagnose.cli import main
from diagnose.errors import InputError
from diagnose.journal import store as store_mod
from diagnose.journal.record import session_record
from diagnose.journal.recorder import start_session
from diagnose.journal.report import render_report
from diagnose.journal.store import Journal
from diagnose.service.parts import parse_parts
from diagnose.session import Session, part_fitted

assert MINI.is_dir()


@pytest.fixture()
def model():
    return mini_model()


# --- assumed values ---------------------------------------------------------------------------


def test_a_default_kept_is_recorded_as_assumed_and_the_verdict_says_so(model, tmp_path):
    with Journal(tmp_path / "j.sqlite3") as journal:
        s = start_session(journal, model)
        s.set_nameplate("rated_voltage", "24 V")                # read off the unit
        s.set_nameplate("rated_power", "20 W", assumed=True)  # Enter kept the pack's default
        s.add_complaint("will_not_release")
        s.acknowledge("lockout", "coil_resistance")
        finding = s.answer("coil_resistance", "28.8 ohm")
        assert finding.assumed == ("rated_power",)
        record = session_record(journal, s.session_id, model)
    plate = {p["id"]: p for p in record.nameplate}
    assert plate["rated_power"]["assumed"] and not plate["rated_voltage"]["assumed"]
    md = render_report(record, "md")
    assert "**assumed** (the pack's default, not read off the unit)" in md
    assert "read: 24 V" in md
    assert "**uses assumed values**, not read off the unit: `rated_power`" in md
    html = render_report(record, "html")
    assert "Uses assumed values, not read off the unit: <code>rated_power</code>" in html


def test_a_value_never_entered_counts_as_assumed_when_a_verdict_uses_its_default(model):
    s = Session(model)
    s.set_nameplate("rated_voltage", "24 V")
    s.add_complaint("will_not_release")
    s.acknowledge("lockout", "coil_resistance")
    finding = s.answer("coil_resistance", "28.8 ohm")
    assert finding.assumed == ("rated_power",)  # the pack's default 20 W was used
    s.set_nameplate("rated_power", "20 W")      # now read off the unit: no longer assumed
    assert "rated_power" not in s.evidence.assumed


def test_reading_a_value_after_assuming_it_clears_the_mark(model):
    s = Session(model)
    s.set_nameplate("rated_power", "20 W", assumed=True)
    assert s.evidence.assumed == {"rated_power"}
    s.set_nameplate("rated_power", "18 W")
    assert s.evidence.assumed == frozenset()
    s.undo()
    assert s.evidence.assumed == {"rated_power"}


# --- parts fitted -----------------------------------------------------------------------------


def test_parts_fitted_are_recorded_with_quantity_and_number_and_shown_in_the_log(model, tmp_path):
    with Journal(tmp_path / "j.sqlite3") as journal:
        s = start_session(journal, model)
        s.add_complaint("will_not_release")
        s.acknowledge("lockout", "replace_coil")
        s.repair("replace_coil", True, [{"part": "magnet body with coil", "qty": 1,
                                         "number": "MB-24"}, "mounting screw"])
        s.end(finding="coil_open")
        record = session_record(journal, s.session_id, model)
    (repair,) = record.repairs
    assert [dict(p) for p in repair.parts] == [
        {"part": "magnet body with coil", "qty": 1, "number": "MB-24"},
        {"part": "mounting screw", "qty": 1, "number": ""}]
    md = render_report(record, "md")
    assert "parts fitted: 1 × magnet body with coil (part no. MB-24); 1 × mounting screw" in md
    assert record.end["finding"] == "coil_open"


@pytest.mark.parametrize("bad", [{"part": "", "qty": 1}, {"part": "screw", "qty": 0},
                                 {"part": "screw", "qty": -2}, {"part": "screw", "qty": "two"},
                                 {"part": "screw", "qty": float("nan")}, {"qty": 2}])
def test_a_part_without_a_name_or_a_positive_quantity_is_refused(model, bad):
    s = Session(model)
    s.add_complaint("will_not_release")
    with pytest.raises(InputError):
        s.repair("replace_coil", True, [bad])
    assert not s.evidence.repairs
    with pytest.raises(InputError):
        part_fitted(bad)


def test_parts_as_typed_at_the_prompt():
    listed = ["friction disc (if the faces are pitted)", "cover seal"]
    assert parse_parts("", listed) == []
    assert parse_parts("1", listed) == [{"part": listed[0], "qty": 1, "number": ""}]
    assert parse_parts("2x 2 #CS-9; 4 × mounting screw", listed) == [
        {"part": "cover seal", "qty": 2, "number": "CS-9"},
        {"part": "mounting screw", "qty": 4, "number": ""}]
    assert parse_parts("1.5x grease", listed) == [{"part": "grease", "qty": 1.5, "number": ""}]
    for bad in ("3", "0x 1", "#X-1"):
        with pytest.raises(InputError):
            parse_parts(bad, listed)


def test_a_repair_step_in_an_answers_file_carries_its_parts(model):
    s = Session(model)
    s.add_complaint("will_not_release")
    s.apply_step({"repair": "replace_coil", "cured": True,
                  "parts": [{"part": "magnet body with coil", "qty": 1}]})
    assert s.events[-1].parts == ({"part": "magnet body with coil", "qty": 1, "number": ""},)
    with pytest.raises(InputError):
        s.apply_step({"check": "fuse_state", "answer": "intact", "parts": ["fuse"]})


def test_the_finding_must_be_a_cause_of_the_pack(model):
    s = Session(model)
    s.add_complaint("will_not_release")
    with pytest.raises(InputError, match="unknown cause"):
        s.end("resolved", finding="gremlins")
    assert not s.ended
    s.end("escalated", finding="unknown")
    assert s.evidence.end["finding"] == "unknown"


# --- the unit's history -----------------------------------------------------------------------


def _three_jobs(path):
    with Journal(path) as journal:
        for serial, site, machine in [("SN-7", "Mill road workshop", "Hoist 2"),
                                      ("sn-7 ", "Mill Road Workshop", "Hoist 2"),
                                      ("SN-8", "Harbour depot", "Conveyor 4")]:
            s = start_session(journal, mini_model())
            s.set_identity(serial=serial, site=site, machine=machine)
            s.add_complaint("will_not_release")
            s.end("abandoned")


def test_sessions_are_found_by_serial_site_machine_and_date(tmp_path, capsys):
    path = tmp_path / "j.sqlite3"
    _three_jobs(path)
    base = ["--journal", str(path), "sessions", "--json"]

    def found(*extra):
        assert main([*base, *extra]) == 0
        return json.loads(capsys.readouterr().out)

    assert len(found("--serial", "SN-7")) == 2          # case and spaces at the ends ignored
    assert len(found("--site", "mill road")) == 2
    assert len(found("--machine", "conveyor", "--site", "harbour")) == 1
    assert len(found("--since", "2000-01-01")) == 3
    assert found("--since", "2999-01-01") == []
    row = found("--serial", "SN-8")[0]
    assert (row["serial"], row["site"], row["machine"], row["axis"]) == (
        "SN-8", "Harbour depot", "Conveyor 4", None)


def test_a_bad_date_is_one_line(tmp_path, capsys):
    with pytest.raises(SystemExit) as done:
        main(["--journal", str(tmp_path / "j.sqlite3"), "sessions", "--since", "last week"])
    code, err = done.value.code, capsys.readouterr().err
    assert code == 2 and "expected a date as YYYY-MM-DD" in err and "Traceback" not in err


def test_an_older_journal_gets_its_unit_fields_from_the_identity_events(tmp_path):
    path = tmp_path / "j.sqlite3"
    conn = sqlite3.connect(path)
    for step in store_mod._MIGRATIONS[:2]:  # a journal written by schema 2
        for statement in step:
            conn.execute(statement)
    conn.execute(f"PRAGMA application_id = {store_mod.APPLICATION_ID}")
    conn.execute("PRAGMA user_version = 2")
    when = "2025-01-14T09:00:00+01:00"
    conn.execute("INSERT INTO session (id, pack_id, pack_version, content_hash, mode, started, "
                 "updated) VALUES ('250114-1', 'mini-brake', '1', 'h', 'site', ?, ?)",
                 (when, when))
    conn.execute("INSERT INTO event (session_id, seq, kind, time, data) VALUES "
                 "('250114-1', 1, 'identity', ?, '{\"serial\":\"SN-7\",\"site\":\"Depot\"}')",
                 (when,))
    conn.commit()
    conn.close()
    with Journal(path, readonly=True) as j:  # read as it is: no fields yet, nothing matches
        assert j.sessions(serial="SN-7") == []
    with Journal(path) as j:                 # upgraded: the fields come from the events
        (info,) = j.sessions(serial="SN-7")
        assert info.unit == {"site": "Depot", "serial": "SN-7"}


# --- attachments ------------------------------------------------------------------------------

PNG = (b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR\x00\x00\x00\x01\x00\x00\x00\x01\x08\x06\x00\x00"
       b"\x00\x1f\x15\xc4\x89\x00\x00\x00\rIDATx\x9cc\xf8\xcf\xc0\xf0\x1f\x00\x05\x00\x01\xff"
       b"\x89\x99=\x1d\x00\x00\x00\x00IEND\xaeB`\x82")  # a 1x1 picture (PNG, ISO/IEC 15948)


def test_a_photo_is_stored_once_by_its_content(model, tmp_path):
    from diagnose.journal.attachments import folder_of
    from diagnose.service.attach import attach

    photo = tmp_path / "worn disc.png"
    photo.write_bytes(PNG)
    copy = tmp_path / "same.png"
    copy.write_bytes(PNG)
    jpath = tmp_path / "j.sqlite3"
    with Journal(jpath) as journal:
        s = start_session(journal, model)
        first = attach(s, jpath, str(photo), "disc worn to the rivets")
        second = attach(s, jpath, str(copy))
        record = session_record(journal, s.session_id, model)
    assert first.sha256 == second.sha256 and first.media_type == "image/png"
    assert [p.name for p in folder_of(jpath).iterdir()] == [first.sha256]
    assert [a["caption"] for a in record.attachments] == ["disc worn to the rivets", ""]
    data = json.loads(render_report(record, "json"))
    assert [a["sha256"] for a in data["attachments"]] == [first.sha256] * 2


def test_a_file_too_large_or_not_the_picture_its_name_claims_is_refused(model, tmp_path):
    from diagnose.journal.attachments import store
    from diagnose.service.attach import attach

    fake = tmp_path / "disc.jpg"
    fake.write_text("not a picture")
    jpath = tmp_path / "j.sqlite3"
    s = Session(model)
    with pytest.raises(InputError, match="not a PNG, JPEG, GIF or WebP"):
        attach(s, jpath, str(fake))
    big = tmp_path / "scan.png"
    big.write_bytes(PNG + b"\0" * 100)
    with pytest.raises(InputError, match="the limit is"):
        store(big, jpath, max_bytes=64)
    with pytest.raises(InputError, match="no journal in use"):
        attach(s, None, str(big))
    notes = tmp_path / "notes.txt"
    notes.write_text("meter serial 7")
    assert store(notes, jpath).media_type == "application/octet-stream"
    assert not s.events[1:]  # nothing refused was recorded


def test_attach_in_the_shell(tmp_path):
    from test_shell import PRELUDE, drive

    from diagnose.kb.loader import load_model

    photo = tmp_path / "terminal.png"
    photo.write_bytes(PNG)
    shell_model = load_model(str(MINI.parent / "shell-brake"))
    shell, screen, _ = drive(shell_model, PRELUDE + [f'attach "{photo}" burnt terminal',
                                                     "attach nowhere.png", "quit"])
    # drive() runs without a journal: the shell says so in one line and goes on
    assert "no journal in use" in screen and "Traceback" not in screen


# --- export and import ------------------------------------------------------------------------


def _phone_session(jpath, model):
    with Journal(jpath) as journal:
        s = start_session(journal, model, mode="phone")
        s.set_identity(serial="SN-7", site="Harbour depot")
        s.add_complaint("will_not_release")
        s.note("caller says it stopped after the weekend")
        return s.session_id


def test_export_then_import_gives_the_same_log_and_twice_changes_nothing(tmp_path, capsys):
    a, b = tmp_path / "a" / "j.sqlite3", tmp_path / "b" / "j.sqlite3"
    model = mini_model()
    sid = _phone_session(a, model)
    file = tmp_path / "call.json"
    assert main(["--journal", str(a), "export", sid, "-o", str(file)]) == 0
    assert main(["--journal", str(b), "import", str(file)]) == 0
    assert f"session {sid} imported" in capsys.readouterr().out
    with Journal(a, readonly=True) as ja, Journal(b, readonly=True) as jb:
        assert render_report(session_record(ja, sid, model), "md") == \
            render_report(session_record(jb, sid, model), "md")
        before = [e.to_dict() for e in jb.load_events(sid)]
    assert main(["--journal", str(b), "import", str(file)]) == 0
    assert "nothing changed" in capsys.readouterr().out
    with Journal(b, readonly=True) as jb:
        assert [e.to_dict() for e in jb.load_events(sid)] == before
        assert len(jb.sessions()) == 1


def test_the_site_goes_on_and_a_newer_export_adds_only_what_is_missing(tmp_path, capsys):
    from diagnose.journal.recorder import resume_session

    a, b = tmp_path / "a" / "j.sqlite3", tmp_path / "b" / "j.sqlite3"
    model = mini_model()
    sid = _phone_session(a, model)
    file = tmp_path / "call.json"
    main(["--journal", str(a), "export", sid, "-o", str(file)])
    with Journal(b) as jb:  # the site's own journal already has a session with that id
        jb.new_session("mini-brake", "1", "h", "site", wanted=sid)
    capsys.readouterr()
    main(["--journal", str(b), "import", str(file)])
    out = capsys.readouterr().out
    new_id = out.split()[1]
    assert new_id != sid and f"its id {sid} is taken here" in out
    with Journal(a) as ja:  # the help desk adds one more note before the visit
        resume_session(ja, sid, model).note("caller sent a photo of the display")
    main(["--journal", str(a), "export", sid, "-o", str(file), "--force"])
    capsys.readouterr()
    main(["--journal", str(b), "import", str(file)])
    assert f"session {new_id} brought up to date: 1 event(s)" in capsys.readouterr().out
    with Journal(b) as jb:  # the technician goes on on site; the old file stays behind
        resume_session(jb, new_id, model).note("brake cover off")
    assert main(["--journal", str(b), "import", str(file)]) == 0
    assert "nothing changed" in capsys.readouterr().out
    with Journal(a) as ja:  # the help desk's copy went on differently: never overwritten
        resume_session(ja, sid, model).note("customer called again")
    main(["--journal", str(a), "export", sid, "-o", str(file), "--force"])
    capsys.readouterr()
    assert main(["--journal", str(b), "import", str(file)]) == 1
    assert "went on differently" in capsys.readouterr().err


def test_an_imported_session_keeps_its_uuids_and_its_chain(tmp_path, journal_target, capsys):
    """The events carry their UUIDs: the copy has the same hashes, and verify holds there."""
    from diagnose.journal.stores import open_journal

    a = tmp_path / "a" / "j.sqlite3"
    sid = _phone_session(a, mini_model())
    file = tmp_path / "call.json"
    assert main(["--journal", str(a), "export", sid, "-o", str(file)]) == 0
    exported = json.loads(file.read_text(encoding="utf-8"))
    assert all(e["uid"] for e in exported["events"])
    assert main(["--journal", journal_target, "import", str(file)]) == 0
    assert main(["--journal", journal_target, "import", str(file)]) == 0  # again: no change
    capsys.readouterr()
    assert main(["--journal", journal_target, "verify"]) == 0
    assert "every chain is whole" in capsys.readouterr().out
    with Journal(a, readonly=True) as ja, open_journal(journal_target, readonly=True) as jb:
        (copy,) = jb.sessions()
        assert copy.uid == ja.session(sid).uid
        mine = [(r[1], r[7]) for r in ja.stored_events(sid)]  # (uid, hash) of every event
        assert [(r[1], r[7]) for r in jb.stored_events(copy.id)] == mine
    # An export of an older diagnose (no event UUIDs) still imports, with a chain of its own.
    for event in exported["events"]:
        del event["uid"]
    exported["session"]["uid"] = None
    exported["origin"] = "older-file"
    file.write_text(json.dumps(exported), encoding="utf-8")
    other = tmp_path / "c" / "j.sqlite3"
    assert main(["--journal", str(other), "import", str(file)]) == 0
    assert main(["--journal", str(other), "verify"]) == 0


def test_a_damaged_export_is_refused_in_one_line(tmp_path, capsys):
    bad = tmp_path / "bad.json"
    for text in ("{", '{"format": "other"}', json.dumps({
            "format": "diagnose-session", "version": 1, "session": {
                "id": "1", "pack_id": "p", "pack_version": "1", "content_hash": "h",
                "mode": "site", "started": "2025-01-14T09:00:00+00:00"},
            "events": [{"kind": "answer", "data": {"check": "x"}, "time": ""}]})):
        bad.write_text(text)
        assert main(["--journal", str(tmp_path / "j.sqlite3"), "import", str(bad)]) != 0
        err = capsys.readouterr().err
        assert len(err.strip().splitlines()) == 1 and "Traceback" not in err


# --- the history of a unit in the shell -------------------------------------------------------


def test_a_unit_with_two_earlier_jobs_shows_them_and_a_recent_finding_is_raised(tmp_path):
    import os
    from datetime import datetime, timedelta

    from test_shell_parts import args_for, run_lines

    from diagnose.kb.loader import load_model
    from diagnose.shell.entry import main as shell_main

    pack = load_model(str(MINI.parent / "shell-brake"))
    jpath = os.environ["DIAGNOSE_JOURNAL"]
    now = datetime.now().astimezone()
    with Journal(jpath) as journal:
        for ago, cause in ((200, "lining_worn"), (10, "fuse_blown")):
            stamp = (now - timedelta(days=ago)).isoformat(timespec="seconds")
            s = start_session(journal, pack, clock=lambda stamp=stamp: stamp)
            s.set_identity(serial="HB-7781", site="Mill road workshop")
            s.add_complaint("will_not_release")
            s.end("resolved", finding=cause)
    status, screen = run_lines(shell_main, ["", "", "", "", "", "", "hb-7781", "release", "",
                                            "why", "quit"], args_for())
    assert status == 0
    assert "Earlier jobs on this unit" in screen
    assert "-> Fuse blown" in screen and "-> Lining worn" in screen
    assert "Found on this unit 10 days ago: Fuse blown" in screen
    assert "Found on this unit 200" not in screen  # older than 90 days: shown, not raised
    assert "found on this unit before: fuse_blown" in screen  # `why` shows the step
    with Journal(jpath, readonly=True) as journal:
        newest = journal.sessions()[0]
        events = journal.load_events(newest.id)
    noted = [e for e in events if e.kind == "history"]
    assert [(e.cause, e.factor, e.days) for e in noted] == [("fuse_blown", 3.0, 10)]
    with_history = Session.replay(pack, events)
    without = Session.replay(pack, [e for e in events if e.kind != "history"])
    p = {e.cause: e.p for e in with_history.ranking().entries}
    q = {e.cause: e.p for e in without.ranking().entries}
    # prior odds x3: p/(1-p) = 3 q/(1-q) for the raised cause (Bayes' rule, odds form)
    assert p["fuse_blown"] / (1 - p["fuse_blown"]) == pytest.approx(
        3 * q["fuse_blown"] / (1 - q["fuse_blown"]), rel=1e-6)


# --- leaving and coming back ------------------------------------------------------------------


def _shell(args, script, env):
    import subprocess
    import sys

    return subprocess.run([sys.executable, "-m", "diagnose", *args], input=script, check=False,
                          capture_output=True, text=True, env=env, timeout=120)


def test_the_printed_resume_command_runs_as_printed_and_a_pending_repair_waits(tmp_path):
    import os
    import re
    import shlex

    pack = str(MINI.parent / "shell-brake")
    journal = tmp_path / "my journals" / "j.sqlite3"  # a path with a space, not the default
    env = {k: v for k, v in os.environ.items() if k != "DIAGNOSE_JOURNAL"}
    env["TERM"] = "dumb"
    first = _shell(["--journal", str(journal), "--packs", str(MINI.parent), "start", pack],
                   "\n" * 7 + "release\n\nrepair replace_coil\nack\nquit\n", env)
    assert first.returncode == 0, first.stderr
    printed = re.search(r"Resume with:\n(.+)", first.stdout).group(1).strip()
    words = shlex.split(printed)
    assert words[:2] == ["diagnose", "resume"] and "--journal" in words
    # run it as printed (the program is `python -m diagnose` here)
    again = _shell([*words[1:], "--packs", str(MINI.parent)], "yes\n1\n\n", env)
    assert again.returncode == 0, again.stderr
    assert "Is the complaint cured?" in again.stdout  # the repair left pending comes back
    assert "Cured." in again.stdout and "is closed" in again.stdout
    with Journal(journal, readonly=True) as j:
        (info,) = j.sessions()
        kinds = [e.kind for e in j.load_events(info.id)]
    assert info.status == "closed" and kinds.count("repair_started") == 1
    assert kinds.index("repair_started") < kinds.index("repair")


# --- phone to site ----------------------------------------------------------------------------


def test_the_phone_handoff_says_what_the_caller_confirmed_and_what_the_site_must_mind():
    import io

    from rich.console import Console

    from diagnose.kb.loader import load_model
    from diagnose.service.handoff import handoff
    from diagnose.shell.app import Shell

    pack = load_model("spring-applied-brake")
    s = Session(pack, mode="phone")
    s.set_nameplate("people_carrying", "no")
    s.add_complaint("will_not_release")
    s.answer("caller_when_happens", "first_start")
    s.answer("caller_history", "long_standstill")
    action = s.next_action()
    while action.kind == "check":  # answer what the caller is asked until the plan ends
        chk = pack.checks[action.id]
        s.answer(action.id, "unsure" if chk.measurement else next(iter(chk.outcomes)))
        action = s.next_action()
    assert action.kind == "visit"
    brief = handoff(s, action.parts, action.causes)
    assert any(c.startswith("When the fault shows: ") for c in brief.confirmed)
    assert brief.leading and all("%)" in line for line in brief.leading)
    assert any(c.startswith(("DANGER: ", "WARNING: ")) for c in brief.cautions)
    levels = [c.split(":")[0] for c in brief.cautions]
    assert levels == sorted(levels, key=["DANGER", "WARNING", "CAUTION", "NOTICE"].index)
    out = io.StringIO()
    shell = Shell(s, Console(file=out, width=80, color_system=None), None)
    shell.console.print(shell.end_view(action))
    text = " ".join(out.getvalue().split())
    assert "The caller confirmed:" in text and "Most likely:" in text and "On site:" in text
    assert "Parts to bring:" in text
    assert all(len(line) <= 80 for line in out.getvalue().splitlines())


# --- the help's own examples ------------------------------------------------------------------


def test_every_example_in_the_shell_help_works_on_the_shipped_pack(tmp_path, monkeypatch):
    """Each `command ...` written in a command's help runs on the default pack, as typed."""
    import re

    from test_shell_parts import args_for, run_lines

    from diagnose.shell.commands import COMMANDS
    from diagnose.shell.entry import main as shell_main

    examples = []
    for cmd in COMMANDS.values():
        doc = " ".join((cmd.func.__doc__ or "").split())
        examples += [e for e in re.findall(r"`([^`]+)`", doc)
                     if e.split()[0] == cmd.name and e.strip() != cmd.name]
    assert len(examples) >= 6, examples
    monkeypatch.chdir(tmp_path)
    (tmp_path / "disc.jpg").write_bytes(b"\xff\xd8\xff\xe0" + b"\0" * 64)  # a JPEG's start
    lines = ["no", "defaults", "", "", "", "", "1", ""]
    for example in examples:  # each, then back to the question (a card may need an ack)
        lines += [example]
    status, screen = run_lines(shell_main, lines + ["quit"],
                               args_for(pack="spring-applied-brake"))
    assert status == 0
    refused = [line for line in screen.splitlines() if line.startswith(("Not accepted", "Error"))]
    assert refused == [], "\n".join(refused)
    assert "attached photo disc.jpg" in screen


def test_an_answers_file_attaches_its_photos_once(tmp_path, capsys):
    import yaml

    from diagnose.journal.attachments import folder_of

    (tmp_path / "photos").mkdir()
    (tmp_path / "photos" / "disc.png").write_bytes(PNG)
    answers = tmp_path / "job.yaml"
    answers.write_text(yaml.safe_dump({
        "complaints": ["will_not_release"], "nameplate": {"rated_voltage": "24 V"},
        "attach": [{"file": "photos/disc.png", "caption": "disc glazed"}, "photos/disc.png"]}))
    jpath = tmp_path / "j.sqlite3"
    base = ["--journal", str(jpath), "--packs", str(MINI.parent), "run", "mini-brake",
            "--answers", str(answers)]
    assert main(base) == 0
    capsys.readouterr()
    with Journal(jpath, readonly=True) as j:
        (info,) = j.sessions()
        got = [(e.caption, e.media_type) for e in j.load_events(info.id) if e.kind == "attachment"]
    assert got == [("disc glazed", "image/png"), ("", "image/png")]
    assert len(list(folder_of(jpath).iterdir())) == 1
    # given again to go on: nothing attached twice
    assert main(["--journal", str(jpath), "--packs", str(MINI.parent), "run", "--resume",
                 info.id, "--answers", str(answers)]) == 0
    with Journal(jpath, readonly=True) as j:
        assert sum(e.kind == "attachment" for e in j.load_events(info.id)) == 2
    (tmp_path / "photos" / "disc.png").unlink()
    code = main(base)
    err = capsys.readouterr().err
    assert code != 0 and "cannot read" in err and len(err.strip().splitlines()) == 1


def test_a_phone_call_ended_with_a_visit_goes_on_at_the_site(tmp_path):
    import os

    from test_shell_parts import args_for, run_lines

    from diagnose.journal.recorder import start_session as begin
    from diagnose.kb.loader import load_model
    from diagnose.shell.entry import resume

    pack = load_model(str(MINI.parent / "shell-brake"))
    jpath = os.environ["DIAGNOSE_JOURNAL"]
    with Journal(jpath) as journal:
        call = begin(journal, pack, mode="phone", who="Dana")
        call.add_complaint("will_not_release")
        call.answer("listen_click", "silent")
        call.end("visit", parts=["fuse of the same rating"])
        sid = call.session_id
    args = args_for()
    args.who = "Sam"  # the technician at the site
    status, screen = run_lines(resume, [""] * 7 + ["repair replace_coil", "ack", "yes", "", ""],
                               args, sid)
    assert status == 0
    assert "it goes on here, on site, with the caller's answers kept" in " ".join(screen.split())
    with Journal(jpath, readonly=True) as journal:
        info = journal.session(sid)
        events = journal.load_events(sid)
        record = session_record(journal, sid, pack)
    kinds = [e.kind for e in events]
    # the hand-off from the phone to the site is recorded, then the session goes on
    assert kinds.count("end") == 2 and kinds.index("reopen") == kinds.index("end") + 2
    handed = events[kinds.index("handover")]
    assert (handed.giver, handed.taker) == ("Dana", "Sam")
    assert [(h["from"], h["to"]) for h in record.handovers] == [("Dana", "Sam")]
    assert info.status == "closed" and info.outcome == "resolved"
    replayed = Session.replay(pack, events)
    assert replayed.evidence.findings["listen_click"] == {"silent": 1.0}  # the caller's answer
    assert replayed.evidence.end["result"] == "resolved" and record.result == "resolved"
    assert record.session["who"] == "Dana (phone), Sam (site)"
    assert {s.who for s in record.steps} == {"Dana", "Sam"}
    again = Session.replay(pack, events[: kinds.index("reopen") + 1])
    assert again.mode == "site" and not again.ended
    assert again.undo() is None  # the phone part is on the record for good
