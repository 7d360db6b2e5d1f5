"""A pack written once for more than one device: its terms, a device pack's overrides and hides.

A base pack says ``{device}`` and ``{switch_on}``; the device pack on top
declares what they are. What a trainer checks: the words read right for the
device (a clutch that engages when energised is never called a brake, and
switching on "engages the clutch"), an override changes exactly the wording
it names, a hidden complaint or check is not offered, and each mistake is
one lint message at its line.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from diagnose.errors import KnowledgeError
from diagnose.kb.lint import lint_paths
from diagnose.kb.loader import load_model
from diagnose.session import Session

MINI = Path(__file__).parent / "fixtures" / "mini"

CLUTCH = """\
pack: mini-clutch
title: A tiny clutch pack built on the neutral base
version: 1.0.0
builds_on: [mini-base]
notice: An aid for trained staff; switching the supply on {switch_on}.
device:
  noun: clutch
  energised: engaged
  states: {engaged: engaged, released: disengaged}
override:
  - id: will_not_release
    title: Clutch will not disengage
    caller: The machine keeps turning after the stop command
hide: [fuse_state]
"""


def _base(root: Path) -> Path:
    """The mini pack made neutral: its words about the device in terms."""
    base = root / "mini-base"
    shutil.copytree(MINI, base)
    pack = (base / "pack.yaml").read_text().replace("pack: mini-brake", "pack: mini-base")
    pack = pack.replace("cautions:\n", "cautions:\n  - id: restore_power\n    level: WARNING\n"
                        "    text: Switching the supply on {switch_on}; keep clear.\n", 1)
    (base / "pack.yaml").write_text(pack)
    text = (base / "knowledge.yaml").read_text()
    text = text.replace("Power to the brake circuit", "Power to the {device} circuit")
    text = text.replace("Switch the brake on and off", "Switch the {device} on and off")
    text = text.replace("whether the brake clicks", "whether the {device} clicks")
    (base / "knowledge.yaml").write_text(text)
    return base


def _clutch(root: Path, manifest: str = CLUTCH) -> Path:
    pack = root / "mini-clutch"
    pack.mkdir()
    (pack / "pack.yaml").write_text(manifest)
    return pack


def test_the_device_pack_decides_the_words_of_the_packs_it_builds_on(tmp_path):
    _base(tmp_path)
    model = load_model(str(_clutch(tmp_path)), search=[str(tmp_path)])
    assert model.cautions["restore_power"].text.startswith(
        "Switching the supply on engages the clutch")
    assert "engages the clutch" in model.notice
    assert model.states["power"].title == "Power to the clutch circuit"
    assert model.checks["listen_click"].caller.endswith("whether the clutch clicks.")
    words = " ".join([model.notice, *(c.text for c in model.cautions.values()),
                      *(k.title for k in model.complaints.values()),
                      *(c.caller or c.ask or "" for c in model.checks.values())])
    assert "{" not in words


def test_an_override_changes_the_wording_it_names_and_a_hide_takes_it_off_the_menus(tmp_path):
    _base(tmp_path)
    model = load_model(str(_clutch(tmp_path)), search=[str(tmp_path)])
    k = model.complaints["will_not_release"]
    assert (k.title, k.caller_title) == ("Clutch will not disengage",
                                         "The machine keeps turning after the stop command")
    base = load_model(str(tmp_path / "mini-base"), search=[str(tmp_path)])
    gate, was = model.complaints["will_not_release"].gate, base.complaints["will_not_release"].gate
    assert (gate.kind, gate.inputs) == (was.kind, was.inputs)  # the wording only
    assert model.checks["fuse_state"].hidden
    s = Session(model)
    s.add_complaint("will_not_release")
    row = {r.id: r for r in s.checks_table().rows}["fuse_state"]  # never offered
    assert row.status == "not for this unit"
    assert s.next_action().id != "fuse_state"


def test_the_base_pack_on_its_own_reads_in_neutral_words(tmp_path):
    base = _base(tmp_path)
    model = load_model(str(base), search=[str(tmp_path)])
    assert model.cautions["restore_power"].text.startswith(
        "Switching the supply on energises the device")
    assert model.states["power"].title == "Power to the device circuit"


@pytest.mark.parametrize(("change", "code", "where"), [
    ("hide: [fuse_state]", "unknown-ref", "hide: [fuse_stat]"),
    ("  - id: will_not_release", "unknown-ref", "  - id: will_not_releas"),
    ("  noun: clutch", "device-terms", "  nounn: clutch"),
])
def test_a_device_pack_mistake_is_one_message_at_its_line(tmp_path, change, code, where):
    _base(tmp_path)
    pack = _clutch(tmp_path, CLUTCH.replace(change, where))
    (res,) = lint_paths([str(pack)], search=[str(tmp_path)])
    errors = [p for p in res.problems if p.level == "error"]
    assert errors and not res.ok()
    assert len(errors) <= 2, [str(p) for p in errors]
    line = next(n for n, text in enumerate(CLUTCH.replace(change, where).splitlines(), 1)
                if where.strip() in text)
    assert any(p.source is not None and p.source.line == line for p in errors), \
        [str(p) for p in errors]


def test_an_unknown_term_and_an_override_that_changes_nothing(tmp_path):
    base = _base(tmp_path)
    text = (base / "knowledge.yaml").read_text()
    (base / "knowledge.yaml").write_text(text.replace("Look at the fuse",
                                                      "Look at the {devise} fuse"))
    same = CLUTCH.replace("    title: Clutch will not disengage\n"
                          "    caller: The machine keeps turning after the stop command\n",
                          "    title: Brake will not release\n")
    (res,) = lint_paths([str(_clutch(tmp_path, same))], search=[str(tmp_path)])
    unknown = [p for p in res.problems if p.code == "unknown-term"]
    assert len(unknown) == 1 and "{devise}" in unknown[0].message
    assert unknown[0].source.file.endswith("knowledge.yaml")
    assert [p.level for p in res.problems if p.code == "override-no-change"] == ["warning"]
    with pytest.raises(KnowledgeError):
        load_model(str(tmp_path / "mini-clutch"), search=[str(tmp_path)])


@pytest.mark.parametrize(("volts", "gap", "brake", "neutral"), [
    (24, 0.3, "releases", "pulls_in"),           # margin (24/16.8)^2 = 2.04
    (17.5, 0.3, "marginal", "marginal"),         # (17.5/16.8)^2 = 1.085 < 1.1^2
    (24, 0.45, "will_not_release", "does_not_pull_in"),  # needs 16.8 x 1.5 = 25.2 V
])
def test_the_pull_in_calculator_speaks_of_the_armature_only(volts, gap, brake, neutral):
    """The same first-order reckoning (pull ~ (V/g)^2, Roters) in a device's neutral words."""
    from diagnose.physics.registry import evaluate

    values = {"rated_voltage": "24 V", "volts": f"{volts} V", "nominal_gap": "0.3 mm",
              "gap": f"{gap} mm"}
    as_brake, as_any = evaluate("release", values), evaluate("pull_in", values)
    assert (as_brake.verdict, as_any.verdict) == (brake, neutral)
    assert as_any.figures["margin"].value == pytest.approx(as_brake.figures["margin"].value)
    assert as_any.figures["needed"].value == pytest.approx(16.8 * gap / 0.3)  # 0.7 x 24 V
    text = " ".join([as_any.summary, *(f.label for f in as_any.figures.values())]).lower()
    assert "brake" not in text and "releas" not in text and "pull" in text
