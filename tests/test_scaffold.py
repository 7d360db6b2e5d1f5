"""`diagnose kb new`: skeletons that lint rejects until filled, and clean once filled."""

from __future__ import annotations

import re
from pathlib import Path

import pytest
import yaml

from diagnose.cli import main
from diagnose.errors import InputError
from diagnose.kb.scaffold import KINDS, append_entry, pack_folder, skeleton, write_skeleton

MANIFEST = """\
pack: scaffold-test
title: Scaffold test
version: 1.0.0
notice: This tool is an aid.
parameters:
  - id: rated_voltage
    prompt: Rated coil voltage
    unit: V
    default: 24 V
  - id: rated_power
    prompt: Rated coil power
    unit: W
    default: 20 W
"""

# What a trainer types over each placeholder.
FILL = [
    (r"title:\s+# TODO.*", "title: A plain title"),
    (r"caller:\s+# TODO.*", "caller: The words a caller uses"),
    (r"ask:\s+# TODO.*", "ask: Do this and look at that."),
    (r"minutes:\s+# TODO.*", "minutes: 5"),
    (r"prior:\s+# TODO.*", "prior: 12"),
    (r"(todo_normal|todo_fault):\s+# TODO.*", r"\1: what is seen"),
    (r"\{(\w+): TODO\}", r"{\1: 0.9}"),
    (r"\$todo_parameter", "$rated_voltage"),
]


@pytest.fixture
def pack(tmp_path: Path) -> Path:
    (tmp_path / "pack.yaml").write_text(MANIFEST)
    return tmp_path


def _fill(path: Path, cause: str) -> None:
    text = path.read_text()
    for pattern, new in FILL:
        text = re.sub(pattern, new, text)
    text = text.replace("todo_cause", cause)
    path.write_text(text)


def _lint(folder: Path):
    from diagnose.kb.lint import lint_paths

    (res,) = lint_paths([str(folder)])
    return res


def _every_kind(pack: Path) -> list[Path]:
    return [
        write_skeleton(pack, "complaint", "brake_stuck"),
        write_skeleton(pack, "cause", "coil_open"),
        write_skeleton(pack, "check", "listen_click"),
        write_skeleton(pack, "measurement", "coil_ohms", evaluator="coil"),
        write_skeleton(pack, "repair", "replace_coil"),
    ]


def test_skeletons_fail_lint_until_filled_then_lint_clean(pack):
    files = _every_kind(pack)
    assert [f.name for f in files] == [
        "complaints-brake_stuck.yaml", "causes-coil_open.yaml", "checks-listen_click.yaml",
        "measurements-coil_ohms.yaml", "repairs-replace_coil.yaml"]
    res = _lint(pack)
    flagged = {p.source.file.rsplit("/", 1)[-1] for p in res.errors if p.source}
    assert flagged == {f.name for f in files}  # every file has something left to fill
    for f in files:
        _fill(f, "coil_open")
    res = _lint(pack)
    assert res.problems == [], "\n".join(map(str, res.problems))


def test_every_todo_line_of_a_cause_is_an_error_at_its_line(pack):
    path = write_skeleton(pack, "cause", "coil_open")
    todo = {n for n, line in enumerate(path.read_text().splitlines(), 1)
            if re.search(r":\s+# TODO", line)}
    lines = {p.source.line for p in _lint(pack).errors
             if p.source and p.source.file.endswith(path.name)}
    assert todo <= lines


@pytest.mark.parametrize("kind", list(KINDS))
def test_skeleton_is_one_yaml_list_item_with_the_id(kind):
    (item,) = yaml.safe_load(skeleton(kind, "new_thing"))
    assert item["id"] == "new_thing"


def test_measurement_without_evaluator_names_the_evaluators():
    text = skeleton("measurement", "reading")
    assert "evaluator: TODO" in text and "coil" in text


@pytest.mark.parametrize("kind, id, field", [
    ("widget", "x", "KIND"), ("cause", "Coil-Open", "ID"), ("cause", "x", "--evaluator"),
])
def test_bad_arguments_are_input_errors(kind, id, field):
    with pytest.raises(InputError) as err:
        skeleton(kind, id, evaluator="coil" if field == "--evaluator" else None)
    assert err.value.field == field


def test_unknown_evaluator_is_an_input_error():
    with pytest.raises(InputError):
        skeleton("measurement", "x", evaluator="flux")


