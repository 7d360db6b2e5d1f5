"""Parts as lists of whole items, and complaints a caller can tell apart: the lint rules."""

from __future__ import annotations

import re
import shutil
from pathlib import Path

import pytest

from diagnose.cli import main
from diagnose.errors import KnowledgeError
from diagnose.kb.compiler import compile_pack
from diagnose.kb.lint import lint_paths
from diagnose.kb.loader import load_model

FIXTURES = Path(__file__).parent / "fixtures"
MINI = FIXTURES / "mini"
ROOT = Path(__file__).parent.parent / "knowledge"
SHIPPED = [p.name for p in sorted(ROOT.iterdir()) if (p / "pack.yaml").is_file()]
FIXTURE_PACKS = [p.name for p in sorted(FIXTURES.iterdir()) if (p / "pack.yaml").is_file()]
#: The mini pack's one parts list, as shipped.
FUSE = "    parts:\n      - fuse\n"
#: Words a part's name never starts with: what is left of a name split at its comma.
CONNECTING = ("if", "or", "and", "where", "when", "with", "its", "rated", "as", "for", "unless",
              "including", "to", "of", "in")


def _pack(tmp_path: Path, new: str, old: str = FUSE, file: str = "knowledge.yaml") -> Path:
    """A copy of the mini pack with ``old`` replaced by ``new`` once in ``file``."""
    dst = tmp_path / "pack"
    shutil.copytree(MINI, dst)
    text = (dst / file).read_text()
    assert old in text, old
    (dst / file).write_text(text.replace(old, new, 1))
    return dst


def _lint(pack: Path, search: list[str] | None = None):
    (res,) = lint_paths([str(pack)], search=search)
    return res


def _where(path: Path, needle: str) -> tuple[int, int]:
    """Line and column (1-based) of the first ``needle`` in ``path``."""
    for n, line in enumerate(path.read_text().splitlines(), 1):
        if needle in line:
            return n, line.index(needle) + 1
    raise AssertionError(needle)


def test_parts_written_as_one_text_is_refused_with_the_fix(tmp_path, capsys):
    pack = _pack(tmp_path, '    parts: "fuse, relay"\n')
    res = _lint(pack)
    (hit,) = [p for p in res.problems if p.code == "parts-text"]
    assert hit.level == "error" and not res.ok()
    assert "repair 'replace_fuse'" in hit.message and "'fuse, relay'" in hit.message
    assert "YAML list, one whole part per item" in hit.message
    assert "`- fuse` and `- relay`" in hit.message
    assert hit.source.line == _where(pack / "knowledge.yaml", "parts:")[0]
    # said once, in its own words, not again as a bare schema message
    assert not [p for p in res.problems if p.code == "schema"]
    assert main(["kb", "lint", str(pack)]) == 1
    assert "one whole part per item" in capsys.readouterr().out
    with pytest.raises(KnowledgeError):
        load_model(str(pack))


def test_one_part_written_as_text_is_refused_too(tmp_path):
    res = _lint(_pack(tmp_path, "    parts: fuse\n"))
    (hit,) = [p for p in res.problems if p.code == "parts-text"]
    assert "`- fuse`" in hit.message


def test_a_flow_list_split_at_a_comma_is_flagged_at_its_line(tmp_path):
    pack = _pack(tmp_path, "    parts: [friction disc, if the faces are pitted]\n")
    res = _lint(pack)
    (hit,) = [p for p in res.problems if p.code == "parts-split"]
    assert hit.level == "error" and not res.ok()
    assert (hit.source.line, hit.source.col) == _where(pack / "knowledge.yaml", "if the faces")
    assert "'if the faces are pitted' is not a part" in hit.message
    assert "starts with 'if'" in hit.message
    assert "`friction disc, if the faces are pitted`" in hit.message  # what the brackets split
    assert "`- friction disc (if the faces are pitted)`" in hit.message  # the fix
    assert "block list" in hit.message and "quote the whole name" in hit.message


def test_a_flow_list_over_several_lines_is_still_a_flow_list(tmp_path):
    pack = _pack(tmp_path, "    parts: [brake with a higher rated torque,\n"
                           "            if the load cannot be reduced]\n")
    (hit,) = [p for p in _lint(pack).problems if p.code == "parts-split"]
    assert hit.source.line == _where(pack / "knowledge.yaml", "if the load")[0]
    assert "the brackets split" in hit.message


def test_a_flow_list_whose_item_holds_a_joining_word_is_flagged(tmp_path):
    # "varistor, diode with Zener or RC part" was one part; the brackets made two
    pack = _pack(tmp_path, "    parts: [varistor, diode with Zener or RC part as the diagram "
                           "specifies]\n")
    (hit,) = [p for p in _lint(pack).problems if p.code == "parts-split"]
    assert hit.source.col == _where(pack / "knowledge.yaml", "diode with")[1]
    assert "'diode with Zener or RC part as the diagram specifies'" in hit.message
    assert "holds 'with'" in hit.message and "block list" in hit.message


@pytest.mark.parametrize("parts", [
    "    parts: [fuse]\n",                                      # one item: nothing was split
    "    parts: [ferrules, connector contacts]\n",              # whole items, no joining word
    '    parts: ["friction disc, if the faces are pitted"]\n',  # the whole name quoted
    "    parts: []\n",
])
def test_flow_lists_that_split_nothing_are_clean(tmp_path, parts):
    assert _lint(_pack(tmp_path, parts)).problems == []


