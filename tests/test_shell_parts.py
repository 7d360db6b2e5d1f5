"""The shell's parts on their own: rendering, completion, key bindings, commands, entry points."""

from __future__ import annotations

import argparse
import io
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest
from prompt_toolkit.completion import CompleteEvent
from prompt_toolkit.document import Document
from rich.console import Console

from diagnose.kb.loader import load_model
from diagnose.session import MemorySink, Session
from diagnose.shell import commands
from diagnose.shell.app import Shell
from diagnose.shell.complete import CompletionState, ShellCompleter, choose, matches
from diagnose.shell.entry import main, resume
from diagnose.shell.keys import load_shell_bindings
from diagnose.shell.reader import LineReader, history_path
from diagnose.views import (
    CautionView,
    CheckCard,
    EndView,
    RankingView,
    RankRow,
    RepairCard,
    bar,
    percent,
)

ROOT = Path(__file__).parent.parent
PACK = Path(__file__).parent / "fixtures" / "shell-brake"


def render(obj, width: int = 80) -> str:
    out = io.StringIO()
    Console(file=out, width=width, color_system=None).print(obj)
    return out.getvalue()


@pytest.fixture(scope="module")
def model():
    return load_model(str(PACK))


# --- rendering -------------------------------------------------------------------------------

def test_ranking_bars_and_the_unknown_line():
    view = RankingView((RankRow("a", "Fuse blown", 0.62), RankRow("b", "Coil open", 0.30)),
                       RankRow("unknown", "None of the known causes", 0.08))
    text = render(view)
    lines = text.splitlines()
    assert lines[0].startswith("Most likely causes")
    assert "Fuse blown" in lines[1] and "62%" in lines[1] and "█" * 12 in lines[1]
    assert "None of the known causes" in lines[3] and "8%" in lines[3]
    hidden = RankingView((RankRow("a", "Fuse blown", 0.99),),
                         RankRow("unknown", "None of the known causes", 0.001))
    assert "None of the known causes" not in render(hidden)


@pytest.mark.parametrize(("share", "expected"), [(0.0, " " * 8), (0.5, "████    "),
                                                 (1.0, "█" * 8), (0.0625, "▌" + " " * 7)])
def test_bar(share, expected):
    assert bar(share, 8) == expected


@pytest.mark.parametrize(("p", "text"), [(0.0, "0%"), (0.004, "<1%"), (0.5, "50%"),
                                         (0.999, ">99%"), (1.0, "100%")])
def test_percent(p, text):
    assert percent(p) == text


def test_check_card_shows_cautions_first_and_hides_instructions_until_acknowledged():
    card = CheckCard("coil_resistance", "Coil resistance", 10, ("multimeter",),
                     (CautionView("DANGER", "Lock out the supply."),), "it tells a lot",
                     None, (), "ohm")
    text = render(card)
    assert text.index("DANGER") < text.index("Why:") < text.index("Time: 10 min")
    assert "Acknowledge the cautions above" in text
    shown = render(CheckCard("coil_resistance", "Coil resistance", 10, ("multimeter",),
                             (CautionView("DANGER", "Lock out the supply."),), "",
                             "Measure across the coil.", (), "ohm"))
    assert "Measure across the coil." in shown and "a bare number is in ohm" in shown
    assert all(len(line) <= 80 for line in shown.splitlines())


def test_repair_card_and_end_view():
    text = render(RepairCard("replace_coil", "Replace the magnet body", 60,
                             ("magnet body with coil, to the nameplate",),
                             (CautionView("DANGER", "Lock out."),), ("Coil open",), "",
                             "Exchange it.", "confirm with: Listen"))
    assert text.index("DANGER") < text.index("Parts: magnet body with coil, to the nameplate")
    assert "Time: 1 h" in text and "is the complaint cured" in text
    end = render(EndView("visit", "Recommendation: send a technician to the site.", (),
                         ("fuse", "coil cable"), "diagnose report 1 (journal j)"))
    assert "Parts to bring: fuse; coil cable" in end and "Repair log: diagnose report 1" in end


# --- completion ------------------------------------------------------------------------------

def completions(state: CompletionState, text: str) -> list[str]:
    comp = ShellCompleter(lambda: state)
    return [c.text for c in comp.get_completions(Document(text), CompleteEvent())]


