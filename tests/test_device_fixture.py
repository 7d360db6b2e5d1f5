"""A pack for a device that engages when energised speaks of that device, never of a brake.

The fixture pack ``tests/fixtures/tooth-clutch`` (test-only, invented) builds
on the neutral electrical-supply pack and declares ``device: {noun: clutch,
energised: engaged}``. A full session with it, scripted through the command
line (``diagnose run`` with an answers file, then ``diagnose report`` as
Markdown and HTML) and through the shell (prompt_toolkit's pipe input, as in
tests/test_shell.py), its lint and knowledge-test output and every verdict
of the calculators its checks use must not say "brake"; the caution on the
cards that switch the supply on must say that switching on engages the
clutch; the base complaints the fixture hides are not in its menu.

The shell's identity question names the device ("Clutch serial number") and
the calculators' verdicts speak of the armature, not of a brake.
"""

from __future__ import annotations

import io
import json
import re
from pathlib import Path

import pytest
import yaml
from prompt_toolkit import PromptSession
from prompt_toolkit.input import create_pipe_input
from prompt_toolkit.output import DummyOutput
from rich.console import Console

from diagnose.cli import main
from diagnose.journal.record import build_record
from diagnose.journal.report import render_report
from diagnose.journal.store import SessionInfo
from diagnose.kb.loader import load_model
from diagnose.session import MemorySink, Session
from diagnose.shell.app import Shell
from diagnose.shell.reader import PromptReader

ROOT = Path(__file__).resolve().parent.parent
FIXTURE = ROOT / "tests" / "fixtures" / "tooth-clutch"
KNOWLEDGE = ROOT / "knowledge"
BRAKE = re.compile("brake", re.IGNORECASE)
# The restore_power caution of the supply pack, in the clutch's words.
SWITCHING_ON = "Switching the supply on engages the clutch and can move the axis"
HIDDEN = ("coil_gets_no_power", "coil_stays_energised")

ANSWERS = {
    "nameplate": {"people_carrying": "no", "rated_voltage": "24 V", "rated_power": "25 W",
                  "driven_runs_back": "yes"},
    "identity": {"site": "Test hall", "machine": "Feed line 2", "axis": "Infeed",
                 "serial": "TC-0001"},
    "complaints": ["will_not_engage"],
    "steps": [
        {"check": "caller_clutch_click", "answer": "silent"},
        {"check": "coil_voltage", "answer": "23.8 V"},
        {"check": "secure_driven_side", "answer": "done"},
        {"check": "gap_pull_in", "answer": {"gap": "0.42 mm", "volts": "23.8 V"}},
        {"check": "field_coil_resistance", "answer": "OL"},
        {"repair": "replace_field_coil", "cured": True,
         "parts": ["field coil for the nameplate voltage"]},
    ],
    "notes": ["Field coil lead broken at the terminal box."],
}

# The shell, as a technician types: "no" people carried, Enter keeps each other nameplate
# default (8), the unit's identity (4), complaint 4 (will not engage), no other complaint;
# then the click by choice, the proposed coil volts (with `checks` and `why` at its
# acknowledgement), the proposed coil resistance, the proposed repair with its part.
SHELL_LINES = ["no", *[""] * 8, "Test hall", "Feed line 2", "Infeed", "TC-0001", "4", "",
               "do caller_clutch_click", "ack", "silent",
               "checks", "why", "ack", "23.8 V",
               "ack", "OL",
               "ack", "yes", "1", ""]


@pytest.fixture(scope="module")
def model():
    return load_model(str(FIXTURE))


def no_brake(text: str, where: str) -> None:
    hits = [line for line in text.splitlines() if BRAKE.search(line)]
    assert not hits, f"{where} says brake:\n" + "\n".join(hits[:10])


def flat(text: str) -> str:
    """The words of a screen without card borders, single-spaced."""
    return " ".join(re.sub(r"[│╭╮╰╯─]", " ", text).split())


# --- the command line ------------------------------------------------------------------------


