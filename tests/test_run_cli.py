"""`diagnose run PACK --answers FILE`: a scripted session, as text or JSON."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from diagnose.cli import main

ROOT = Path(__file__).parent.parent
MINI = str(ROOT / "tests" / "fixtures" / "mini")
SPRING = ROOT / "knowledge" / "spring-applied-brake"

ANSWERS = """\
nameplate: {rated_voltage: 24 V, rated_power: 20 W}
complaints: [will_not_release]
steps:
  - {check: listen_click, answer: silent}
  - {check: fuse_state, answer: unsure}
  - {check: coil_resistance, answer: OL}
  - {repair: replace_coil, cured: true}
"""


def run(capsys, *argv):
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture
def answers(tmp_path):
    path = tmp_path / "answers.yaml"
    path.write_text(ANSWERS)
    return str(path)


def test_json_has_ranking_next_and_steps(capsys, answers):
    code, out, _ = run(capsys, "run", MINI, "--answers", answers, "--json")
    assert code == 0
    data = json.loads(out)
    ranking = data["ranking"]
    assert ranking[0] == {"cause": "coil_open", "p": pytest.approx(1.0, abs=1e-6)}
    assert {r["cause"] for r in ranking} >= {"unknown", "fuse_blown"}
    assert [r["p"] for r in ranking] == sorted((r["p"] for r in ranking), reverse=True)
    assert data["next"]["action"] == "done"
    assert len(data["steps"]) == 4
    assert data["steps"][2]["finding"]["outcome"] == "open"
    assert data["steps"][1]["finding"]["outcome"] is None  # unsure
    assert data["steps"][2]["next"]["action"] == "repair"


def test_text_output_fits_80_columns(capsys, answers):
    code, out, _ = run(capsys, "run", MINI, "--answers", answers)
    assert code == 0
    assert "step 3: coil_resistance: OL" in out and "Next:" in out
    assert all(len(line) <= 80 for line in out.splitlines())


def test_json_answers_file_and_phone_mode(capsys, tmp_path):
    path = tmp_path / "answers.json"
    path.write_text(json.dumps({"complaints": ["will_not_release"],
                                "steps": [{"check": "listen_click", "answer": "silent"}]}))
    code, out, _ = run(capsys, "run", MINI, "--answers", str(path), "--json", "--mode", "phone",
                       "--max-faults", "2")
    data = json.loads(out)
    assert code == 0 and data["mode"] == "phone" and data["max_faults"] == 2
    assert data["next"]["action"] in ("visit", "check") and "hypotheses" in data


@pytest.mark.parametrize("text,needle", [
    ("steps:\n  - {check: listen_click, answer: loud}\n", "step 1"),
    ("steps:\n  - {check: coil_resistance, answer: 12 kg}\n", "step 1"),
    ("complaints: [smoke]\n", "smoke"),
    ("stepz: []\n", "stepz"),
    ("steps: [\n", "answers"),
])
def test_bad_answers_are_one_line_and_exit_2(capsys, tmp_path, text, needle):
    path = tmp_path / "bad.yaml"
    path.write_text(text)
    code, _, err = run(capsys, "run", MINI, "--answers", str(path))
    assert code == 2 and needle in err and len(err.strip().splitlines()) == 1
    assert "Traceback" not in err


def test_missing_answers_file(capsys, tmp_path):
    code, _, err = run(capsys, "run", MINI, "--answers", str(tmp_path / "none.yaml"))
    assert code == 2 and "cannot read" in err


@pytest.mark.parametrize("step", ["{check: [1, 2], answer: {a: 1}}", "{repair: [1], skip: true}"])
def test_answers_file_with_a_list_as_check_or_repair_id(capsys, tmp_path, step):
    path = tmp_path / "bad.yaml"
    path.write_text(f"steps:\n  - {step}\n")
    code, _, err = run(capsys, "run", MINI, "--answers", str(path), "--no-journal")
    assert code == 2 and "step 1" in err and "must be an id" in err
    assert len(err.strip().splitlines()) == 1


def test_answers_file_nested_too_deeply(capsys, tmp_path):
    path = tmp_path / "deep.yaml"
    path.write_text("steps: " + "[" * 5000 + "]" * 5000 + "\n")
    code, _, err = run(capsys, "run", MINI, "--answers", str(path), "--no-journal")
    # our own limit ("nested too deeply") or libyaml's ("maximum nesting depth"), by version
    assert code == 2 and "nest" in err and len(err.strip().splitlines()) == 1
    assert "Traceback" not in err


@pytest.mark.skipif(not SPRING.is_dir(), reason="the spring-applied-brake pack is not there")
@pytest.mark.parametrize("example", sorted((ROOT / "examples").glob("*.yaml")),
                         ids=lambda p: p.stem)
def test_shipped_examples_run_on_the_spring_applied_brake_pack(capsys, example):
    code, out, err = run(capsys, "run", str(SPRING), "--answers", str(example), "--json")
    assert code == 0, err
    data = json.loads(out)
    assert data["ranking"] and data["next"]["action"] in ("done", "visit", "repair", "check")
    assert len(data["steps"]) >= 3


def test_an_empty_answers_file_is_refused_in_one_line(tmp_path, capsys):
    from diagnose.cli import main

    empty = tmp_path / "empty.yaml"
    empty.write_text("\n")
    assert main(["run", "spring-applied-brake", "--answers", str(empty), "--no-journal"]) == 2
    err = capsys.readouterr().err
    assert "is empty" in err and len(err.strip().splitlines()) == 1


def test_skip_must_be_true_or_false(tmp_path, capsys):
    from diagnose.cli import main

    f = tmp_path / "a.yaml"
    f.write_text("complaints: [will_not_release]\nsteps:\n  - {check: coil_voltage, skip: 'no'}\n")
    assert main(["run", "spring-applied-brake", "--answers", str(f), "--no-journal"]) == 2
    assert "true or false" in capsys.readouterr().err


def test_text_shows_the_first_ranking_after_the_complaint(capsys, answers):
    # the first ranking printed is the one with the complaint applied, the same as --json's
    # first step sees: a cause outside the complaint's tree cannot lead it
    code, out, _ = run(capsys, "run", MINI, "--answers", answers, "--no-journal")
    assert code == 0
    head, sep, rest = out.partition("the complaint")
    assert sep and "Most likely causes" not in head
    from diagnose.kb.loader import load_model
    from diagnose.reasoning.evidence import Evidence
    from diagnose.reasoning.posterior import posterior

    model = load_model(MINI)
    top = posterior(model, Evidence(complaints=("will_not_release",))).top()[0]
    first = rest.split("Most likely causes", 1)[1].splitlines()[1]  # title, first row
    assert model.causes[top].title in first, first
