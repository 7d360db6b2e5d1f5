"""Lint: one broken copy of the small fixture pack per error class, with the exact file:line."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from diagnose.cli import main
from diagnose.kb.lint import lint_paths

MINI = Path(__file__).parent / "fixtures" / "mini"


def _broken(tmp_path: Path, file: str, old: str, new: str) -> Path:
    """A copy of the mini pack with ``old`` replaced by ``new`` once in ``file``."""
    dst = tmp_path / "pack"
    shutil.copytree(MINI, dst)
    target = dst / file
    text = target.read_text()
    assert old in text, old
    target.write_text(text.replace(old, new, 1))
    return dst


def _line_of(path: Path, needle: str) -> int:
    for n, line in enumerate(path.read_text().splitlines(), 1):
        if needle in line:
            return n
    raise AssertionError(needle)


def _problems(pack: Path):
    (res,) = lint_paths([str(pack)])
    return res


# (file, old, new, code, level, line marker: text on the line the message must point at)
CASES = [
    ("knowledge.yaml", "    title: Fuse blown\n", "    title: Fuse blown\n   bad: [\n",
     "yaml", "error", None),
    ("knowledge.yaml", "    prior: 30\n", "    prior: 30\n    frequency: 2\n",
     "schema", "error", "frequency: 2"),
    ("knowledge.yaml", "  - id: cable_break\n", "  - id: fuse_blown\n",
     "duplicate-id", "error", "- id: fuse_blown\n    title: Cable broken"),
    ("knowledge.yaml", "    fixes: [coil_open]", "    fixes: [coil_opne]",
     "unknown-ref", "error", "fixes: [coil_opne]"),
    ("knowledge.yaml", "    inputs: [fuse_blown, cable_break]",
     "    inputs: [fuse_blown, cable_break, no_coil_power]", "cycle", "error",
     "- id: no_coil_power"),
    ("knowledge.yaml", "    inputs: [no_coil_power, coil_open, lining_worn]",
     "    inputs: [no_coil_power, coil_open]", "unreachable-cause", "error",
     "- id: lining_worn"),
    ("knowledge.yaml", "    fixes: [lining_worn]", "    fixes: [coil_open]", "no-repair", "error",
     "- id: lining_worn"),
    ("knowledge.yaml", "      fuse_blown: {blown: 0.97}", "      fuse_blown: {blown: 1.7}",
     "probability", "error", "fuse_blown: {blown: 1.7}"),
    ("knowledge.yaml", "    normal: {intact: 0.98}", "    normal: {intact: 0.98, blown: 0.2}",
     "effects-sum", "error", "normal: {intact: 0.98, blown: 0.2}"),
    ("knowledge.yaml", "        rated_voltage: $rated_voltage",
     "        rated_voltage: 0.5 mm", "unit", "error", "rated_voltage: 0.5 mm"),
    ("pack.yaml", "    unit: W\n", "    unit: mm\n", "unit", "error",
     "knowledge.yaml::rated_power: $rated_power"),
    ("knowledge.yaml", "      evaluator: coil", "      evaluator: coils", "evaluator", "error",
     "evaluator: coils"),
    ("knowledge.yaml", "    caller: Please switch", "    said: Please switch", "schema", "error",
     "said: Please switch"),
    ("knowledge.yaml", "    effects:\n      fuse_blown: {blown: 0.97}",
     "    preparation: false", "observes-nothing", "warning", "- id: fuse_state"),
    ("pack.yaml", "    text: Isolate and lock out", "    text: Isolate and lock out",
     None, None, None),  # the clean pack: no problem at all
    ("knowledge.yaml", "    cautions: [lockout]\n    ask: Check the fuse",
     "    cautions: []\n    ask: Check the fuse", None, None, None),
    ("pack.yaml", "cautions:\n", "cautions:\n  - id: spare\n    level: NOTICE\n    text: Unused.\n",
     "unused-caution", "warning", "- id: spare"),
    ("knowledge.yaml", "      coil_open: {open: 0.97}", "      coil_open: {open: 1.0}",
     "zero-probability", "warning", "coil_open: {open: 1.0}"),
    ("knowledge.yaml", "    gate: or\n    inputs: [fuse_blown", "    gate: k_of_n\n    k: 3\n"
     "    inputs: [fuse_blown", "gate", "error", "k: 3"),
    ("pack.yaml", "leak: 0.01\n", "leak: 0.01\nbuilds_on: [no-such-pack]\n", "builds-on",
     "error", "builds_on: [no-such-pack]"),
    ("knowledge.yaml", "    prior: 12\n", "    prior: 12\n    prior: 13\n", "duplicate-key",
     "error", "prior: 13"),
    ("knowledge.yaml", "    parts:\n      - fuse\n", '    parts: "fuse, relay"\n', "parts-text",
     "error", 'parts: "fuse, relay"'),
    ("knowledge.yaml", "    parts:\n      - fuse\n", "    parts: [fuse, if blown]\n",
     "parts-split", "error", "parts: [fuse, if blown]"),
    ("knowledge.yaml", "events:\n", "  - id: stuck\n    title: Stuck\n    caller: the axis will "
     "not move.\n    inputs: [coil_open]\nevents:\n", "same-caller", "warning",
     "caller: the axis will not move."),
]


@pytest.mark.parametrize("file,old,new,code,level,marker", CASES,
                         ids=[c[3] or f"clean-{i}" for i, c in enumerate(CASES)])
def test_each_error_class_points_at_its_line(tmp_path, file, old, new, code, level, marker):
    pack = _broken(tmp_path, file, old, new)
    res = _problems(pack)
    if code is None:
        assert [str(p) for p in res.problems] == []
        return
    hits = [p for p in res.problems if p.code == code and p.level == level]
    assert hits, [str(p) for p in res.problems]
    if code == "yaml":
        assert hits[0].source.file.endswith(file)
        assert hits[0].source.line == _line_of(pack / file, "bad: [")
        return
    if "::" in marker:
        file, marker = marker.split("::")
    marker_file = pack / file
    first = marker.split("\n")[0]
    expected_line = _line_of(marker_file, first)
    if "\n" in marker:  # the second occurrence of a repeated first line
        lines = marker_file.read_text().splitlines()
        expected_line = next(n for n in range(1, len(lines))
                             if first in lines[n - 1] and marker.split("\n")[1] in lines[n])
    assert any(p.source and p.source.file.endswith(file) and p.source.line == expected_line
               for p in hits), ([str(p) for p in hits], expected_line)
    assert res.ok() is (level == "warning")
    assert res.ok(strict=True) is False


def test_clean_fixture_is_clean():
    res = _problems(MINI)
    assert res.problems == []


def test_misspelt_reference_cli_names_file_line_and_suggestion(tmp_path, capsys):
    pack = _broken(tmp_path, "knowledge.yaml", "    fixes: [coil_open]", "    fixes: [coil_opne]")
    assert main(["kb", "lint", str(pack)]) == 1
    out = capsys.readouterr().out
    line = _line_of(pack / "knowledge.yaml", "coil_opne")
    assert f"knowledge.yaml:{line}:" in out
    assert "did you mean 'coil_open'" in out
    assert "Traceback" not in out


def test_all_problems_are_reported_not_only_the_first(tmp_path):
    pack = _broken(tmp_path, "knowledge.yaml", "    fixes: [coil_open]", "    fixes: [coil_opne]")
    text = (pack / "knowledge.yaml").read_text().replace("    confirm: listen_click",
                                                          "    confirm: listen_clack")
    (pack / "knowledge.yaml").write_text(text)
    res = _problems(pack)
    assert {p.code for p in res.errors} == {"unknown-ref"}
    assert len(res.errors) == 2


def test_warnings_fail_only_with_strict(tmp_path):
    pack = _broken(tmp_path, "pack.yaml", "cautions:\n",
                   "cautions:\n  - id: spare\n    level: NOTICE\n    text: Unused.\n")
    assert main(["kb", "lint", str(pack)]) == 0
    assert main(["kb", "lint", "--strict", str(pack)]) == 1


def test_not_a_pack_is_one_line(tmp_path, capsys):
    assert main(["kb", "lint", str(tmp_path)]) == 1
    out = capsys.readouterr().out
    assert "without pack.yaml" in out


def _with_file(tmp_path: Path, name: str, text: str) -> Path:
    dst = tmp_path / "pack"
    shutil.copytree(MINI, dst)
    (dst / name).write_text(text)
    return dst


VOLTS = """\
checks:
  - id: coil_volts
    title: Coil volts
    minutes: 5
    ask: Measure the coil volts.
    measure:
      evaluator: supply
      reading: volts
      inputs: {{rated_voltage: 24 V, source: converter{extra}}}
    normal: {{ok: 0.95, low: 0.02, absent: 0.01, high: 0.01, reversed: 0.01}}
    effects:
      coil_open: {{absent: 0.9}}
