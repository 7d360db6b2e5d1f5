"""Cautions and the question on one 80×24 screen, as a terminal emulator shows them.

Every check and repair card of the shipped spring-applied-brake pack is shown
by a real shell (an 80-column console, 24 lines) and the text is fed, with
the prompt and what a terminal prompt draws below it (the rows kept for the
completion menu and the bottom toolbar), through a ``pyte`` screen of 80×24:
every DANGER and WARNING still to be acknowledged and the prompt must be on
that screen together; after the acknowledgement, the first words of the
instruction and the answer's prompt. The nameplate says the axis carries a
gravity load and does not say whether the unit carries people, so that the
most cautions show. The heaviest cards are also asked again after `ranking`,
`why`, `checks` and `help` (the cautions are drawn again above the prompt) and
after `more` (the whole card); long nameplate questions wrap between words.

The last test drives the installed command in an 80×24 pseudo-terminal (the
fixture pack ``tests/fixtures/shell-brake``) to a card with a DANGER, types
``ranking``, then ``help`` (longer than the screen), and reads the emulated
screen: each time the DANGER is drawn again above the prompt.
"""

from __future__ import annotations

import io
import os
import sys
import time
from collections.abc import Callable
from pathlib import Path

import pytest
from rich.console import Console

from diagnose.kb.loader import load_model
from diagnose.session import MemorySink, Session
from diagnose.shell.app import MENU_ROWS, Shell
from diagnose.shell.complete import CompletionState

pyte = pytest.importorskip("pyte", reason="the 80×24 screen tests need pyte (test extra)")

COLUMNS, LINES = 80, 24
TOOLBAR = " site | session t-1 | step 0 | Coil winding or lead open 20% "
MARKS = ("!! DANGER", "! WARNING")
PACK = Path(__file__).parent / "fixtures" / "shell-brake"
TIMEOUT = 30  # generous: a loaded CI machine


@pytest.fixture(scope="module")
def model():
    return load_model("spring-applied-brake")


_RECORDED: dict[tuple[str, str], tuple] = {}  # (pack, mode): the events, recorded once


def session_for(model, mode: str) -> Session:
    """A session with the nameplate that shows the most cautions, and one complaint."""
    events = _RECORDED.get((model.id, mode))
    if events is None:
        s = Session(model, mode=mode, sink=MemorySink(), session_id="t-1")
        chosen = {"gravity_load": "yes", "people_carrying": "unknown"}
        while s.open_parameters():
            pid = s.open_parameters()[0]
            s.set_nameplate(pid, chosen.get(pid) or str(model.parameters[pid].default))
        s.add_complaint(next(iter(model.complaints)))
        events = _RECORDED[(model.id, mode)] = s.events
    return Session.replay(model, events, sink=MemorySink(), session_id="t-1")


class Snapshots:
    """A reader that answers from a script and keeps, at each question, what was on the console."""

    def __init__(self, out: io.StringIO, answer: Callable[[str], str]) -> None:
        self.out = out
        self.answer = answer
        self.asked: list[tuple[str, str]] = []  # (everything printed so far, the prompt)

    def ask(self, message: str, state: CompletionState | None = None, default: str = "") -> str:
        self.asked.append((self.out.getvalue(), message))
        return self.answer(message)


def emulate(printed: str, prompt: str) -> list[str]:
    """The 80×24 screen after ``printed`` and ``prompt``, as a terminal prompt draws it.

    Earlier output fills the screen first; below the prompt's last line the
    prompt keeps MENU_ROWS - 1 rows for the completion menu, then the toolbar.
    """
    screen = pyte.Screen(COLUMNS, LINES)
    stream = pyte.Stream(screen)
    stream.feed("".join(f"earlier output {i}\r\n" for i in range(LINES)))
    stream.feed(printed.replace("\n", "\r\n"))
    stream.feed(prompt.replace("\n", "\r\n"))
    stream.feed("\r\n" * (MENU_ROWS - 1) + "\r\n" + TOOLBAR)
    return [row.rstrip() for row in screen.display]


def words(rows: list[str]) -> str:
    """The screen's text without the card borders, as one line of single-spaced words."""
    inner = [row.strip().strip("│╭╮╰╯─").strip() for row in rows]
    return " ".join(" ".join(inner).split())


def flat(text: str) -> str:
    return " ".join(text.split())


def items(model) -> list[tuple[str, str, str]]:
    """(mode, kind, id): every card on site, and the cards that phone mode offers."""
    out = [("site", "check", c) for c in model.checks]
    out += [("site", "repair", r) for r in model.repairs]
    out += [("phone", "check", c.id) for c in model.checks.values() if c.phone_ok]
    out += [("phone", "repair", r.id) for r in model.repairs.values() if r.where == "phone"]
    return out


