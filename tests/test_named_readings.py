"""Several named readings on one card, and a device pack's wording of states and hazards.

The test-only tooth clutch (``tests/fixtures/tooth-clutch``) reads the air gap
and the coil volts on one card (``gap_pull_in``: ``measure.also``) and judges
them together with the ``pull_in`` evaluator. The figures are checked against
the first-order model written out in ``diagnose/physics/release.py``:
``V_needed = pull_in * V_rated * (g / g_nominal)`` for a cold coil, and the
margin ``(V / V_needed) ** 2`` (Roters, Electromagnetic Devices, 1941: the pull
of an air-gap magnet goes with ``(N I / g) ** 2``; the arithmetic is done here
by hand). The fixture's pull-in fraction is 0.7 (16.8 V of 24 V).
"""

from __future__ import annotations

import io
import re
import shutil
from pathlib import Path

import pytest
from prompt_toolkit import PromptSession
from prompt_toolkit.input import create_pipe_input
from prompt_toolkit.output import DummyOutput
from rich.console import Console

from diagnose.errors import InputError
from diagnose.kb.lint import lint_paths
from diagnose.kb.loader import load_model
from diagnose.physics.inputs import named_readings
from diagnose.service import preferred_answer
from diagnose.session import MemorySink, Session
from diagnose.shell.app import Shell
from diagnose.shell.reader import PromptReader
from diagnose.shell.startup import manifest_notice

ROOT = Path(__file__).resolve().parent.parent
FIXTURE = ROOT / "tests" / "fixtures" / "tooth-clutch"
PLATE = {"people_carrying": "no", "rated_voltage": "24 V", "rated_power": "25 W",
         "field_temperature": "20 °C", "clutch_nominal_gap": "0.4 mm"}


@pytest.fixture(scope="module")
def model():
    return load_model(str(FIXTURE))


def session(model) -> Session:
    s = Session(model, sink=MemorySink(), session_id="n")
    while s.open_parameters():
        pid = s.open_parameters()[0]
        default = model.parameters[pid].default
        s.set_nameplate(pid, PLATE.get(pid, "unknown" if default is None else str(default)))
    return s


def test_the_card_reads_the_gap_and_the_volts(model):
    m = model.checks["gap_pull_in"].measurement
    assert [(r.name, r.unit) for r in m.readings] == [("gap", "mm"), ("volts", "V")]
    assert "volts" not in m.inputs


@pytest.mark.parametrize("answer", [
    {"gap": "0.72 mm", "volts": "23.9 V"},
    {"gap": 0.72, "volts": 23.9},  # bare numbers: each in its own reading's unit
    "gap=0.72 mm volts=23.9 V",
    "volts=23.9, gap=0.72",  # any order, commas allowed
])
def test_both_readings_make_one_verdict(model, answer):
    s = session(model)
    finding = s.answer("gap_pull_in", answer)
    # by hand: needed = 0.7 * 24 V * (0.72 / 0.4) = 30.24 V; margin = (23.9 / 30.24) ** 2
    assert finding.outcome == "does_not_pull_in"
    figures = s.events[-1].data["figures"]
    assert figures["needed"]["value"] == pytest.approx(30.24, rel=1e-5)  # kept to 6 digits
    assert figures["margin"]["value"] == pytest.approx((23.9 / 30.24) ** 2, rel=1e-5)
    # the record keeps both, with their units, in the card's order
    assert s.events[-1].data["text"] == ["gap=0.72 mm", "volts=23.9 V"]


def test_the_volts_decide_at_the_same_gap(model):
    # at 0.5 mm: needed = 0.7 * 24 * 1.25 = 21 V; 24 V gives (24/21)**2 = 1.306, above
    # (1 + 10 %)**2 = 1.21: pulls in; 22 V gives 1.098: marginal; 20 V gives 0.907: no
    for volts, verdict in (("24 V", "pulls_in"), ("22 V", "marginal"),
                           ("20 V", "does_not_pull_in")):
        s = session(model)
        assert s.answer("gap_pull_in", {"gap": "0.5 mm", "volts": volts}).outcome == verdict