def test_a_block_list_of_whole_items_is_clean(tmp_path):
    pack = _pack(tmp_path, "    parts:\n"
                           "      - friction disc (if the faces are pitted)\n"
                           "      - relay contact or rectifier with DC-side switching terminals\n"
                           '      - "suppression part the diagram specifies: varistor, diode '
                           'with Zener, or RC"\n')
    res = _lint(pack)
    assert res.problems == [] and res.ok(strict=True)
    model = load_model(str(pack))
    assert model.repairs["replace_fuse"].parts == (
        "friction disc (if the faces are pitted)",
        "relay contact or rectifier with DC-side switching terminals",
        "suppression part the diagram specifies: varistor, diode with Zener, or RC")


@pytest.mark.parametrize("item,why", [
    ("if damaged", "starts with 'if'"),
    ("or a brake rated for the stop energy", "starts with 'or'"),
    ("rated for DC inductive switching", "starts with 'rated'"),
    ("optional", "only a qualifier"),
    ("(where fitted)", "only a qualifier"),
    ("same size", "only a qualifier"),
])
def test_a_block_list_item_that_is_no_part_is_flagged(tmp_path, item, why):
    pack = _pack(tmp_path, f"    parts:\n      - mounting screws\n      - {item}\n")
    (hit,) = [p for p in _lint(pack).problems if p.code == "parts-split"]
    assert why in hit.message and f"{item!r}" in hit.message
    assert hit.source.line == _where(pack / "knowledge.yaml", f"- {item}")[0]
    assert "the brackets" not in hit.message  # a block list was not split by brackets
    assert f"`- mounting screws ({item.strip('()')})`" in hit.message


def test_parts_built_in_code_are_checked_without_positions():
    data = {"complaints": [{"id": "k", "title": "K", "inputs": ["c"]}],
            "causes": [{"id": "c", "title": "C", "prior": 1}],
            "repairs": [{"id": "r", "title": "R", "minutes": 5, "fixes": ["c"],
                         "parts": ["mounting screws", "if damaged"]}]}
    with pytest.raises(KnowledgeError) as err:
        compile_pack([("pack.yaml", {"pack": "p", "title": "P", **data})])
    assert [p.code for p in err.value.problems] == ["parts-split"]
    data["repairs"][0]["parts"] = ["mounting screws (if damaged)"]
    model = compile_pack([("pack.yaml", {"pack": "p", "title": "P", **data})])
    assert model.repairs["r"].parts == ("mounting screws (if damaged)",)


SECOND = """\
  - id: stuck_on
    title: Brake stays on
    caller: "  the axis will NOT   move."
    gate: or
    inputs: [coil_open]
"""


def test_two_complaints_with_the_same_caller_wording_warn(tmp_path):
    pack = _pack(tmp_path, SECOND + "events:\n", old="events:\n")
    res = _lint(pack)
    (hit,) = [p for p in res.problems if p.code == "same-caller"]
    assert hit.level == "warning"
    assert "'will_not_release' and 'stuck_on'" in hit.message
    assert "menu shows the same line twice" in hit.message
    assert hit.source.line == _where(pack / "knowledge.yaml", "the axis will NOT")[0]
    assert res.ok() and not res.ok(strict=True)
    assert main(["kb", "lint", "--strict", str(pack)]) == 1


def test_the_same_caller_wording_across_a_composed_pack_warns(tmp_path):
    base = tmp_path / "mini-brake"
    shutil.copytree(MINI, base)
    device = tmp_path / "device"
    device.mkdir()
    (device / "pack.yaml").write_text(
        "pack: device\ntitle: Device\nversion: 1.0.0\nbuilds_on: [mini-brake]\n"
        "complaints:\n  - id: axis_stuck\n    title: Axis stuck\n"
        "    caller: The axis will not move!\n    inputs: [coil_open]\n")
    res = _lint(device, search=[str(tmp_path)])
    (hit,) = [p for p in res.problems if p.code == "same-caller"]
    assert hit.source.file.endswith("device/pack.yaml")  # the device pack's line, the second
    assert "knowledge.yaml" in hit.message  # and where the first one is
    # worded so that a caller can tell them apart: clean
    (device / "pack.yaml").write_text((device / "pack.yaml").read_text().replace(
        "The axis will not move!", "The axis will not move and the brake never clicks"))
    assert not [p for p in _lint(device, search=[str(tmp_path)]).problems
                if p.code == "same-caller"]


@pytest.mark.parametrize("pack", SHIPPED + [f"fixtures/{p}" for p in FIXTURE_PACKS])
def test_every_parts_item_of_the_shipped_packs_is_one_whole_part(pack):
    folder = ROOT / pack if not pack.startswith("fixtures/") else FIXTURES / pack[9:]
    model = load_model(str(folder))
    for repair in model.repairs.values():
        for part in repair.parts:
            first = part.split()[0]
            assert part.strip() == part and first not in CONNECTING, (repair.id, part)
            assert not (part.startswith("(") and part.endswith(")")), (repair.id, part)
    # written as block lists: no bracketed list of several items is left to split
    for f in folder.glob("*.yaml"):
        flow = re.findall(r"^\s*parts:\s*\[[^\]]*,", f.read_text(), re.MULTILINE)
        assert not flow, (f.name, flow)


@pytest.mark.parametrize("pack", SHIPPED)
def test_every_shipped_pack_is_lint_strict_clean(pack, capsys):
    (res,) = lint_paths([str(ROOT / pack)])
    assert [str(p) for p in res.problems] == []
    assert main(["kb", "lint", "--strict", str(ROOT / pack)]) == 0
    capsys.readouterr()