def shown_card(model, mode: str, kind: str, item: str, answer: Callable[[str], str]
               ) -> tuple[Shell, Snapshots, tuple]:
    """Run the shell's turn for one card with scripted answers.

    Returns the shell, the reader and the cautions pending before the card.
    """
    s = session_for(model, mode)
    out = io.StringIO()
    console = Console(file=out, width=COLUMNS, height=LINES, color_system=None)
    reader = Snapshots(out, answer)
    shell = Shell(s, console, reader)
    pending = s.pending_cautions(item)
    if kind == "check":
        shell.check_turn(item, None)
    else:
        shell.repair_turn(item, None)
    return shell, reader, pending


def _ids(model_items):
    return [f"{m}-{k}-{i}" for m, k, i in model_items]


ITEMS = items(load_model("spring-applied-brake"))


@pytest.mark.parametrize(("mode", "kind", "item"), ITEMS, ids=_ids(ITEMS))
def test_dangers_and_warnings_are_on_screen_with_the_prompt(model, mode, kind, item):
    shell, reader, pending = shown_card(model, mode, kind, item, lambda message: "skip")
    printed, prompt = reader.asked[0]
    rows = emulate(printed, prompt)
    visible = words(rows)
    screen = "\n".join(rows)
    for caution in pending:
        assert flat(caution.text) in visible, f"{caution.id} not whole on screen:\n{screen}"
    marks = sum(row.count(f"│ {mark}  ") for row in rows for mark in MARKS)
    assert marks == len(pending), screen
    if pending:
        assert prompt.startswith("Type ack to confirm you have read the")
    assert flat(prompt) in visible, screen
    assert rows[-1] == TOOLBAR.rstrip()
    # the card is on screen from its title down (at 80×24 every card of the pack fits)
    title = shell.model.checks[item].title if kind == "check" else shell.model.repairs[item].title
    assert any(row.startswith("╭─") and title[:40] in row for row in rows), screen


@pytest.mark.parametrize(("mode", "kind", "item"), ITEMS, ids=_ids(ITEMS))
def test_the_instruction_begins_on_screen_with_the_answer_prompt(model, mode, kind, item):
    def answer(message: str) -> str:
        return "ack" if message.startswith("Type ack") else "skip"

    shell, reader, _ = shown_card(model, mode, kind, item, answer)
    asked = [(p, m) for p, m in reader.asked if not m.startswith("Type ack")]
    printed, prompt = asked[0]
    rows = emulate(printed, prompt)
    thing = shell.model.checks[item] if kind == "check" else shell.model.repairs[item]
    text = (thing.caller or thing.ask) if mode == "phone" and kind == "check" else thing.ask
    first = " ".join(flat(text).split()[:8])
    assert first in words(rows), "\n".join(rows)
    assert flat(prompt) in words(rows)


@pytest.fixture(scope="module")
def heaviest(model) -> list[tuple[str, str, str]]:
    """Every card, the one with the most DANGER/WARNING text still to acknowledge first."""
    sessions = {mode: session_for(model, mode) for mode in ("site", "phone")}

    def weight(entry: tuple[str, str, str]) -> int:
        mode, _, item = entry
        return sum(len(c.text) for c in sessions[mode].pending_cautions(item))

    return sorted(items(model), key=weight, reverse=True)


@pytest.mark.parametrize("command", ["ranking", "why", "checks", "help"])
def test_cautions_are_drawn_again_above_the_prompt_after_a_command(model, heaviest, command):
    for mode, kind, item in heaviest[:5]:
        script = iter([command, "skip", "skip", "skip"])
        shell, reader, pending = shown_card(model, mode, kind, item, lambda m: next(script))
        assert pending and len(reader.asked) >= 2
        printed, prompt = reader.asked[1]  # the acknowledgement asked again after the command
        assert prompt == reader.asked[0][1]
        since = printed[len(reader.asked[0][0]):]
        assert since.rstrip().endswith("╯") and "more: the whole card" in since
        rows = emulate(printed, prompt)
        visible = words(rows)
        for caution in pending:
            assert flat(caution.text) in visible, f"{item}: {caution.id}\n" + "\n".join(rows)
        assert flat(prompt) in visible


def test_more_shows_the_whole_card_at_its_prompt(model, heaviest):
    mode, kind, item = next(e for e in heaviest if e[1] == "repair"
                            and len(model.repairs[e[2]].fixes) > 1)
    script = iter(["more", "skip", "skip"])
    shell, reader, pending = shown_card(model, mode, kind, item, lambda m: next(script))
    compact, whole = reader.asked[0][0], reader.asked[1][0][len(reader.asked[0][0]):]
    n = len(model.repairs[item].fixes)
    assert f"Fixes: {n} causes (more)" in compact
    fixes = "; ".join(shell.model.causes[c].title for c in model.repairs[item].fixes
                      if c in shell.model.causes)
    assert flat(fixes) in words(whole.splitlines())
    assert all(flat(c.text) in words(whole.splitlines()) for c in pending)
    assert reader.asked[1][1] == reader.asked[0][1]  # then the same question again