@pytest.mark.parametrize(("answer", "said"), [
    ({"gap": "0.72 mm"}, "needs the reading volts (V) too"),
    ("0.72 mm", "expected named readings, such as gap=… mm volts=… V"),
    ({"gap": "0.72 mm", "volts": "23.9 mm"}, "expected a voltage"),
    ({"gap": "0.72 mm", "volts": "24 V", "amps": "1 A"}, "'amps' is not read here"),
    ("gap=0.7 gap=0.8 volts=24", "gap is given twice"),
])
def test_a_wrong_or_missing_reading_is_refused_and_nothing_recorded(model, answer, said):
    s = session(model)
    before = len(s.events)
    with pytest.raises(InputError) as err:
        s.answer("gap_pull_in", answer)
    assert said in err.value.message
    assert len(s.events) == before


def test_named_readings_keep_each_unit_in_inch_preference(model):
    chk = model.checks["gap_pull_in"]
    # a bare gap in inches is the technician's feeler reading; volts stay volts
    assert preferred_answer(chk, "gap=0.028 volts=24", "inch") == {"gap": "0.028 in",
                                                                   "volts": "24"}
    s = session(model)
    s.answer("gap_pull_in", preferred_answer(chk, "gap=0.028 volts=24", "inch"))
    # 0.028 in = 0.7112 mm (1 in = 25.4 mm exactly, by definition)
    assert s.events[-1].data["figures"]["gap_factor"]["value"] == pytest.approx(0.7112 / 0.4)


def test_named_readings_parser_keeps_the_card_order():
    assert named_readings("volts=23 V gap=0.6 mm", {"gap": "mm", "volts": "V"}) == {
        "gap": "0.6 mm", "volts": "23 V"}


# --- the shell: one prompt a reading ----------------------------------------------------------


class _Recording(PromptReader):
    def __init__(self, prompt_session):
        super().__init__(prompt_session)
        self.asked: list[str] = []

    def ask(self, message, state, default=""):
        self.asked.append(message)
        return super().ask(message, state, default)


def shell_screen(model, lines):
    s = session(model)
    s.add_complaint("will_not_engage")
    out = io.StringIO()
    console = Console(file=out, width=80, color_system=None)
    with create_pipe_input() as pipe:
        reader = _Recording(PromptSession(input=pipe, output=DummyOutput()))
        shell = Shell(s, console, reader)
        # the identity questions (Enter skips each), no other complaint, then the script
        pipe.send_text("\r".join(["", "", "", "", "", *lines]) + "\r")
        pipe.close()
        shell.run()
    return s, out.getvalue(), reader.asked


def test_the_shell_asks_each_reading_in_turn(model):
    s, screen, asked = shell_screen(model, ["do secure_driven_side", "ack", "done",
                                            "do gap_pull_in", "ack", "0.72", "23.9 mm", "23.9",
                                            "", "no"])
    readings = [e for e in s.events if e.kind == "reading" and e.data["check"] == "gap_pull_in"]
    assert len(readings) == 1
    assert readings[0].data["text"] == ["gap=0.72 mm", "volts=23.9 V"]
    assert readings[0].data["verdict"] == "does_not_pull_in"
    flat = " ".join(re.sub(r"[│╭╮╰╯─]", " ", screen).split())  # the words, without borders
    assert "Answer with the readings in turn: gap (a bare number in mm), volts (a bare number " \
           "in V)" in flat
    assert "expected a voltage" in flat  # 23.9 mm refused, then asked again
    prompts = [" ".join(a.split()) for a in asked]
    assert any(p.startswith("Reading 1 of 2: gap") for p in prompts)
    assert sum(p.startswith("Reading 2 of 2: volts") for p in prompts) == 2


def test_the_shell_takes_them_all_at_once(model):
    s, _, _ = shell_screen(model, ["do secure_driven_side", "ack", "done", "do gap_pull_in",
                                   "ack", "gap=0.5 mm volts=24 V", "", "no"])
    (reading,) = [e for e in s.events if e.kind == "reading"]
    assert reading.data["verdict"] == "pulls_in"


