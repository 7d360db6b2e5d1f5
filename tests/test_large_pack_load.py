"""Loading a large pack from YAML: the shortcuts give the same model and the same messages.

The shortcuts: the one-walk reader (data and positions together), the fast
schema check before jsonschema, no walk for control characters through a
file that holds none and no escape, the collector paused while loading.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from diagnose.kb import yamlpos
from diagnose.kb.loader import check_pack
from diagnose.reasoning.synthetic import synthetic_model

ROOT = Path(__file__).parent.parent
MINI = ROOT / "tests" / "fixtures" / "mini"


@pytest.mark.parametrize(("text", "plain"), [
    ("a: coil\n", True),
    ("a: \"x\\ey\"\n", False),  # an escape could make a control character
    ("a: x\u202ey\n", False),  # a bidirectional override, allowed by YAML
    ("a: x\r\nb: y\r\n", False),
])
def test_a_text_is_plain_only_without_control_characters_or_escapes(text, plain):
    doc, problems = yamlpos.read_yaml(text, "f.yaml")
    assert problems == [] and doc is not None and doc.plain is plain


@pytest.mark.parametrize(("field", "text", "code"), [
    ("title", "\"coil \\e[2J open\"", "U+001B"),
    ("title", "coil \u202e open", "U+202E"),
])
def test_control_characters_are_still_found_at_their_line(tmp_path, field, text, code):
    pack = tmp_path / "mini"
    shutil.copytree(MINI, pack)
    causes = pack / "knowledge.yaml"
    lines = causes.read_text(encoding="utf-8").splitlines()
    at = next(i for i, line in enumerate(lines) if line.strip().startswith(f"{field}:"))
    indent = lines[at][: len(lines[at]) - len(lines[at].lstrip())]
    lines[at] = f"{indent}{field}: {text}"
    causes.write_text("\n".join(lines) + "\n", encoding="utf-8")
    _, problems = check_pack(str(pack))
    found = [p for p in problems if p.code == "control-character"]
    assert len(found) == 1 and code in found[0].message
    assert found[0].source.line == at + 1


def test_a_synthetic_pack_reads_back_as_written(tmp_path):
    """Written as YAML files and loaded: the same causes, checks and numbers."""
    from diagnose.bench import write_pack

    model = synthetic_model(300, seed=3)
    write_pack(model, tmp_path / "pack", per_file=40)
    loaded, problems = check_pack(str(tmp_path / "pack"))
    assert loaded is not None, problems
    assert list(loaded.causes) == list(model.causes)
    assert list(loaded.checks) == list(model.checks)
    for cid, cause in model.causes.items():
        assert loaded.causes[cid].prior == pytest.approx(cause.prior, rel=1e-12)
        assert loaded.causes[cid].source.line > 1  # every entity keeps where it was written
