"""Text from packs, answers files, the journal and people never acts on a terminal or a viewer.

The hostile text below holds the sequences a review used against the program:
a terminal title (OSC 0), a hidden hyperlink (OSC 8), a screen clear, a full
reset, a 24-bit colour, a C1 control introducer, rich markup and Markdown
links, images and HTML. Each test puts it where a face shows it (a pack's
notice, titles, cautions and wording; a session's technician, identity,
answers and notes; a file name) and reads what reaches the terminal or the
file, byte for byte:

* no escape sequence that the program does not emit itself: no OSC, DCS or
  RIS, no 24-bit colour, no screen clear, no raw C1 control; the program's own
  styles and cursor moves are CSI sequences and stay;
* the text is still shown, with a placeholder (U+241B for ESC) where the
  control character was, so a reader sees that something odd was written;
* rich markup is shown as typed (``[/]`` is three characters, not a crash);
* Markdown holds no link, image, emphasis or HTML of the text's making.

The pseudo-terminal tests run the installed program (``python -m diagnose``)
under ``pexpect`` and capture every byte it writes.
"""

from __future__ import annotations

import io
import json
import os
import re
import shutil
import subprocess
import time
from pathlib import Path

import pytest
import yaml
from hostile import CpuBudget, limited_argv

from diagnose.kb.compiler import compile_sources
from diagnose.kb.loader import read_chain
from diagnose.text import clean, code, console, json_text, md, unsafe

ROOT = Path(__file__).parent.parent
SHELL_PACK = ROOT / "tests" / "fixtures" / "shell-brake"

TITLE = "\x1b]0;PWN-TITLE\x07"
LINK = "\x1b]8;;http://pwn.invalid/\x1b\\hidden\x1b]8;;\x1b\\"
CLEAR = "\x1b[2J\x1b[H"
RGB = "\x1b[38;2;1;2;3mRGB"
RESET = "\x1bc"
C1 = "\x9b2J"
BIDI = "\u202eevil"
MARKUP = "[/] [link=http://pwn.invalid/]m[/link] [bold]"
MARKDOWN = "[x](javascript:alert(1)) ![i](http://pwn.invalid/i.png) <script>s</script> **e**"
HOSTILE = " ".join((TITLE, LINK, CLEAR, RGB, RESET, C1, BIDI, MARKUP, MARKDOWN))

#: What no output of the program may hold: sequences it never emits itself.
FOREIGN = {
    "OSC (title, hyperlink)": re.compile(rb"\x1b\]"),
    "DCS": re.compile(rb"\x1bP"),
    "full reset": re.compile(rb"\x1bc"),
    "24-bit colour 1;2;3": re.compile(rb"\x1b\[38;2;1;2;3m"),
    "screen clear": re.compile(rb"\x1b\[2J"),
    "raw C1 control": re.compile(rb"\xc2[\x80-\x9f]"),
    "bidirectional override": re.compile("\u202e".encode()),
}


def assert_no_foreign_escapes(out: bytes, where: str) -> None:
    for what, rx in FOREIGN.items():
        m = rx.search(out)
        assert m is None, (f"{where}: {what} at byte {m.start()}: "
                           f"{out[max(0, m.start() - 60):m.end() + 60]!r}")


def assert_shown_cleaned(out: bytes, where: str) -> None:
    """The hostile text reached the output, its ESC as the visible placeholder."""
    text = out.decode("utf-8", "replace")
    assert re.search(r"␛\\?\]0;PWN-TITLE", text), f"{where}: the cleaned title is not shown"


# --- the gate itself ------------------------------------------------------------------------


@pytest.mark.parametrize("code_point", [*range(0x00, 0x20), 0x7F, *range(0x80, 0xA0),
                                        0x202A, 0x202E, 0x2066, 0x2069])