@pytest.fixture()
def cli(tmp_path, capsys):
    """`diagnose --journal J ...` in this process: (exit code, stdout, stderr)."""
    journal = tmp_path / "journal.sqlite3"

    def run(*argv: str) -> tuple[int, str, str]:
        code = main(["--journal", str(journal), *argv])
        out, err = capsys.readouterr()
        return code, out, err

    return run


def test_a_scripted_run_and_its_repair_log_never_say_brake(cli, tmp_path):
    answers = tmp_path / "answers.yaml"
    answers.write_text(yaml.safe_dump(ANSWERS, sort_keys=False), encoding="utf-8")
    code, out, err = cli("run", str(FIXTURE), "--answers", str(answers), "--who", "Ana")
    assert code == 0, err
    assert "step 6: repair replace_field_coil: cured" in out
    no_brake(out + err, "diagnose run")
    code, data, err = cli("run", str(FIXTURE), "--answers", str(answers), "--json",
                          "--no-journal")
    assert code == 0, err
    no_brake(data, "diagnose run --json")
    sid = re.search(r"diagnose report (\S+)", out).group(1)
    for fmt in ("md", "html"):
        code, log, err = cli("report", sid, "--format", fmt)
        assert code == 0, err
        no_brake(log + err, f"diagnose report --format {fmt}")
        assert "Field coil winding or lead open" in log
        assert "engages the clutch and drives the machine" in log  # the notice
        assert "TC-0001" in log


# --- the shell --------------------------------------------------------------------------------


class _Recording(PromptReader):
    """The shell's terminal reader, keeping each question it asks."""

    def __init__(self, session) -> None:
        super().__init__(session)
        self.asked: list[str] = []

    def ask(self, message, state=None, default=""):
        self.asked.append(message)
        return super().ask(message, state, default)


@pytest.fixture(scope="module")
def shell_run(model):
    """The shell driven by script through prompt_toolkit's pipe input: (shell, screen, asked)."""
    session = Session(model, mode="site", sink=MemorySink(), session_id="t-1")
    out = io.StringIO()
    console = Console(file=out, width=80, color_system=None)
    with create_pipe_input() as pipe:
        reader = _Recording(PromptSession(input=pipe, output=DummyOutput()))
        shell = Shell(session, console, reader)
        pipe.send_text("\r".join(SHELL_LINES) + "\r")
        pipe.close()  # past the script the shell reads the end of input: it leaves, not waits
        status = shell.run()
    assert status == 0
    return shell, out.getvalue(), reader.asked


def test_the_shell_session_reaches_the_cure_and_its_screens_never_say_brake(shell_run):
    shell, screen, _ = shell_run
    s = shell.session
    assert "Not accepted" not in screen  # the script went as written
    assert s.ended and s.evidence.end["result"] == "resolved"
    assert s.evidence.end["cause"] == "field_coil_open"
    assert s.evidence.findings["field_coil_resistance"] == {"open": 1.0}
    no_brake(screen, "the shell's screens")
    # the repair log of this very session, as `diagnose report` renders it
    info = SessionInfo(id="t-1", pack_id=shell.model.id, pack_version=shell.model.version,
                       content_hash=shell.model.content_hash, mode="site", who="Ana",
                       started=str(s.events[0].time), updated=str(s.events[-1].time),
                       status="closed", outcome="resolved", cause="field_coil_open",
                       events=len(s.events), site="Test hall", machine="Feed line 2",
                       axis="Infeed", serial="TC-0001")
    record = build_record(info, s.events, shell.model)
    for fmt in ("md", "html"):
        log = render_report(record, fmt)
        no_brake(log, f"the shell session's repair log ({fmt})")
        assert "Switching the supply on engages the clutch" in log  # acknowledged, on record


def test_the_switching_on_caution_says_the_clutch_engages(shell_run, model):
    _, screen, _ = shell_run
    words = flat(screen)
    assert f"WARNING {SWITCHING_ON}" in words
    assert "releases the clutch and can move" not in words
    acks = [(e.data["caution"], e.data["item"]) for e in shell_run[0].session.events
            if e.kind == "ack"]
    assert ("restore_power", "caller_clutch_click") in acks
    # every card that switches the supply on carries it, in the clutch's words
    cards = [x for x in (*model.checks.values(), *model.repairs.values())
             if "energises_coil" in x.hazards or "machine_in_use" in x.hazards]
    assert cards and all("restore_power" in x.cautions for x in cards)
    assert model.cautions["restore_power"].text.startswith(SWITCHING_ON)
    assert "engages the clutch" in model.notice and "releases the clutch" in model.notice