def test_append_keeps_the_file_and_joins_its_section(pack):
    target = pack / "mechanics.yaml"
    target.write_text(
        "# mechanics of the brake\n"
        "causes:\n"
        "  - id: lining_worn   # the usual one\n"
        "    title: Lining worn\n"
        "    prior: 30\n"
        "\n"
        "# --- repairs ---\n"
        "repairs: []\n"
    )
    write_skeleton(pack, "cause", "spring_broken", file="mechanics.yaml")
    write_skeleton(pack, "repair", "replace_spring", file="mechanics.yaml")
    write_skeleton(pack, "complaint", "noisy", file="mechanics.yaml")
    text = target.read_text()
    data = yaml.safe_load(text)
    assert [c["id"] for c in data["causes"]] == ["lining_worn", "spring_broken"]
    assert [r["id"] for r in data["repairs"]] == ["replace_spring"]
    assert [c["id"] for c in data["complaints"]] == ["noisy"]
    assert text.startswith("# mechanics of the brake\ncauses:\n  - id: lining_worn   # the usual")
    # the section comment stays in front of its section
    assert text.index("# --- repairs ---") < text.index("repairs:") < text.index("replace_spring")
    assert text.index("spring_broken") < text.index("# --- repairs ---")


@pytest.mark.parametrize("old", ["causes:\n", "causes: ~\n", "causes: []  # none yet\n",
                                 "other: 1\ncauses:\n- id: a\n  title: A\n  prior: 1\n"])
def test_append_into_empty_or_unindented_sections(old):
    new = append_entry(old, "causes", skeleton("cause", "b"))
    assert [c["id"] for c in yaml.safe_load(new)["causes"]][-1] == "b"


def test_append_refuses_a_flow_list_with_entries():
    with pytest.raises(InputError):
        append_entry("causes: [{id: a, title: A, prior: 1}]\n", "causes", skeleton("cause", "b"))


def test_refuses_an_id_in_use_and_an_existing_file(pack):
    write_skeleton(pack, "cause", "coil_open")
    with pytest.raises(InputError, match="already a cause"):
        write_skeleton(pack, "repair", "coil_open")
    (pack / "checks-click.yaml").write_text("checks: []\n")
    with pytest.raises(InputError, match="exists"):
        write_skeleton(pack, "check", "click")


def test_named_file_must_be_a_yaml_file_of_the_pack(pack, tmp_path_factory, monkeypatch):
    elsewhere = tmp_path_factory.mktemp("elsewhere") / "causes.yaml"
    with pytest.raises(InputError, match="not in the pack folder"):
        write_skeleton(pack, "cause", "a", file=elsewhere)
    with pytest.raises(InputError, match="ends in .yaml"):
        write_skeleton(pack, "cause", "a", file="notes.txt")
    monkeypatch.chdir(pack.parent)  # a path from the working folder into the pack is fine
    written = write_skeleton(pack, "cause", "a", file=pack.name + "/faults.yaml")
    assert written.resolve() == (pack / "faults.yaml").resolve()


def test_kb_new_appending_to_a_binary_file_or_a_folder(pack, capsys):
    (pack / "binary.yaml").write_bytes(b"\xff\xfe\x00 not text")
    (pack / "folder.yaml").mkdir()
    for name, reason in (("binary.yaml", "not UTF-8 text"), ("folder.yaml", "cannot read")):
        code = main(["kb", "new", "cause", "a", "--pack", str(pack), "--file", name])
        err = capsys.readouterr().err
        assert code == 2 and reason in err and len(err.strip().splitlines()) == 1
    assert (pack / "binary.yaml").read_bytes() == b"\xff\xfe\x00 not text"


def test_pack_folder_defaults_to_a_folder_with_pack_yaml(pack, tmp_path_factory):
    assert pack_folder(None, pack) == pack
    with pytest.raises(InputError):
        pack_folder(None, tmp_path_factory.mktemp("empty"))


def test_command_line_writes_into_the_current_pack(pack, monkeypatch, capsys):
    monkeypatch.chdir(pack)
    assert main(["kb", "new", "cause", "fuse_blown"]) == 0
    assert "causes-fuse_blown.yaml" in capsys.readouterr().out
    assert (pack / "causes-fuse_blown.yaml").is_file()
    assert main(["kb", "new", "cause", "fuse_blown"]) == 2  # the id is in use: one line, exit 2
    assert "already a cause" in capsys.readouterr().err