def test_every_control_character_becomes_a_placeholder(code_point):
    ch = chr(code_point)
    if ch in "\t\n":
        assert clean(f"a{ch}b") == f"a{ch}b" and unsafe(ch) is None
        return
    out = clean(f"a{ch}b")
    assert out[0] == "a" and out[-1] == "b" and len(out) == 3
    assert out[1] != ch and out[1].isprintable()  # a visible placeholder, not a deletion
    assert unsafe(f"a{ch}b") == f"U+{code_point:04X}"


def test_plain_text_passes_unchanged():
    for text in ("Coil 24 V / 20 W: 28.8 Ω at 20 °C", "Wörter, 日本語, emoji ✓", "a\tb\nc"):
        assert clean(text) == text


def test_json_keeps_the_text_but_no_raw_control():
    data = {"who": HOSTILE, "n": [C1, "\x7f"]}
    out = json_text(data, indent=2)
    assert json.loads(out) == data  # the same strings come back
    assert unsafe(out.replace("\n", "")) is None  # but none is raw in the text


def test_markdown_escaping_leaves_no_link_image_emphasis_or_html():
    out = md(MARKDOWN + " _u_ `c` | ~~s~~ # h")
    for raw in ("[x](", "![i](", "<script>", "**e**", "_u_", "`c`", " | ", "~~s~~"):
        assert raw not in out, raw
    assert "&lt;script&gt;" in out and "\\[x\\]" in out and "\\*\\*e\\*\\*" in out
    assert code("a`b\nc") == "a'b c"


def test_the_console_shows_markup_as_typed_and_cleans_every_segment():
    from rich.panel import Panel
    from rich.table import Table

    buf = io.StringIO()
    con = console(file=buf, force_terminal=True, color_system="truecolor", width=200)
    table = Table(title=HOSTILE)
    table.add_column(HOSTILE)
    table.add_row(HOSTILE)
    con.print(HOSTILE)
    con.print(table)
    con.print(Panel("body " + HOSTILE, title="Title"))
    con.rule(HOSTILE)
    out = buf.getvalue().encode()
    assert_no_foreign_escapes(out, "console")
    assert_shown_cleaned(out, "console")
    assert b"[/] [link=http://pwn.invalid/]m[/link]" in out  # markup shown as typed


# --- pack text ----------------------------------------------------------------------------------

TEXT_KEYS = {"title", "text", "notice", "version", "prompt", "caller", "description",
             "instructions", "why", "wording"}


def _spoil(value, key=""):
    """Every text a screen shows, with the hostile text appended."""
    if isinstance(value, dict):
        return {k: _spoil(v, k) for k, v in value.items()}
    if isinstance(value, list):
        return [_spoil(v, key) for v in value]
    if isinstance(value, str) and key in TEXT_KEYS:
        return f"{value} {HOSTILE}"
    return value


@pytest.fixture
def hostile_pack(tmp_path: Path) -> Path:
    folder = tmp_path / "hostile-brake"
    shutil.copytree(SHELL_PACK, folder)
    for f in folder.glob("*.yaml"):
        data = yaml.safe_load(f.read_text(encoding="utf-8"))
        f.write_text(yaml.safe_dump(_spoil(data), allow_unicode=False, sort_keys=False),
                     encoding="utf-8")
    return folder


def _lint(folder: Path) -> tuple[int, list[str]]:
    with CpuBudget("diagnose kb lint"):
        proc = subprocess.run(limited_argv("kb", "lint", str(folder)), capture_output=True,
                              timeout=60)
    assert_no_foreign_escapes(proc.stdout + proc.stderr, "kb lint")
    return proc.returncode, proc.stdout.decode().splitlines()


def test_lint_refuses_control_characters_with_their_position(hostile_pack):
    status, lines = _lint(hostile_pack)
    assert status == 1
    found = [line for line in lines if "[control-character]" in line]
    assert len(found) > 10 and all(
        re.search(r"\.yaml:\d+:\d+: error: control character U\+001B in text", x)
        for x in found), found[:3]
    assert any("pack.yaml:" in x for x in found)
    assert not [x for x in lines if ": error: " in x and "[control-character]" not in x]


