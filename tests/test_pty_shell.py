"""End to end: a whole diagnosis typed into the installed shell in a real pseudo-terminal.

The fixture pack ``tests/fixtures/shell-brake`` keeps the ids stable. The
run: start, the safety notice read while the pack loads (Enter), nameplate
(with one refused value), site, complaint, three checks (a coil resistance
reading with its unit behind a DANGER acknowledgement, two outcomes, the
second DANGER card acknowledged again), a repair that does not cure, `save`
and `quit`; then `diagnose resume ID` (without ``--packs``: the session
recorded the pack's folder) continues it in a new terminal: another check, a
repair that cures, and the end with the cured cause and the repair log.
"""

from __future__ import annotations

import os
import re
import sys
import time
from pathlib import Path

import pytest

pexpect = pytest.importorskip("pexpect")

PACK = Path(__file__).parent / "fixtures" / "shell-brake"
ANSI = re.compile(r"\x1b\[[0-?]*[ -/]*[@-~]|\x1b[()][0-9A-Za-z]|\x1b[=>]|\r")
CPR = "\x1b[6n"  # "where is the cursor?"
TIMEOUT = 60  # generous: a loaded CI machine


class Screen:
    """A pexpect child and everything it has shown, as plain text without escape sequences.

    Text is matched on the plain text, since rich puts style codes inside a line
    ("Parts: " in bold, then the parts). A cursor position request is answered as a
    terminal would, so that prompt_toolkit knows the screen's height and draws the
    bottom toolbar.
    """

    def __init__(self, child: pexpect.spawn) -> None:
        self.child = child
        self.raw = ""  # received, not yet turned into plain text (may end inside a sequence)
        self.text = ""  # plain text shown so far
        self.pos = 0  # how much of ``text`` earlier waits consumed

    def _feed(self, data: str) -> None:
        self.raw += data
        cut = self.raw.rfind("\x1b")
        if cut != -1 and len(self.raw) - cut < 32 and not ANSI.match(self.raw, cut):
            done, self.raw = self.raw[:cut], self.raw[cut:]
        else:
            done, self.raw = self.raw, ""
        for _ in range(done.count(CPR)):
            self.child.send("\x1b[1;1R")
        self.text += ANSI.sub("", done)

    def wait(self, literal: str) -> str:
        """Wait until ``literal`` is shown after what earlier waits consumed; return that text."""
        deadline = time.monotonic() + TIMEOUT
        while True:
            found = self.text.find(literal, self.pos)
            if found != -1:
                end = found + len(literal)
                chunk, self.pos = self.text[self.pos:end], end
                return chunk
            if time.monotonic() > deadline:
                raise AssertionError(f"not shown within {TIMEOUT} s: {literal!r}; shown last: "
                                     f"{self.text[self.pos:][-800:]!r}")
            try:
                self._feed(self.child.read_nonblocking(4096, timeout=0.2))
            except pexpect.TIMEOUT:
                continue
            except pexpect.EOF:
                raise AssertionError(f"the shell ended before showing {literal!r}; shown last: "
                                     f"{self.text[self.pos:][-800:]!r}") from None

    def type(self, line: str) -> None:
        self.child.send(line + "\r")

    def close(self) -> int:
        """Wait for the end of the program; its exit status."""
        self.child.expect(pexpect.EOF, timeout=TIMEOUT)
        self.child.close()
        return self.child.exitstatus


def spawn(args: list[str], tmp_path: Path) -> Screen:
    env = {**os.environ, "TERM": "xterm-256color", "COLUMNS": "80", "LINES": "40",
           "NO_COLOR": "1",
           "DIAGNOSE_JOURNAL": str(tmp_path / "journal.sqlite3"),
           "XDG_STATE_HOME": str(tmp_path / "state")}
    child = pexpect.spawn(sys.executable, args, env=env, dimensions=(40, 80),
                          encoding="utf-8", timeout=TIMEOUT, cwd=str(tmp_path))
    return Screen(child)