def test_the_hidden_base_complaints_are_not_in_the_menu(shell_run, model):
    _, screen, _ = shell_run
    menu = screen[screen.index("The complaint"):screen.index("complaint: Clutch will not engage")]
    shown = re.findall(r"^\d+\)\s+.*?\s(\w+)\s*$", menu, re.MULTILINE)
    assert shown == [k.id for k in model.complaints.values() if not k.hidden]
    assert {"will_not_engage", "will_not_disengage", "ratchets_under_load"} <= set(shown)
    for hidden in HIDDEN:
        assert model.complaints[hidden].hidden and hidden not in menu
        assert model.complaints[hidden].title not in menu


def test_the_shell_never_asks_about_a_brake(shell_run):
    _, _, asked = shell_run
    no_brake("\n".join(asked), "the shell's questions")


def test_the_shell_asks_the_nameplate_in_the_clutch_words(shell_run):
    _, _, asked = shell_run
    text = " ".join(" ".join(asked).split())
    assert "Rated coil voltage on the clutch nameplate" in text
    assert "Rated field coil power on the clutch nameplate (at 20 °C)" in text  # an override
    assert "[25 W]" in text  # the override's default


# --- lint, knowledge tests, calculators ---------------------------------------------------------


@pytest.mark.parametrize("argv", [
    ["kb", "lint", "--strict"],
    ["kb", "lint", "--strict", "--analysis"],
    ["kb", "lint", "--strict", "--packs", str(KNOWLEDGE)],
    ["kb", "test"],
])
def test_lint_and_knowledge_tests_are_clean_and_never_say_brake(capsys, argv):
    code = main([*argv, str(FIXTURE)])
    out, err = capsys.readouterr()
    assert code == 0, out + err
    no_brake(out + err, " ".join(argv))
    if argv[1] == "test":
        assert re.search(r"tooth-clutch: (\d+) of \1 case\(s\) passed", " ".join(out.split()))


def test_the_fixture_is_a_device_pack_with_its_own_words(model):
    assert model.packs == ("electrical-supply", "tooth-clutch")
    own = [c for c in model.causes.values() if c.pack == "tooth-clutch"]
    assert len(own) >= 4
    assert sum(1 for k in model.complaints if k not in HIDDEN) >= 3
    assert model.cases and all(c.source for c in model.cases.values())
    assert model.checks["coil_voltage"].title == \
        "DC volts at the coil terminals, clutch commanded on"
    assert model.states["power"].title == "Power to the clutch circuit"
    assert model.complaints["coil_stays_energised"].caller_title == \
        "The clutch stays engaged after the machine stops"
    words = json.dumps([[getattr(x, f, "") for f in ("title", "ask", "caller", "text", "prompt",
                                                     "caller_title", "description")]
                        for pool in (model.parameters, model.complaints, model.events,
                                     model.causes, model.checks, model.repairs, model.cautions,
                                     model.hazards, model.states)
                        for x in pool.values()])
    no_brake(words + model.notice + model.title, "the compiled fixture")
    assert not re.search(r"\{[A-Za-z_]+\}", words + model.notice)  # every term filled


# (nameplate, check, reading, verdict): every verdict each measurement of the fixture gives.
_CONVERTER = {"people_carrying": "no", "supply_voltage": "48 V"}
_RECTIFIED = {"people_carrying": "no", "supply_kind": "rectified", "rated_voltage": "205 V",
              "ac_volts": "230 V", "rectifier_type": "bridge"}