def test_lint_names_a_file_whose_name_holds_escapes(tmp_path):
    folder = tmp_path / "named"
    shutil.copytree(SHELL_PACK, folder)
    (folder / f"notes{TITLE}.yaml").write_text("causes: [\n", encoding="utf-8")
    status, lines = _lint(folder)
    assert status == 1
    assert any("notes␛]0;PWN-TITLE␇.yaml:2:1: error: YAML syntax" in x for x in lines), lines


def _hostile_model(folder: Path):
    """The hostile pack compiled without its schema and text checks: as if lint were skipped."""
    sources, problems = read_chain(str(folder))
    assert not [p for p in problems if p.code not in ("yaml",)], problems[:3]
    model, more = compile_sources(sources, schema=False)
    assert model is not None, more[:3]
    return model


def test_every_card_of_a_whole_diagnosis_on_hostile_pack_text(hostile_pack):
    """The shell, driven in-process over a pack whose every text is hostile: nothing leaks.

    The answers come line by line (the reader for scripts and pipes), since a
    terminal would read the escape characters of typed text as keys.
    """
    from diagnose.session import MemorySink, Session
    from diagnose.shell.app import Shell
    from diagnose.shell.reader import LineReader

    model = _hostile_model(hostile_pack)
    assert TITLE in model.notice and HOSTILE in next(iter(model.causes.values())).title
    buf = io.StringIO()
    con = console(file=buf, force_terminal=True, color_system="truecolor", width=80, height=24)
    lines = ["", "", "", "", HOSTILE, "", "", "", "1", "", "ranking all", "checks", "help",
             "do coil_resistance", "ack", "3.2 ohm", f"note {HOSTILE}", "why", "nameplate",
             "repair replace_coil", "no", "more", "quit"]
    session = Session(model, mode="site", sink=MemorySink(), session_id="t-1")
    shell = Shell(session, con, LineReader(io.StringIO("\n".join(lines) + "\n"), con))
    shell.run()
    out = buf.getvalue().encode()
    assert_no_foreign_escapes(out, "shell")
    assert_shown_cleaned(out, "shell")
    text = out.decode()
    assert "Coil resistance" in text and "Repair" in text  # the cards were drawn
    assert any(e.kind == "note" for e in session.events)


# --- a session full of hostile text, through the installed program in a terminal -------------


def _env(tmp_path: Path) -> dict[str, str]:
    env = {k: v for k, v in os.environ.items() if k not in ("NO_COLOR", "FORCE_COLOR")}
    env.update(TERM="xterm-256color", COLUMNS="80", LINES="24", COLORTERM="truecolor",
               OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1", MALLOC_ARENA_MAX="1",
               DIAGNOSE_JOURNAL=str(tmp_path / "journal.sqlite3"),
               XDG_STATE_HOME=str(tmp_path / "state"))
    return env


def _terminal(args: list[str], tmp_path: Path, typed: list[str] = ()) -> bytes:
    """Every byte ``python -m diagnose ARGS`` writes to an 80x24 pseudo-terminal."""
    pexpect = pytest.importorskip("pexpect")
    argv = limited_argv(*args)
    out = bytearray()
    pending = list(typed)
    with CpuBudget(f"diagnose {' '.join(args[:2])} in a terminal"):
        # echo=False: what is typed ahead is not echoed by the terminal itself (which shows
        # a C1 byte raw); prompt_toolkit draws the line being edited.
        child = pexpect.spawn(argv[0], argv[1:], env=_env(tmp_path), dimensions=(24, 80),
                              timeout=60, cwd=str(tmp_path), echo=False)
        deadline = time.monotonic() + 60
        while True:
            try:
                chunk = child.read_nonblocking(65536, timeout=1.0)
            except pexpect.TIMEOUT:  # quiet: busy, or waiting for what is typed next
                if time.monotonic() > deadline:
                    raise AssertionError(f"diagnose {args[0]} still runs: {bytes(out)[-300:]!r}")
                if pending:
                    child.send(pending.pop(0) + "\r")
                continue
            except pexpect.EOF:
                break
            out += chunk
            for _ in range(chunk.count(b"\x1b[6n")):  # answer "where is the cursor?"
                child.send("\x1b[1;1R")
        child.close()
    assert child.signalstatus is None, f"diagnose {args[0]} ended by signal {child.signalstatus}"
    return bytes(out)