@pytest.mark.parametrize("pid", ["supply_kind", "people_carrying"])
def test_prompts_wrap_between_words(model, pid):
    """A terminal prompt breaks a long question anywhere ("recti" / "fied"): the shell breaks it
    between words first, to the console's width."""
    s = Session(model, sink=MemorySink(), session_id="t-1")
    while s.open_parameters()[0] != pid:
        s.set_nameplate(s.open_parameters()[0], "unknown")
    out = io.StringIO()
    reader = Snapshots(out, lambda message: "unknown" if pid == "people_carrying" else "")
    shell = Shell(s, Console(file=out, width=COLUMNS, height=LINES, color_system=None), reader)
    shell.ask_parameter(pid)
    assert pid in s.evidence.nameplate
    asked = reader.asked[-1][1]
    lines = asked.split("\n")
    assert len(lines) > 1 and all(len(line) < COLUMNS for line in lines)
    assert " ".join(lines).startswith(model.parameters[pid].prompt)  # no word broken
    assert asked.endswith(": ")
    if pid == "supply_kind":
        assert "(converter/battery/rectified) [converter]: " in asked


# --- the real command in an emulated 80×24 terminal ------------------------------------------

class Terminal(pyte.Screen):
    """An 80×24 screen that answers the program's cursor position requests, as a terminal does."""

    def __init__(self, child) -> None:
        super().__init__(COLUMNS, LINES)
        self.child = child

    def write_process_input(self, data: str) -> None:
        self.child.send(data)


def test_the_danger_is_drawn_again_above_the_prompt_after_ranking(tmp_path):
    pexpect = pytest.importorskip("pexpect")
    env = {**os.environ, "TERM": "xterm-256color", "COLUMNS": str(COLUMNS),
           "LINES": str(LINES), "NO_COLOR": "1",
           "DIAGNOSE_JOURNAL": str(tmp_path / "journal.sqlite3"),
           "XDG_STATE_HOME": str(tmp_path / "state")}
    child = pexpect.spawn(sys.executable, ["-m", "diagnose", "start", str(PACK)], env=env,
                          dimensions=(LINES, COLUMNS), encoding="utf-8", timeout=TIMEOUT,
                          cwd=str(tmp_path))
    screen = Terminal(child)
    stream = pyte.Stream(screen)

    def rows() -> list[str]:
        return [row.rstrip() for row in screen.display]

    def wait(shown: Callable[[list[str]], bool], what: str) -> list[str]:
        deadline = time.monotonic() + TIMEOUT
        while not shown(rows()):
            if time.monotonic() > deadline:
                raise AssertionError(f"not shown within {TIMEOUT} s: {what}\n" + "\n".join(rows()))
            try:
                stream.feed(child.read_nonblocking(4096, timeout=0.1))
            except pexpect.TIMEOUT:
                continue
        return rows()

    def at_prompt(start: str) -> Callable[[list[str]], bool]:
        """The cursor waits on a row that starts with ``start``, and the toolbar is drawn."""
        return lambda r: (r[screen.cursor.y].startswith(start) and "| step" in r[-1])

    danger = "│ !! DANGER  Isolate and lock out the supply before hands-on work."
    ack = "Type ack to confirm you have read the DANGER above (or skip):"
    try:
        wait(lambda r: any("Press Enter once you have read" in row for row in r), "the notice")
        child.send("\r")
        for _ in range(3 + 4):  # keep the nameplate's defaults, skip the identity
            wait(lambda r: r[screen.cursor.y].endswith(":") or "]:" in r[screen.cursor.y],
                 "a question")
            before = screen.cursor.y, rows()[screen.cursor.y]
            child.send("\r")
            wait(lambda r, b=before: (screen.cursor.y, r[screen.cursor.y]) != b, "the next one")
        wait(at_prompt("Complaint (number or words of it):"), "the complaint")
        child.send("release\r")
        wait(at_prompt("Another complaint?"), "another complaint")
        child.send("\r")
        wait(lambda r: "| step 0 |" in r[-1] and any("Most likely causes" in x for x in r),
             "the first card")
        child.send("do coil_resistance\r")
        card = wait(at_prompt(ack), "the acknowledgement")
        assert any(row.startswith(danger) for row in card), "\n".join(card)
        child.send("ranking\r")
        after = wait(lambda r: any(row.endswith("(or skip): ranking") for row in r)
                     and at_prompt(ack)(r), "the prompt again after the ranking")
        echo = next(i for i, row in enumerate(after) if row.endswith("(or skip): ranking"))
        assert any("Most likely causes" in row for row in after[echo:])
        redrawn = [i for i, row in enumerate(after) if row.startswith(danger)]
        assert redrawn and redrawn[-1] > echo, "\n".join(after)  # drawn again, below the ranking
        assert after[screen.cursor.y].startswith(ack)
        # help is longer than the screen: the card is gone, its DANGER is drawn again
        child.send("help\r")
        helped = wait(lambda r: any(row.startswith("At a check or repair, more") for row in r)
                      and at_prompt(ack)(r), "the prompt again after the help")
        assert not any("Acknowledge the cautions above" in row for row in helped)  # card gone
        assert any(row.startswith(danger) for row in helped), "\n".join(helped)
        assert "Traceback" not in "\n".join(after + helped)
    finally:
        child.close(force=True)