def test_complaints_complete_on_any_word_of_the_title():
    state = CompletionState(answers=(("will_not_release", "Brake will not release"),
                                     ("will_not_hold", "Brake will not hold, the axis slips")))
    assert completions(state, "rel") == ["will_not_release"]
    assert completions(state, "axis") == ["will_not_hold"]
    assert completions(state, "brake") == ["will_not_release", "will_not_hold"]


def test_outcomes_commands_and_arguments_complete_from_live_state():
    live = {"state": CompletionState(answers=(("click", "a clear click"), ("silent", "no click")),
                                     commands=(("do", "do a check"), ("quit", "leave")),
                                     arguments={"do": (("coil_resistance", "Coil resistance"),
                                                       ("listen_click", "Listen"))})}
    comp = ShellCompleter(lambda: live["state"])

    def texts(t):
        return [c.text for c in comp.get_completions(Document(t), CompleteEvent())]

    assert texts("si") == ["silent"]
    assert texts("q") == ["quit"]
    assert texts("do res") == ["coil_resistance"]
    assert texts("quit x") == []
    live["state"] = CompletionState(answers=(("yes", "cured"), ("no", "not cured")))
    assert texts("y") == ["yes"]


def test_matching_helpers():
    assert matches("coil res", "coil_resistance", "Coil resistance, leads disconnected")
    assert not matches("fuse", "coil_open", "Coil winding open")
    assert choose("silent", [("click", "x"), ("silent", "y")]) == [("silent", "y")]


# --- key bindings ----------------------------------------------------------------------------

def test_key_bindings_have_one_line_help():
    kb = load_shell_bindings()
    keys = {tuple(str(k) for k in b.keys) for b in kb.bindings}
    assert ("Keys.ControlC",) in keys
    for b in kb.bindings:
        doc = (b.handler.__doc__ or "").strip()
        assert doc and "\n" not in doc


# --- commands: help and README ---------------------------------------------------------------

def test_every_command_has_help_and_is_in_the_readme():
    docs = (ROOT / "README.md").read_text(encoding="utf-8")
    expected = {"help", "why", "ranking", "checks", "do", "undo", "note", "repair", "calc",
                "mode", "save", "quit", "nameplate"}
    assert expected <= set(commands.COMMANDS)
    for name, cmd in commands.COMMANDS.items():
        assert cmd.help, f"command {name} has no docstring"
        assert re.search(rf"`{re.escape(cmd.usage)}`", docs), f"{cmd.usage} is not in the README"


# --- history, start parser -------------------------------------------------------------------

def test_history_goes_to_the_users_state_folder(tmp_path):
    assert history_path({"XDG_STATE_HOME": str(tmp_path)}) == tmp_path / "diagnose" / "history"
    assert history_path({"XDG_STATE_HOME": "relative"}).parts[-2:] == ("diagnose", "history")


def test_start_parser():
    from diagnose.cli import build_parser

    args = build_parser().parse_args(["start", "mini-brake", "--mode", "phone"])
    assert (args.pack, args.mode) == ("mini-brake", "phone")


def test_toolbar_text(model):
    session = Session(model, sink=MemorySink(), session_id="s-9")
    shell = Shell(session, Console(file=io.StringIO()), None)
    assert shell.toolbar() == " site | session s-9 | step 0 | - "
    session.add_complaint("will_not_release")
    session.answer("listen_click", "silent")
    top = session.ranking().top  # the leading cause by its title, not its id
    assert shell.toolbar() == f" site | session s-9 | step 1 | {top.title} {percent(top.p)} "
    shell.model.causes[top.cause]  # a cause of the pack
    assert len(shell.toolbar()) <= 80


# --- entry points: journal, line-by-line input, resume ---------------------------------------

def args_for(pack: str = str(PACK), mode: str = "site") -> argparse.Namespace:
    return argparse.Namespace(pack=pack, mode=mode, packs=[], journal=None, no_learned=True)


def run_lines(func, lines: list[str], *extra):
    out = io.StringIO()
    con = Console(file=out, width=80, color_system=None)
    reader = LineReader(io.StringIO("\n".join(lines) + "\n"), con)
    status = func(*extra, console=con, reader=reader)
    return status, out.getvalue()