@pytest.fixture
def hostile_session(tmp_path: Path) -> str:
    answers = tmp_path / "hostile-answers.yaml"
    answers.write_text(yaml.safe_dump({
        "identity": {"site": HOSTILE, "machine": HOSTILE, HOSTILE: "key"},
        "nameplate": {"rated_voltage": "24 V", "rated_power": "20 W"},
        "complaints": ["will_not_release"],
        "steps": [{"check": "coil_resistance", "answer": "3.2 ohm"}],
        "notes": [HOSTILE],
    }, allow_unicode=False), encoding="utf-8")
    proc = subprocess.run(limited_argv("run", str(SHELL_PACK),
                           "--answers", str(answers), "--who", HOSTILE, "--json"),
                          capture_output=True, env=_env(tmp_path), timeout=60)
    assert proc.returncode == 0, proc.stderr[-500:]
    assert_no_foreign_escapes(proc.stdout + proc.stderr, "run --json")
    return json.loads(proc.stdout)["session"]


@pytest.mark.slow
def test_terminal_bytes_of_kb_show_and_lint_on_a_hostile_pack(hostile_pack, tmp_path):
    for args in (["kb", "show", str(hostile_pack)], ["kb", "lint", str(hostile_pack)],
                 ["start", str(hostile_pack)]):
        # The shell shows the pack's notice while the pack loads: Enter, once read.
        out = _terminal(args, tmp_path, typed=[""] if args[0] == "start" else [])
        assert_no_foreign_escapes(out, " ".join(args[:2]))
        assert b"control character U+001B" in out, out[-300:]
        if args[0] == "start":
            assert_shown_cleaned(out, "the notice")


@pytest.mark.slow
def test_terminal_bytes_of_run_sessions_and_report(hostile_session, tmp_path):
    answers = tmp_path / "more.yaml"
    answers.write_text(yaml.safe_dump({"notes": [f"second {HOSTILE}"]}), encoding="utf-8")
    journal = tmp_path / "journal.sqlite3"
    for args in (["sessions"], ["report", hostile_session],
                 ["report", hostile_session, "--format", "html"],
                 ["run", "--resume", hostile_session, "--answers", str(answers)]):
        recorded = journal.read_bytes()
        out = _terminal(args, tmp_path)
        if args[0] != "run":  # reading a hostile session changes nothing in the journal
            assert journal.read_bytes() == recorded, args
        assert_no_foreign_escapes(out, " ".join(args[:1]))
        if args[0] == "report":
            assert_shown_cleaned(out, "report")


@pytest.mark.slow
def test_terminal_bytes_of_the_shell_on_a_hostile_session(hostile_session, tmp_path):
    # A note pasted with its escape sequences (bracketed paste, as a terminal sends it).
    # While it is edited, the line is prompt_toolkit's to draw: control characters as ^[
    # and <9b>; a bidirectional override is drawn as it is, so it is left out here.
    paste = f"note \x1b[200~{HOSTILE.replace(BIDI, '')}\x1b[201~"
    out = _terminal(["resume", hostile_session], tmp_path,
                    typed=[paste, "undo", "ranking", "quit"])
    assert_no_foreign_escapes(out, "shell")
    assert b"Resuming session" in out
    assert_shown_cleaned(out.split(b"undone: note")[-1], "the note undone")