# --- lint -------------------------------------------------------------------------------------


def lint_with(tmp_path, file, old, new):
    pack = tmp_path / "tooth-clutch"
    shutil.copytree(FIXTURE, pack)
    path = pack / file
    text = path.read_text(encoding="utf-8")
    assert old in text
    path.write_text(text.replace(old, new), encoding="utf-8")
    (res,) = lint_paths([str(pack)])
    return [p for p in res.problems if p.level == "error"], text.split(old)[0].count("\n") + 1


@pytest.mark.parametrize(("old", "new", "said"), [
    ("        volts: {unit: V, ask", "        volt: {unit: V, ask", "no quantity 'volt'"),
    ("        volts: {unit: V, ask", "        volts: {unit: mm, ask", "does not fit the reading"),
    ("        volts: {unit: V, ask", "        gap: {unit: mm, ask", "read twice"),
])
def test_a_wrong_named_reading_is_a_lint_error_at_its_line(tmp_path, old, new, said):
    errors, line = lint_with(tmp_path, "checks.yaml", old, new)
    assert len(errors) == 1 and said in errors[0].message, errors
    assert errors[0].source.line == line


@pytest.mark.parametrize(("new", "said"), [
    ("answer: {gap: 0.75 mm, volts: 23.9 mm}", "expected a voltage"),
    ("answer: {gap: 0.75 mm}", "needs the reading volts (V) too"),
])
def test_a_wrong_named_reading_in_a_test_case_is_a_lint_error_at_the_step(tmp_path, new, said):
    errors, line = lint_with(tmp_path, "tests.yaml", "answer: {gap: 0.75 mm, volts: 23.9 V}",
                             new)
    assert len(errors) == 1 and said in errors[0].message, errors
    assert errors[0].code == "unit" and errors[0].source.line == line


# --- overrides of states and hazards ----------------------------------------------------------


def test_a_device_pack_rewords_a_state_and_a_hazard(model):
    load = model.states["load"]
    assert load.title == "The driven load that can run back"
    assert load.values == {"hanging": "held back by the clutch alone",
                           "supported": "blocked mechanically"}
    assert load.initial == "hanging" and load.renews == frozenset({"hanging"})  # unchanged
    assert model.hazards["energises_coil"].title.startswith("Switches the clutch's field on")


@pytest.mark.parametrize(("old", "new", "said"), [
    ("      supported: {title: blocked mechanically}",
     "      blocked: {title: blocked mechanically}", "the state has no value 'blocked'"),
    ("  - id: load\n    title: The driven load that can run back\n",
     "  - id: rated_power\n    title: The driven load that can run back\n",
     "renames a state's values"),
])
def test_a_wrong_override_of_state_values_is_a_lint_error(tmp_path, old, new, said):
    errors, _ = lint_with(tmp_path, "pack.yaml", old, new)
    assert any(said in e.message for e in errors), errors


def test_the_notice_shown_while_the_pack_loads_is_in_the_device_words(model):
    shown = manifest_notice(str(FIXTURE))
    assert "{" not in shown and "engages the clutch" in shown
    assert shown == model.notice  # the same text: not shown a second time once loaded


# --- what was found, in words ---------------------------------------------------------------


def test_a_finding_typed_in_words_is_kept_as_a_note_and_the_cause_still_asked(model):
    s = session(model)
    s.add_complaint("will_not_engage")
    s.repair("reset_air_gap", True)
    out = io.StringIO()
    with create_pipe_input() as pipe:
        reader = _Recording(PromptSession(input=pipe, output=DummyOutput()))
        shell = Shell(s, Console(file=out, width=80, color_system=None), reader)
        pipe.send_text("Shim lost from the hub, gap 0.8 mm\r1\r")
        found = shell.ask_finding()
    assert found == "air_gap_large"
    assert [e.data["text"] for e in s.events if e.kind == "note"] == [
        "Finding: Shim lost from the hub, gap 0.8 mm"]
    assert sum(a.startswith("What did you find?") for a in reader.asked) == 2