"""


def test_a_signature_no_row_names_is_a_warning_at_the_measure(tmp_path):
    # the check maps the machine's supply voltage, so the evaluator can say coil_mismatch;
    # no row says how likely that is: a reading with it would count for nothing
    pack = _with_file(tmp_path, "volts.yaml", VOLTS.format(extra=", supply_voltage: 24 V"))
    res = _problems(pack)
    found = [p for p in res.problems if p.code == "outcome-unstated"]
    assert len(found) == 1 and "'coil_mismatch'" in found[0].message
    assert found[0].source.line == _line_of(pack / "volts.yaml", "measure:")
    # without the input the signature cannot be returned, and nothing is said
    plain = _with_file(tmp_path / "b", "volts.yaml", VOLTS.format(extra=""))
    assert not [p for p in _problems(plain).problems if p.code == "outcome-unstated"]


def test_only_if_on_a_cause_names_a_parameter_and_its_choices(tmp_path):
    pack = _with_file(tmp_path, "more.yaml", "causes:\n  - id: odd\n    title: Odd\n"
                      "    prior: 2\n    only_if: {gravity_lod: \"yes\"}\n")
    res = _problems(pack)
    assert any(p.code == "unknown-ref" and "gravity_lod" in p.message for p in res.errors)


def test_requires_names_a_declared_state_and_value(tmp_path):
    pack = _with_file(tmp_path, "more.yaml", """\
states:
  - id: cover
    title: Cover
    initial: closed
    values: {closed: {minutes: 3}, open: {minutes: 5}}
checks:
  - id: look
    title: Look
    minutes: 2
    ask: Look.
    requires: {cover: ajar}
    outcomes: [seen, not_seen]
    normal: {not_seen: 0.9}
    effects:
      coil_open: {seen: 0.9}
""")
    res = _problems(pack)
    bad = [p for p in res.errors if "requires" in p.message]
    assert bad and "'ajar' is not a value of state 'cover'" in bad[0].message