def test_markdown_and_html_logs_of_a_hostile_session(hostile_session, tmp_path):
    env = _env(tmp_path)
    md_log = subprocess.run(limited_argv("report", hostile_session),
                            capture_output=True, env=env, timeout=60).stdout.decode()
    assert "\x1b" not in md_log and "\x9b" not in md_log
    assert not re.search(r"(?<!\\)\]\(", md_log), "a link or an image: `](` unescaped"
    for raw in ("<script>", "**e**"):
        assert raw not in md_log, raw
    assert "␛\\]0;PWN-TITLE" in md_log and "&lt;script&gt;" in md_log
    html_log = subprocess.run(limited_argv("report", hostile_session,
                               "--format", "html"), capture_output=True, env=env,
                              timeout=60).stdout.decode()
    assert "\x1b" not in html_log and "<script>s" not in html_log
    assert "&lt;script&gt;" in html_log


# --- odd terminals and encodings ----------------------------------------------------------------

EXAMPLE = ROOT / "examples" / "worn-lining.yaml"


@pytest.mark.parametrize("env", [
    {"PYTHONIOENCODING": "ascii"},
    {"LC_ALL": "C", "LANG": "C", "PYTHONCOERCECLOCALE": "0", "PYTHONUTF8": "0"},
], ids=["ascii", "C-locale"])
def test_output_the_terminal_cannot_encode_is_replaced_not_a_traceback(env, tmp_path):
    full = {**_env(tmp_path), **env}
    full.pop("PYTHONIOENCODING", None) if "PYTHONIOENCODING" not in env else None
    for args in (["run", "spring-applied-brake", "--answers", str(EXAMPLE), "--who", "Zoë Ω"],
                 ["sessions"], ["kb", "show", "spring-applied-brake"],
                 ["calc", "coil", "--rated-voltage", "24", "--rated-power", "20",
                  "--measured", "29.1 Ω"]):
        proc = subprocess.run(limited_argv(*args), capture_output=True,
                              env=full, timeout=60)
        assert b"Traceback" not in proc.stderr + proc.stdout, (args, proc.stderr[-400:])
        assert proc.returncode in (0, 2), (args, proc.returncode, proc.stderr[-300:])
        assert proc.stdout.isascii(), args
    listed = subprocess.run(limited_argv("sessions", "--json"),
                            capture_output=True, env=full, timeout=60)
    sessions = json.loads(listed.stdout)
    assert len(sessions) == 1 and sessions[0]["status"] == "closed", sessions
    assert sessions[0]["who"] == "Zoë Ω"  # the bytes of a UTF-8 terminal, read as UTF-8
    report = subprocess.run(limited_argv("report", sessions[0]["id"]),
                            capture_output=True, env=full, timeout=60)
    assert report.returncode == 0 and b"Traceback" not in report.stderr
    assert report.stdout.isascii() and b"Zo? ?" in report.stdout


@pytest.mark.skipif(not Path("/dev/full").exists(), reason="needs /dev/full")
def test_a_run_whose_output_fails_closes_its_session(tmp_path):
    env = _env(tmp_path)
    with open("/dev/full", "w") as full:
        proc = subprocess.run(limited_argv("run", "spring-applied-brake",
                               "--answers", str(EXAMPLE)), stdout=full, stderr=subprocess.PIPE,
                              env=env, timeout=60)
    err = proc.stderr.decode().strip()
    assert proc.returncode == 1 and len(err.splitlines()) == 1, err
    assert "No space left on device" in err and "Traceback" not in err
    listed = subprocess.run(limited_argv("sessions", "--json"),
                            capture_output=True, env=env, timeout=60)
    (info,) = json.loads(listed.stdout)
    assert info["status"] == "closed" and info["outcome"] == "abandoned", info


@pytest.mark.parametrize("width", [24, 30, 39])
def test_a_narrow_terminal_shows_the_names_without_bars(width):
    from diagnose.views import RankingView, RankRow

    buf = io.StringIO()
    view = RankingView((RankRow("a", "Worn lining", 0.6), RankRow("b", "Open coil", 0.3)),
                       RankRow("u", "None of the known causes", 0.1))
    console(file=buf, width=width).print(view)
    out = buf.getvalue()
    assert "Worn lining" in out and "Open coil" in out and "60%" in out
    assert "█" not in out
    wide = io.StringIO()
    console(file=wide, width=80).print(view)
    assert "█" in wide.getvalue()
