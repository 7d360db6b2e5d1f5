"""A real shell session killed with SIGKILL loses nothing it had taken, and resumes to the same log.

The shell runs as `diagnose start` in a subprocess fed from a pipe. A kill
point is "after line k": the line was read (the process's read count moved)
and the shell is blocked reading the next one, so everything line k caused
is on screen. At that point another connection reads the journal; after
SIGKILL the journal must hold exactly those events, open without damage,
and `diagnose resume ID` fed the remaining lines must end with the events
and the repair log of an uninterrupted run. The kills run against both
stores: an SQLite file and a PostgreSQL database (a few kill points there,
as each costs several processes).
"""

from __future__ import annotations

import os
import re
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest
from test_journal_store import FIXTURES, mini_model

from diagnose.journal.record import session_record
from diagnose.journal.report import render_report
from diagnose.journal.stores import open_journal

# The checks and the repair are chosen with `do` and `repair`, so that the script does not
# depend on what the planner proposes.
# A DANGER caution is acknowledged on each card that carries it: the check's and the repair's.
LINES = ["24 V", "20 W", "", "", "", "SN-7", "will_not_release", "do coil_resistance", "ack",
         "OL", "do listen_click", "silent", "note lead <b>burnt</b> near the gland",
         "repair replace_coil", "ack", "yes", "", ""]  # no parts fitted; Enter: the finding
# After: the nameplate, the complaint, the caution acknowledged, a reading, a note, the
# repair card's acknowledgement.
KILL_AFTER = [2, 7, 9, 10, 13, 15]
PG_KILL_AFTER = [7, 13]  # a reading taken; a repair's card acknowledged
# A choice made with `do` is not an event: after a resume it is made again. A repair whose
# card was read is pending: the resumed shell takes it up again by itself (after line 15).
AGAIN = {9: ["do coil_resistance"]}

pytestmark = pytest.mark.skipif(not Path("/proc/self/syscall").exists(),
                                reason="needs Linux /proc to see a process wait for input")


class Shell:
    """`diagnose ... start|resume` in a subprocess, its output drained by a thread."""

    def __init__(self, jpath: Path | str, *args: str) -> None:
        env = {**os.environ, "COLUMNS": "100"}
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "diagnose", "--journal", str(jpath), "--packs", str(FIXTURES),
             *args], stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.STDOUT,
            env=env)
        self.screen = b""
        self._reader = threading.Thread(target=self._drain, daemon=True)
        self._reader.start()

    def _drain(self) -> None:
        assert self.proc.stdout is not None
        for chunk in iter(lambda: self.proc.stdout.read1(4096), b""):
            self.screen += chunk

    def _read_count(self) -> int:
        for line in Path(f"/proc/{self.proc.pid}/io").read_text().splitlines():
            if line.startswith("rchar:"):
                return int(line.split()[1])
        return 0

    def _waits_for_input(self) -> bool:
        try:
            fields = Path(f"/proc/{self.proc.pid}/syscall").read_text().split()
            wchan = Path(f"/proc/{self.proc.pid}/wchan").read_text()
        except OSError:
            return False
        return len(fields) > 1 and fields[1] == "0x0" and "pipe" in wchan

    def wait_for_input(self, timeout: float = 30) -> None:
        deadline = time.monotonic() + timeout
        while not self._waits_for_input():
            if self.proc.poll() is not None:
                raise AssertionError(f"the shell ended early:\n{self.screen.decode()}")
            if time.monotonic() > deadline:
                raise AssertionError(f"the shell did not ask again:\n{self.screen.decode()}")
            time.sleep(0.01)

    def answer(self, line: str) -> None:
        """Send one line and wait until the shell has read it and asks for the next."""
        before = self._read_count()
        assert self.proc.stdin is not None
        self.proc.stdin.write(line.encode() + b"\n")
        self.proc.stdin.flush()
        deadline = time.monotonic() + 30
        while self._read_count() == before:
            if time.monotonic() > deadline:
                raise AssertionError("the shell did not read the line")
            time.sleep(0.005)
        self.wait_for_input()

    def finish(self, lines: list[str]) -> str:
        self.proc.communicate("".join(f"{x}\n" for x in lines).encode(), timeout=60)
        self._reader.join(5)
        return self.screen.decode()

    def kill(self) -> None:
        os.kill(self.proc.pid, signal.SIGKILL)
        self.proc.wait(10)