def test_save_quit_and_resume_through_the_journal():
    from diagnose.journal.store import Journal

    status, screen = run_lines(main, ["", "", "", "", "", "", "", "release", "",
                                      "do listen_click", "silent", "save", "quit"], args_for())
    assert status == 0
    sid = re.search(r"Resume with:\s+diagnose resume (\S+)", screen).group(1)
    with Journal(os.environ["DIAGNOSE_JOURNAL"], readonly=True) as j:
        kinds = [e.kind for e in j.load_events(sid)]
        assert j.session(sid).is_open
    assert kinds == ["notice", "nameplate", "nameplate", "nameplate", "complaint", "answer"]

    status, screen = run_lines(resume, ["repair replace_coil", "ack", "yes", "", ""], args_for(),
                               sid)
    assert status == 0
    assert f"Resuming session {sid}" in screen and "Safety notice" not in screen
    assert "Cured." in screen
    with Journal(os.environ["DIAGNOSE_JOURNAL"], readonly=True) as j:
        info = j.session(sid)
        kinds = [e.kind for e in j.load_events(sid)]
    assert not info.is_open and info.cause == "coil_open"
    assert kinds[-4:] == ["ack", "repair_started", "repair", "end"]


def test_resume_refuses_a_closed_session(model):
    from diagnose.errors import JournalError
    from diagnose.journal.store import Journal

    with Journal(os.environ["DIAGNOSE_JOURNAL"]) as j:
        sid = j.new_session(model.id, model.version, model.content_hash, "site")
        Session(model, sink=j, session_id=sid).end("abandoned")
    with pytest.raises(JournalError, match="is closed"):
        run_lines(resume, [], args_for(), sid)


def test_resume_finds_the_pack_by_its_recorded_id(model):
    from diagnose.journal.store import Journal

    with Journal(os.environ["DIAGNOSE_JOURNAL"]) as j:
        sid = j.new_session(model.id, model.version, model.content_hash, "phone")
        session = Session(model, mode="phone", sink=j, session_id=sid)
        for param in model.parameters:
            session.set_nameplate(param, model.parameters[param].default)
        session.add_complaint("will_not_release")
    args = args_for(pack=None)
    args.packs = [str(PACK.parent)]
    status, screen = run_lines(resume, ["quit"], args, sid)
    assert status == 0 and "phone mode" in screen and "Ask the caller" in screen


def test_resume_finds_a_pack_started_from_a_folder_without_packs():
    from diagnose.journal.store import Journal

    # started with the pack given as a folder: its id is not on the search path
    status, screen = run_lines(main, ["", "", "", "", "", "", "", "release", "", "quit"],
                               args_for())
    sid = re.search(r"Resume with:\s+diagnose resume (\S+)", screen).group(1)
    with Journal(os.environ["DIAGNOSE_JOURNAL"], readonly=True) as j:
        assert j.load_events(sid)[0].data["path"] == str(PACK.resolve())
    status, screen = run_lines(resume, ["quit"], args_for(pack=None), sid)
    assert status == 0 and f"Resuming session {sid}" in screen


def test_resume_says_where_the_recorded_folder_was_when_it_is_gone(model):
    from diagnose.errors import InputError
    from diagnose.journal.store import Journal

    with Journal(os.environ["DIAGNOSE_JOURNAL"]) as j:
        sid = j.new_session(model.id, model.version, model.content_hash, "site")
        j.write(sid, {"kind": "notice", "data": {"pack": model.id, "path": "/no/such/folder"},
                      "time": "2025-01-14T09:00:00+00:00"})
    with pytest.raises(InputError, match="/no/such/folder"):
        run_lines(resume, ["quit"], args_for(pack=None), sid)


def test_the_notice_is_read_while_the_pack_loads():
    import threading

    from diagnose.shell.startup import ENTER, Preload, manifest_notice, read_notice_while_loading

    notice = manifest_notice(str(PACK))
    assert notice.startswith("This tool is an aid.") and "lock out power" in notice
    asked = threading.Event()

    def slow_load():
        assert asked.wait(10), "the notice did not wait for Enter while the pack loaded"
        return load_model(str(PACK))

    class Reader:
        def ask(self, message, state=None, default=""):
            assert message == ENTER and not loading.done  # asked while still loading
            asked.set()
            return ""

    loading = Preload(slow_load)
    out = io.StringIO()
    got = read_notice_while_loading(Console(file=out, width=80, color_system=None), Reader(),
                                    notice, loading)
    assert got.id == "shell-brake"
    assert "Safety notice" not in out.getvalue()  # the same notice is not shown twice