_HALF = {**_RECTIFIED, "rated_voltage": "103 V", "rectifier_type": "half-wave"}
VERDICTS = [
    (_CONVERTER, "supply_output_volts", "0 V", "absent"),
    (_CONVERTER, "supply_output_volts", "18 V", "low"),
    (_CONVERTER, "supply_output_volts", "24 V", "ok"),
    (_CONVERTER, "supply_output_volts", "30 V", "high"),
    (_CONVERTER, "supply_output_volts", "47.5 V", "coil_mismatch"),
    (_CONVERTER, "coil_voltage", "0 V", "absent"),
    (_CONVERTER, "coil_voltage", "12 V", "low"),
    (_CONVERTER, "coil_voltage", "24 V", "ok"),
    (_CONVERTER, "coil_voltage", "30 V", "high"),
    (_CONVERTER, "coil_voltage", "47.5 V", "coil_mismatch"),
    (_RECTIFIED, "coil_voltage", "103 V", "half_wave"),
    (_RECTIFIED, "rectifier_output", "0 V", "no_output"),
    (_RECTIFIED, "rectifier_output", "103 V", "half_wave"),
    (_RECTIFIED, "rectifier_output", "150 V", "failed_diode"),
    (_RECTIFIED, "rectifier_output", "207 V", "matches"),
    (_HALF, "rectifier_output", "207 V", "full_wave"),
    (_CONVERTER, "coil_voltage_off", "0.1 V", "off"),
    (_CONVERTER, "coil_voltage_off", "4 V", "residual"),
    (_CONVERTER, "coil_voltage_off", "23 V", "present"),
    (_CONVERTER, "cable_insulation", "0.2 megaohm", "failed"),
    (_CONVERTER, "cable_insulation", "2 megaohm", "low"),
    (_CONVERTER, "cable_insulation", "100 megaohm", "ok"),
    (_CONVERTER, "cable_drop_calc", "5 m", "ok"),
    (_CONVERTER, "cable_drop_calc", "200 m", "too_much_drop"),
    (_CONVERTER, "field_coil_resistance", "OL", "open"),
    (_CONVERTER, "field_coil_resistance", "0.2 ohm", "short"),
    (_CONVERTER, "field_coil_resistance", "15 ohm", "low"),
    (_CONVERTER, "field_coil_resistance", "23 ohm", "ok"),
    (_CONVERTER, "field_coil_resistance", "40 ohm", "high"),
    (_CONVERTER, "gap_pull_in", "gap=0.3 mm volts=24 V", "pulls_in"),
    (_CONVERTER, "gap_pull_in", "gap=0.55 mm volts=24 V", "marginal"),
    (_CONVERTER, "gap_pull_in", "gap=0.9 mm volts=24 V", "does_not_pull_in"),
]


def test_the_verdict_table_covers_every_measurement_of_the_fixture(model):
    listed = {row.values[1] if hasattr(row, "values") else row[1] for row in VERDICTS}
    assert listed == {c.id for c in model.checks.values() if c.measurement is not None}


@pytest.mark.parametrize(("plate", "check", "reading", "verdict"), VERDICTS,
                         ids=[f"{(r.values if hasattr(r, 'values') else r)[1]}-"
                              f"{(r.values if hasattr(r, 'values') else r)[3]}" for r in VERDICTS])
def test_no_calculator_verdict_of_the_fixture_says_brake(model, plate, check, reading, verdict):
    s = Session(model, sink=MemorySink(), session_id="v")
    while s.open_parameters():
        pid = s.open_parameters()[0]
        default = model.parameters[pid].default
        s.set_nameplate(pid, plate.get(pid, "unknown" if default is None else str(default)))
    s.answer(check, reading)
    event = s.events[-1]
    assert event.kind == "reading" and event.data["verdict"] == verdict
    no_brake(event.data["summary"], f"{check} {reading}")
    outcome = model.checks[check].outcome_titles.get(verdict, "")
    no_brake(outcome, f"{check}'s outcome {verdict}")


def test_a_misspelt_term_in_the_safety_notice_is_a_lint_error(tmp_path):
    import shutil

    from diagnose.kb.lint import lint_paths

    pack = tmp_path / "tooth-clutch"
    shutil.copytree(FIXTURE, pack)
    manifest = pack / "pack.yaml"
    manifest.write_text(manifest.read_text().replace("on {switch_on} and drives",
                                                     "on {swich_on} and drives"))
    (res,) = lint_paths([str(pack)])
    assert [p.code for p in res.problems if p.level == "error"] == ["unknown-term"]