def _events(jpath: Path | str, sid: str | None = None) -> tuple[str, list[tuple[str, dict]]]:
    """The session's events, less the reminders: those record which cards were on screen,
    and a resumed shell shows its current card again (one more reminder, no lost answer)."""
    with open_journal(jpath, readonly=True) as j:
        sid = sid or j.sessions()[0].id
        return sid, [(e.kind, e.data) for e in j.load_events(sid) if e.kind != "reminder"]


def _report(jpath: Path | str, sid: str) -> str:
    with open_journal(jpath, readonly=True) as j:
        uid = j.session(sid).uid  # a session's UUID differs from run to run, as its id
        text = render_report(session_record(j, sid, mini_model()), "md").replace(sid, "ID")
        text = text.replace(uid, "UID")
    # the clock differs between two runs: times, and minutes counted on the clock
    text = re.sub(r"\d{4}-\d\d-\d\d", "DATE", text)
    text = re.sub(r"\d\d:\d\d(:\d\d)?( UTC| [+-]\d\d:\d\d)?", "TIME", text)
    text = re.sub(r"\([\d.]+ min\)|[\d.]+ min on the clock", "N min", text)
    return re.sub(r"minutes to the cure \| [\d.]+ min", "minutes to the cure | N", text)


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    """An uninterrupted run of the same lines: its events and its repair log."""
    jpath = tmp_path_factory.mktemp("ref") / "journal.sqlite3"
    shell = Shell(jpath, "start", "mini-brake")
    shell.finish(LINES)
    sid, events = _events(jpath)
    # Every line that makes an event made it (how the shell closes is its own business).
    assert [k for k, _ in events][:12] == ["notice", "nameplate", "nameplate", "identity",
                                           "complaint", "ack", "reading", "answer", "note",
                                           "ack", "repair_started", "repair"], \
        shell.screen.decode()
    assert [d.get("item") for k, d in events if k == "ack"] == ["coil_resistance",
                                                                 "replace_coil"]
    assert events[11][1] == {"repair": "replace_coil", "cured": True}
    return events, _report(jpath, sid)


@pytest.fixture(params=["sqlite", "postgresql"])
def store(request):
    return request.param


def _target(request, tmp_path, store) -> str:
    if store == "postgresql":
        return request.getfixturevalue("pg_url")
    return str(tmp_path / "journal.sqlite3")


@pytest.mark.parametrize("k, kind", [(k, "sqlite") for k in KILL_AFTER]
                         + [(k, "postgresql") for k in PG_KILL_AFTER])
def test_kill_after_a_step_then_resume(request, tmp_path, reference, k, kind):
    ref_events, ref_report = reference
    jpath = _target(request, tmp_path, kind)
    shell = Shell(jpath, "start", "mini-brake")
    shell.wait_for_input()
    for line in LINES[:k]:
        shell.answer(line)
    on_screen = shell.screen.decode()
    assert f": {LINES[k - 1]}".rstrip() in on_screen  # the last answer was taken and shown
    sid, seen = _events(jpath)  # what another reader sees while the shell waits
    shell.kill()

    sid, kept = _events(jpath, sid)
    assert kept == seen  # nothing acknowledged was lost, nothing half-written appeared
    assert kept == ref_events[: len(kept)]
    with open_journal(jpath) as j:  # opens for writing: not damaged
        assert j.verify_chain().ok

    resumed = Shell(jpath, "resume", sid)
    resumed.finish(AGAIN.get(k, []) + LINES[k:])
    _, final = _events(jpath, sid)
    assert final == ref_events, resumed.screen.decode()
    assert _report(jpath, sid) == ref_report


@pytest.mark.parametrize("delay", [0.05, 0.3])
def test_kill_at_any_moment_leaves_a_sound_prefix(request, tmp_path, reference, delay, store):
    ref_events, _ = reference
    jpath = _target(request, tmp_path, store)
    shell = Shell(jpath, "start", "mini-brake")
    shell.wait_for_input()
    assert shell.proc.stdin is not None
    shell.proc.stdin.write("".join(f"{x}\n" for x in LINES).encode())
    shell.proc.stdin.flush()
    time.sleep(delay)
    shell.kill()
    with open_journal(jpath) as j:  # opens for writing after the checks: not damaged
        sid = j.sessions()[0].id
        assert j.verify_chain().ok
    _, kept = _events(jpath, sid)
    assert kept == ref_events[: len(kept)] and kept[0][0] == "notice"