def test_a_pack_that_fails_to_load_fails_after_the_notice_and_ctrl_d_leaves():
    from diagnose.errors import KnowledgeError
    from diagnose.shell.startup import Preload, read_notice_while_loading

    def broken():
        raise KnowledgeError([], "pack x has 1 error(s)")

    class Enter:
        def ask(self, message, state=None, default=""):
            return ""

    class CtrlD:
        def ask(self, message, state=None, default=""):
            raise EOFError

    con = Console(file=io.StringIO(), width=80, color_system=None)
    with pytest.raises(KnowledgeError, match="1 error"):
        read_notice_while_loading(con, Enter(), "notice", Preload(broken))
    with pytest.raises(EOFError):
        read_notice_while_loading(con, CtrlD(), "notice", Preload(broken))


def test_a_changed_notice_is_shown_again_so_the_recorded_one_was_seen(model):
    from diagnose.shell.startup import Preload, read_notice_while_loading

    class Enter:
        def ask(self, message, state=None, default=""):
            return ""

    out = io.StringIO()
    read_notice_while_loading(Console(file=out, width=80, color_system=None), Enter(),
                              "an older notice", Preload(lambda: model))
    assert "Safety notice" in out.getvalue() and "lock out power" in out.getvalue()


def test_phone_mode_ends_with_a_recommendation(model):
    from diagnose.reasoning.planner import Action

    session = Session(model, mode="phone", sink=MemorySink(), session_id="p-1")
    session.add_complaint("will_not_release")
    shell = Shell(session, Console(file=io.StringIO()), None)
    escalate = render(shell.end_view(Action("escalate", reason="the answers fit nothing")))
    assert "Recommendation: a site visit with an application engineer" in escalate
    session.repair("replace_fuse", True)
    cured = render(shell.end_view(Action("done")))
    assert "Resolved by phone. Cause:" in cured and "What cured it: " in cured


def test_why_text_and_the_repair_card_in_phone_mode():
    from diagnose.views import why_text

    assert why_text(0.3, 2, phone=True) == ("worth asking first: likely to settle the question "
                                            "quickly (a 2 min question)")
    assert "bits" not in why_text(0.04, 10) and "0.004 bits/min" in why_text(0.04, 10,
                                                                             numbers=True)
    text = render(RepairCard("enable", "Enable the brake output", 5, label="The caller tries"))
    assert "The caller tries: Enable the brake output" in text


def test_without_a_terminal_the_shell_reads_a_script(tmp_path):
    script = "\n\n\n\n\n\n\nrelease\n\ndo listen_click\nsilent\nquit" + "\n"
    env = {**os.environ, "DIAGNOSE_JOURNAL": str(tmp_path / "j.sqlite3"), "TERM": "xterm"}
    env.pop("NO_COLOR", None)
    proc = subprocess.run([sys.executable, "-m", "diagnose", "start", str(PACK)],
                          input=script, check=False,
                          capture_output=True, text=True, env=env, timeout=60)
    assert proc.returncode == 0, proc.stderr
    assert "\x1b[" not in proc.stdout            # no colour into a pipe
    assert "Listen for the click at switch-on: silent (no click)" in proc.stdout
    assert "Resume with:\ndiagnose resume" in proc.stdout
    # every line fits 80 columns but the resume command, kept whole so it can be copied
    assert max(len(line) for line in proc.stdout.splitlines()
               if not line.startswith("diagnose resume ")) <= 80
    assert proc.stderr == ""


def test_a_broken_pack_name_is_one_line_exit_2():
    proc = subprocess.run([sys.executable, "-m", "diagnose", "start", "no-such-pack"],
                          capture_output=True, text=True, timeout=60, input="", check=False)
    assert proc.returncode == 2
    assert proc.stderr.count("\n") == 1 and "no pack 'no-such-pack'" in proc.stderr


def test_piped_input_never_imports_prompt_toolkit(tmp_path):
    """A shell reading a script needs no terminal library: the first question comes sooner."""
    code = ("import sys, io\n"
            "from diagnose.shell.entry import main\n"
            "sys.stdin = io.StringIO('quit\\n')\n"
            "import diagnose.shell.app, diagnose.shell.complete\n"
            "assert 'prompt_toolkit' not in sys.modules, 'prompt_toolkit imported'\n")
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          timeout=60, check=False)
    assert proc.returncode == 0, proc.stderr
