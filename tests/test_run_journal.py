"""`diagnose run` as a face of the journal: recorded, listed, closed, resumed, reported.

A scripted run records through the same functions as the shell, so it is
listed by `diagnose sessions`, closes at a cure (or at the file's `end`),
is counted by `stats` and `learn`, survives SIGKILL part-way and resumes
with `diagnose run --resume ID` to the events and repair log of an
uninterrupted run.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import signal
import sqlite3
import subprocess
import sys
import time
from html.parser import HTMLParser
from pathlib import Path

import pytest
import yaml
from pgserver import is_url, raw_sql
from test_journal_store import FIXTURES, mini_model

from diagnose.cli import main
from diagnose.journal.record import STEP_KINDS, session_record
from diagnose.journal.report import render_report
from diagnose.journal.store import Journal
from diagnose.journal.stores import open_journal

HEADER = {"nameplate": {"rated_voltage": "24 V", "rated_power": "20 W"},
          "complaints": ["will_not_release"]}
STEPS = [{"check": "listen_click", "answer": "silent"},
         {"check": "fuse_state", "answer": "unsure"},
         {"check": "coil_resistance", "answer": "12 ohm"},  # verdict low, -58.33 % off
         {"check": "coil_resistance", "answer": "OL"},
         {"repair": "replace_coil", "cured": True}]
# The events of the header: the notice, two nameplate values, the complaint.
HEADER_EVENTS = 4


def _answers(tmp_path: Path, name: str, steps: list, **more) -> str:
    path = tmp_path / name
    path.write_text(yaml.safe_dump({**HEADER, "steps": steps, **more}, sort_keys=False),
                    encoding="utf-8")
    return str(path)


@pytest.fixture()
def cli(tmp_path, capsys):
    """`diagnose --journal J --packs FIXTURES ...` in this process: (exit code, stdout, stderr)."""
    jpath = tmp_path / "journal.sqlite3"

    def run(*argv: str) -> tuple[int, str, str]:
        code = main(["--journal", str(jpath), "--packs", str(FIXTURES), *argv])
        out, err = capsys.readouterr()
        return code, out, err

    run.path = jpath  # type: ignore[attr-defined]
    return run


def _json_run(cli, *argv: str, options: tuple[str, ...] = ()) -> dict:
    """`diagnose [OPTIONS] run ARGV --json` as data; ``options`` are the global ones."""
    code, out, err = cli(*options, "run", *argv, "--json")
    assert code == 0, err
    return json.loads(out)


def _events(jpath: Path | str, sid: str) -> list[tuple[str, dict]]:
    with open_journal(jpath, readonly=True) as j:
        return [(e.kind, e.data) for e in j.load_events(sid)]


def _report(jpath: Path | str, sid: str, fmt: str = "md") -> str:
    """The repair log with the session id, times and minutes on the clock taken out."""
    with open_journal(jpath, readonly=True) as j:
        uid = j.session(sid).uid  # a session's UUID differs from run to run, as its id
        text = render_report(session_record(j, sid, mini_model()), fmt).replace(sid, "ID")
        text = text.replace(uid, "UID")
    text = re.sub(r"\d{4}-\d\d-\d\d[ T]\d\d:\d\d:\d\d( ?UTC| ?[+-]\d\d:\d\d)", "TIME", text)
    # the time on site (page one): "DATE HH:MM to HH:MM UTC (0.1 min)"
    text = re.sub(r"\d{4}-\d\d-\d\d \d\d:\d\d to \d\d:\d\d( UTC| [+-]\d\d:\d\d)? "
                  r"\([\d.]+ min\)", "SPAN", text)
    text = re.sub(r'"(clock_minutes|minutes_to_cure)": [\d.]+', r'"\1": N', text)
    text = re.sub(r"minutes to the cure \| [\d.]+ min", "minutes to the cure | N", text)
    return re.sub(r"[\d.]+ min on the clock", "N min on the clock", text)


# --- recorded, listed, closed ----------------------------------------------------------------


def test_scripted_run_is_listed_in_sessions(cli, tmp_path):
    data = _json_run(cli, "mini-brake", "--answers", _answers(tmp_path, "a.yaml", STEPS[:3]),
                     "--who", "Ana")
    sid = data["session"]
    assert data["status"] == "open" and data["journal"] == str(cli.path)
    assert len(data["steps"]) == 3 and data["ranking"] and data["next"]
    code, out, _ = cli("sessions", "--json")
    assert code == 0
    listed = {s["id"]: s for s in json.loads(out)}
    assert listed[sid]["status"] == "open" and listed[sid]["who"] == "Ana"
    assert listed[sid]["events"] == HEADER_EVENTS + 3
    assert [k for k, _ in _events(cli.path, sid)] == ["notice", "nameplate", "nameplate",
                                                      "complaint", "answer", "unsure", "reading"]
    _, out, _ = cli("sessions", "--open", "--json")
    assert [s["id"] for s in json.loads(out)] == [sid]


def test_text_output_names_the_session_and_how_to_go_on(cli, tmp_path):
    code, out, _ = cli("run", "mini-brake", "--answers", _answers(tmp_path, "a.yaml", STEPS[:1]))
    assert code == 0
    sid = json.loads(cli("sessions", "--json")[1])[0]["id"]
    flat = " ".join(out.split())
    assert f"Session {sid}, recorded in the journal" in flat
    assert f"diagnose run --resume {sid} --answers FILE" in flat
    assert all(len(line) <= 80 for line in out.splitlines())


def test_a_cure_closes_the_session_and_stats_and_learn_count_it(cli, tmp_path):
    data = _json_run(cli, "mini-brake", "--answers", _answers(tmp_path, "a.yaml", STEPS))
    sid = data["session"]
    assert data["status"] == "closed" and data["end"]["result"] == "resolved"
    assert data["next"]["action"] == "done"
    assert _events(cli.path, sid)[-1][0] == "end"
    code, out, _ = cli("sessions", "--closed", "--json")
    closed = json.loads(out)
    assert [(s["id"], s["outcome"], s["cause"]) for s in closed] == [(sid, "resolved",
                                                                      "coil_open")]
    code, out, _ = cli("stats", "mini-brake", "--json")
    stats = json.loads(out)
    assert stats["sessions"] == 1 and stats["first_repair"]["rate"] == 1.0
    assert [c["cause"] for c in stats["confirmed_causes"]] == ["coil_open"]
    code, out, _ = cli("learn", "mini-brake", "--json")
    assert code == 0 and json.loads(out)["counts"] == {"coil_open": 1}
    # A new run ranks with the learned priors and says so; --no-learned does not.
    again = _json_run(cli, "mini-brake", "--answers", _answers(tmp_path, "b.yaml", []))
    plain = _json_run(cli, "mini-brake", "--answers", _answers(tmp_path, "b.yaml", []),
                      options=("--no-learned",))
    code, out, _ = cli("sessions", "--json")
    learned = {s["id"]: s["learned"] for s in json.loads(out)}
    assert learned[again["session"]] and "1 closed session" in learned[again["session"]]
    assert learned[plain["session"]] is None


@pytest.mark.parametrize("result", ["visit", "escalated", "abandoned", "resolved"])
def test_the_end_key_closes_with_its_result(cli, tmp_path, result):
    path = _answers(tmp_path, "a.yaml", STEPS[:2], notes=["ends here"], end=result)
    data = _json_run(cli, "mini-brake", "--answers", path)
    assert data["status"] == "closed" and data["end"]["result"] == result
    kinds = [k for k, _ in _events(cli.path, data["session"])]
    assert kinds[-2:] == ["note", "end"]  # the notes go in before the end
    _, out, _ = cli("sessions", "--closed", "--json")
    assert json.loads(out)[0]["outcome"] == result


def test_the_mode_option_wins_over_the_file(cli, tmp_path):
    path = _answers(tmp_path, "a.yaml", STEPS[:1], mode="site")
    data = _json_run(cli, "mini-brake", "--answers", path, "--mode", "phone")
    assert data["mode"] == "phone"
    assert [k for k, _ in _events(cli.path, data["session"])].count("mode") == 0


def test_a_bad_end_is_refused(cli, tmp_path):
    code, _, err = cli("run", "mini-brake", "--answers",
                       _answers(tmp_path, "a.yaml", [], end="fixed"))
    assert code == 2 and "`end` must be one of" in err and not cli.path.exists()


def test_no_journal_writes_nothing(cli, tmp_path):
    data = _json_run(cli, "mini-brake", "--answers", _answers(tmp_path, "a.yaml", STEPS),
                     "--no-journal", options=("--no-learned",))
    assert data["session"] is None and data["journal"] is None
    assert data["status"] == "closed" and len(data["steps"]) == len(STEPS)
    code, out, _ = cli("run", "mini-brake", "--answers", _answers(tmp_path, "a.yaml", STEPS),
                       "--no-journal")
    assert code == 0 and "nothing was written to the journal" in " ".join(out.split())
    assert not cli.path.exists()


def test_a_bad_step_writes_nothing(cli, tmp_path):
    bad = STEPS[:2] + [{"check": "coil_resistance", "answer": "12 kg"}]
    code, _, err = cli("run", "mini-brake", "--answers", _answers(tmp_path, "a.yaml", bad))
    assert code == 2 and "step 3" in err and len(err.strip().splitlines()) == 1
    assert not cli.path.exists()


def test_run_needs_a_pack_and_answers_unless_resuming(cli, tmp_path):
    code, _, err = cli("run", "mini-brake")
    assert code == 2 and "--answers" in err
    code, _, err = cli("run", "--answers", _answers(tmp_path, "a.yaml", []))
    assert code == 2 and "--resume" in err


# --- resumed ---------------------------------------------------------------------------------


def test_resume_continues_to_the_events_and_log_of_one_run(cli, tmp_path):
    whole = _json_run(cli, "mini-brake", "--answers", _answers(tmp_path, "all.yaml", STEPS))
    first = _json_run(cli, "mini-brake", "--answers", _answers(tmp_path, "p1.yaml", STEPS[:2]))
    sid = first["session"]
    # The rest file repeats the header: what is there already is skipped, not duplicated.
    rest = _json_run(cli, "--resume", sid, "--answers", _answers(tmp_path, "p2.yaml", STEPS[2:]))
    assert rest["session"] == sid and rest["resumed"] and rest["status"] == "closed"
    assert len(rest["steps"]) == len(STEPS) - 2
    assert rest["ranking"] == whole["ranking"] and rest["next"] == whole["next"]
    assert _events(cli.path, sid) == _events(cli.path, whole["session"])
    for fmt in ("md", "html", "json"):
        assert _report(cli.path, sid, fmt) == _report(cli.path, whole["session"], fmt)


def test_resume_without_answers_shows_where_it_stands(cli, tmp_path):
    first = _json_run(cli, "mini-brake", "--answers", _answers(tmp_path, "p1.yaml", STEPS[:3]))
    sid = first["session"]
    before = _events(cli.path, sid)
    data = _json_run(cli, "--resume", sid)
    assert data["steps"] == [] and data["status"] == "open"
    assert data["ranking"] == first["ranking"] and data["next"] == first["next"]
    code, out, _ = cli("run", "--resume", sid)
    assert code == 0 and f"Resuming session {sid} (3 step(s) so far)" in " ".join(out.split())
    assert _events(cli.path, sid) == before


def test_resume_a_changed_nameplate_value_is_recorded(cli, tmp_path):
    sid = _json_run(cli, "mini-brake", "--answers", _answers(tmp_path, "p1.yaml", []))["session"]
    path = tmp_path / "p2.yaml"
    path.write_text("nameplate: {rated_voltage: 24 V, rated_power: 25 W}\n"
                    "complaints: [will_not_release]\nnotes: [checked twice]\n")
    _json_run(cli, "--resume", sid, "--answers", str(path))
    _json_run(cli, "--resume", sid, "--answers", str(path))  # nothing new the second time
    tail = _events(cli.path, sid)[HEADER_EVENTS:]
    assert [(k, d.get("param") or d.get("text")) for k, d in tail] == [
        ("nameplate", "rated_power"), ("note", "checked twice")]


def test_resume_a_shell_session(cli, tmp_path):
    """A session started through the shell's functions continues with `run --resume`."""
    from diagnose.journal.recorder import start_session

    with Journal(cli.path) as j:
        s = start_session(j, mini_model(), mode="site")
        s.set_nameplate("rated_voltage", "24 V")
        s.add_complaint("will_not_release")
        s.acknowledge("lockout")
        sid = s.session_id
    data = _json_run(cli, "--resume", sid, "--answers", _answers(tmp_path, "p.yaml", STEPS))
    assert data["status"] == "closed"
    kinds = [k for k, _ in _events(cli.path, sid)]
    assert kinds == ["notice", "nameplate", "complaint", "ack", "nameplate", "answer", "unsure",
                     "reading", "reading", "repair", "end"]