def test_a_whole_diagnosis_in_a_terminal(tmp_path):
    s = spawn(["-m", "diagnose", "start", str(PACK)], tmp_path)
    s.wait("Safety notice")
    s.wait("lock out power before hands-on work")
    s.wait("Press Enter once you have read the safety notice")
    s.type("")
    s.wait("Rated coil voltage on the nameplate")
    s.type("24 kg")
    s.wait("Not accepted: rated_voltage: expected a voltage (for example 24 V), got '24 kg'")
    s.type("24 V")
    s.wait("rated_voltage = 24 V")
    s.wait("Rated coil power")
    s.type("20 W")
    s.wait("Coil temperature now")
    s.type("")
    s.wait("Site or customer")
    s.type("Plant 4")
    for label in ("Machine", "Axis", "Brake serial number"):
        s.wait(label)
        s.type("")
    s.wait("Complaint (number or words of it)")
    s.type("release")
    s.wait("complaint: Brake will not release")
    s.wait("Another complaint?")
    s.type("")
    s.wait("Most likely causes")
    s.wait(" site | session ")  # the bottom toolbar, drawn after the prompt

    # check 1: a reading with its unit, behind a DANGER acknowledgement
    s.type("do coil_resistance")
    s.wait("Check: Coil resistance, leads disconnected")
    card = s.wait("Acknowledge the cautions above to see the instructions.")
    assert "!! DANGER  Isolate and lock out the supply" in card
    assert "disconnect both coil leads" not in card
    s.wait("Type ack to confirm you have read the DANGER above")
    s.type("ack")
    s.wait("acknowledged: lockout")
    s.wait("Isolate, disconnect both coil leads and measure across the coil.")
    s.wait("Reading (ohm if no unit is given)")
    s.type("3.2 ohm")
    # V²/P = 24² / 20 = 28.8 ohm expected at 20 °C (DOMAIN.md, "Coil")
    s.wait("expected 28.8 ohm at 20 °C, measured 3.2 ohm: shorted turns")
    s.wait("Most likely causes")
    s.wait("| step 1 | Coil with shorted turns")

    # check 2 and 3: outcomes
    s.type("do listen_click")
    s.wait("Check: Listen for the click at switch-on")
    s.wait("Answer (click/silent, unsure, skip)")
    s.type("silent")
    s.wait("Listen for the click at switch-on: silent (no click)")
    s.wait("| step 2 |")
    s.type("do fuse_state")
    s.wait("Check: Test the brake fuse for continuity")
    s.wait("Type ack to confirm you have read the DANGER above")  # again: power was on
    s.type("ack")
    s.wait("Answer (intact/blown, unsure, skip)")
    s.type("intact")
    s.wait("Test the brake fuse for continuity: intact")
    s.wait("| step 3 |")

    # a repair that does not cure
    s.type("repair replace_disc")
    s.wait("Repair: Replace the friction disc and set the gap")
    s.wait("(acknowledged, still applies)")  # still isolated since the fuse: a reminder
    s.wait("Parts: friction disc")
    s.wait("Is the complaint cured? (yes/no, skip)")
    s.type("no")
    s.wait("Parts fitted")
    s.type("")  # none
    s.wait("not cured; the ranking is updated")
    s.wait("| step 4 |")

    # save and quit keep the session resumable
    s.type("save")
    s.wait("Saved: every answer is in the journal")
    s.type("quit")
    s.wait("Resume with:")
    s.wait("diagnose resume ")
    sid = re.match(r"\S+", s.wait(" ")).group(0)
    assert s.close() == 0

    # `diagnose resume ID` (the journal's command) hands the session back to the shell
    r = spawn(["-m", "diagnose", "resume", sid], tmp_path)
    r.wait(f"Resuming session {sid}")
    r.wait("| step 4 |")
    # another check, then the repair that cures
    r.type("do drive_display")
    r.wait("Check: Read the drive's display")
    r.wait("Answer (brake_fault/other, unsure, skip)")
    r.type("other")
    r.wait("Read the drive's display: other")
    r.wait("| step 5 |")
    r.type("repair replace_coil")
    r.wait("Repair: Replace the magnet body with its coil")
    r.wait("Type ack to confirm you have read the DANGER above")
    r.type("ack")
    r.wait("Is the complaint cured? (yes/no, skip)")
    r.type("yes")
    r.wait("Parts fitted")
    r.type("1 #MB-24")
    r.wait("cured.")
    r.wait("Cured. Cause: Coil with shorted turns")
    r.wait(f"diagnose report {sid}")
    r.wait("What did you find? [Coil with shorted turns]")
    r.type("")
    r.wait("is closed")
    assert r.close() == 0
    assert "Traceback" not in s.text + r.text


def test_ctrl_c_clears_and_ctrl_d_asks_before_leaving(tmp_path):
    s = spawn(["-m", "diagnose", "start", str(PACK)], tmp_path)
    s.wait("Press Enter once you have read the safety notice")
    s.type("")
    s.wait("Rated coil voltage on the nameplate")
    s.child.send("garbage")
    s.child.sendcontrol("c")
    s.type("24")
    s.wait("rated_voltage = 24 V")
    s.wait("Rated coil power")
    s.child.sendcontrol("d")
    s.wait("Save and leave?")
    s.type("no")
    s.wait("Rated coil power")
    s.child.sendcontrol("d")
    s.wait("Save and leave?")
    s.type("yes")
    s.wait("Resume with:")
    s.wait("diagnose resume")
    assert s.close() == 0


def test_ctrl_d_at_the_notice_leaves_before_anything_is_recorded(tmp_path):
    s = spawn(["-m", "diagnose", "start", str(PACK)], tmp_path)
    s.wait("Safety notice")
    s.wait("Press Enter once you have read the safety notice")
    s.child.sendcontrol("d")
    s.wait("Left before the diagnosis started: nothing was recorded.")
    assert s.close() == 0
    assert not (tmp_path / "journal.sqlite3").exists() or _sessions(tmp_path) == 0


def _sessions(tmp_path: Path) -> int:
    from diagnose.journal.store import Journal

    with Journal(str(tmp_path / "journal.sqlite3"), readonly=True) as j:
        return len(j.sessions())