def test_resume_refusals_are_one_line(cli, tmp_path):
    done = _json_run(cli, "mini-brake", "--answers", _answers(tmp_path, "a.yaml", STEPS))
    code, _, err = cli("run", "--resume", done["session"])
    assert code == 1 and "is closed (resolved)" in err
    assert f"diagnose report {done['session']}" in err and len(err.strip().splitlines()) == 1
    code, _, err = cli("run", "--resume", "991231-9")
    assert code == 1 and "no session 991231-9" in err
    sid = _json_run(cli, "mini-brake", "--answers", _answers(tmp_path, "b.yaml", []),
                    "--who", "Ana")["session"]
    code, out, err = cli("run", "--resume", sid, "--who", "Bo")  # another takes it up
    assert code == 0 and f"session {sid} handed over from Ana to Bo" in out, err
    code, _, err = cli("run", "--resume", sid, "--max-faults", "2")
    assert code == 2 and "cannot change" in err


def test_resume_a_pack_given_by_folder(tmp_path, capsys):
    """The folder the session recorded is used while it is there; else PACK names it."""
    pack = tmp_path / "own" / "mini"
    shutil.copytree(FIXTURES / "mini", pack)
    base = ["--journal", str(tmp_path / "journal.sqlite3")]
    assert main([*base, "run", str(pack), "--answers", _answers(tmp_path, "a.yaml", STEPS[:1]),
                 "--json"]) == 0
    sid = json.loads(capsys.readouterr().out)["session"]
    assert main([*base, "run", "--resume", sid, "--answers",
                 _answers(tmp_path, "b.yaml", STEPS[1:2]), "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["status"] == "open"
    assert main([*base, "report", sid]) == 0  # the report finds the pack's titles there too
    assert "Coil winding open" in capsys.readouterr().out
    moved = pack.rename(tmp_path / "moved")
    assert main([*base, "run", "--resume", sid]) == 2
    err = capsys.readouterr().err
    assert "not on the search path" in err and "--packs DIR" in err
    assert main([*base, "run", str(moved), "--resume", sid, "--answers",
                 _answers(tmp_path, "c.yaml", STEPS[2:]), "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["status"] == "closed"


def test_resume_dry_run_writes_nothing(cli, tmp_path):
    sid = _json_run(cli, "mini-brake", "--answers", _answers(tmp_path, "a.yaml", []))["session"]
    before = _events(cli.path, sid)
    data = _json_run(cli, "--resume", sid, "--answers", _answers(tmp_path, "b.yaml", STEPS),
                     "--no-journal")
    assert data["status"] == "closed" and data["session"] is None
    assert _events(cli.path, sid) == before


# --- the repair log ---------------------------------------------------------------------------


class _Cells(HTMLParser):
    """The text of every table row and of every element with a verdict class."""

    def __init__(self) -> None:
        super().__init__()
        self.rows: list[list[str]] = []
        self.verdicts: list[str] = []
        self._cell: list[str] | None = None
        self._verdict = False

    def handle_starttag(self, tag, attrs):
        if tag == "tr":
            self.rows.append([])
        elif tag in ("td", "th"):
            self._cell = []
        elif any(k == "class" and (v or "").startswith("verdict-") for k, v in attrs):
            self._verdict = True
            self.verdicts.append("")

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self._cell is not None and self.rows:
            self.rows[-1].append("".join(self._cell).strip())
            self._cell = None
        elif tag in ("span", "strong"):
            self._verdict = False

    def handle_data(self, data):
        if self._cell is not None:
            self._cell.append(data)
        if self._verdict:
            self.verdicts[-1] += data


@pytest.mark.parametrize("fmt", ["md", "html", "json"])
def test_report_after_a_run_holds_figures_and_verdicts(cli, tmp_path, fmt):
    sid = _json_run(cli, "mini-brake", "--answers", _answers(tmp_path, "a.yaml", STEPS),
                    "--who", "Ana")["session"]
    code, out, err = cli("report", sid, "--format", fmt)
    assert code == 0, err
    # 12 ohm against 28.8 ohm expected for 24 V / 20 W at 20 degC: (12 - 28.8) / 28.8 = -58.33 %
    if fmt == "md":
        assert "| deviation from expected | -58.33 | % |" in out
        assert "| measured resistance | 12 | ohm |" in out
        assert "- verdict: **low**" in out and "- verdict: **open**" in out
        assert "by Ana" in out
    elif fmt == "html":
        cells = _Cells()
        cells.feed(out)
        assert ["deviation from expected", "-58.33", "%"] in cells.rows
        assert ["measured resistance", "12", "ohm"] in cells.rows
        assert "low" in cells.verdicts and "open" in cells.verdicts
    else:
        data = json.loads(out)
        readings = [s for s in data["steps"] if s["kind"] == "reading"]
        assert [s["outcome"] for s in readings] == ["low", "open"]
        figures = {f["key"]: f for f in readings[0]["figures"]}
        assert figures["deviation"]["value"] == pytest.approx(-58.3333, abs=1e-3)
        assert figures["measured"] == {"key": "measured", "label": "measured resistance",
                                       "value": 12, "unit": "ohm"}
        assert data["result"] == "resolved" and data["cause"]["id"] == "coil_open"
        assert data["session"]["who"] == "Ana"


# --- killed part-way -------------------------------------------------------------------------

LONG = 120  # steps: long enough that the run is still going when the test takes the lock
KILL_AT = 12  # events seen before the test stops the writer


def _long_steps() -> list[dict]:
    steps = []
    for i in range(LONG):
        steps.append({"check": "listen_click", "answer": "silent" if i % 2 else "click"})
        steps.append({"check": "coil_resistance", "answer": f"{28 + i % 5 / 10:g} ohm"})
    return steps + [{"repair": "replace_coil", "cured": True}]


def _count(jpath: Path | str) -> int:
    if is_url(str(jpath)):
        try:
            return raw_sql(jpath, "SELECT count(*) FROM event")[0][0]
        except Exception:  # noqa: BLE001 (the tables are not there yet)
            return 0
    jpath = Path(jpath)
    if not jpath.exists():
        return 0
    try:
        conn = sqlite3.connect(f"{jpath.resolve().as_uri()}?mode=ro", uri=True)
        try:
            return conn.execute("SELECT count(*) FROM event").fetchone()[0]
        finally:
            conn.close()
    except sqlite3.OperationalError:  # the tables are not there yet
        return 0


class _Lock:
    """Hold the journal so that a writer blocks before its next event: SQLite's write lock,
    or on PostgreSQL the row locks of the sessions (a writer takes its session's first)."""

    def __init__(self, target: str) -> None:
        self.target = target
        if is_url(target):
            import psycopg

            self.conn = psycopg.connect(target)  # a transaction until rollback
            self.conn.execute("SELECT id FROM session FOR UPDATE")
        else:
            self.conn = sqlite3.connect(target, timeout=10, isolation_level=None)
            self.conn.execute("BEGIN IMMEDIATE")

    def count(self) -> int:
        return self.conn.execute("SELECT count(*) FROM event").fetchone()[0]

    def release(self) -> None:
        if is_url(self.target):
            self.conn.rollback()
        else:
            self.conn.execute("ROLLBACK")
        self.conn.close()


@pytest.mark.skipif(sys.platform == "win32", reason="SIGKILL")
def test_sigkill_part_way_then_resume(tmp_path, capsys, journal_target):
    """Killed while the journal is locked after some events: nothing committed is lost.

    The test waits until the run has written KILL_AT events, then holds the
    journal's write lock, so that the run blocks before its next event; it reads
    what is kept, kills the run with SIGKILL and lets go of the lock. For both
    stores: an SQLite file and a PostgreSQL database.
    """
    steps = _long_steps()
    answers = _answers(tmp_path, "long.yaml", steps)
    ref_path = tmp_path / "ref.sqlite3"
    base = ["--packs", str(FIXTURES), "run", "mini-brake", "--json", "--answers"]
    assert main(["--journal", str(ref_path), *base, answers]) == 0
    ref_sid = json.loads(capsys.readouterr().out)["session"]
    reference = _events(ref_path, ref_sid)

    jpath = journal_target
    proc = subprocess.Popen([sys.executable, "-m", "diagnose", "--journal", str(jpath),
                             *base, answers], stdout=subprocess.DEVNULL,
                            stderr=subprocess.PIPE, env={**os.environ})
    try:
        deadline = time.monotonic() + 30
        while _count(jpath) < KILL_AT:
            assert proc.poll() is None, proc.stderr.read().decode() if proc.stderr else ""
            assert time.monotonic() < deadline, "the run wrote nothing"
            time.sleep(0.002)
        lock = _Lock(str(jpath))  # the run now waits before its next event
        seen = lock.count()
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait(10)
        lock.release()
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(10)
    assert proc.returncode == -signal.SIGKILL

    with open_journal(jpath) as j:  # opens for writing after its checks: not damaged
        (info,) = j.sessions()
        assert j.verify_chain().ok
    sid = info.id
    kept = _events(jpath, sid)
    # The write the run waited in when it was killed: a team journal's write is one
    # statement, already sent, which the server may still commit once the lock is let go
    # (as any commit whose answer never came back). A whole prefix either way.
    assert seen <= len(kept) <= seen + (1 if is_url(str(jpath)) else 0)
    assert HEADER_EVENTS < seen < len(reference)
    assert kept == reference[:len(kept)]  # every committed event, nothing half-written
    done = sum(1 for k, _ in kept if k in STEP_KINDS)
    rest = _answers(tmp_path, "rest.yaml", steps[done:])
    assert main(["--journal", str(jpath), "--packs", str(FIXTURES), "run", "--resume", sid,
                 "--answers", rest, "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["status"] == "closed"
    assert _events(jpath, sid) == reference
    assert _report(jpath, sid) == _report(ref_path, ref_sid)
