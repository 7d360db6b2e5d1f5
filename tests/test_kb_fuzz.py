"""A broken pack never produces a traceback: any value of any type at any place gives problems."""

from __future__ import annotations

import copy
from pathlib import Path

import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from packdata import places

from diagnose.kb.compiler import compile_sources
from diagnose.kb.loader import PackSource
from diagnose.kb.yamlpos import Document

MINI = Path(__file__).parent / "fixtures" / "mini"
DOCS = {f.name: yaml.safe_load(f.read_text()) for f in sorted(MINI.glob("*.yaml"))}


PLACES = [(name, p) for name, data in DOCS.items() for p in places(data) if p]
JUNK = st.sampled_from(["ten", "", -1, 0, 1e308, [], {}, None, True, [{"x": 1}], {"a": [1]},
                        "$nope", "0.5 kg", ["a", "b"]])


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.sampled_from(PLACES), JUNK)
def test_junk_anywhere_gives_problems_not_a_crash(place, junk):
    name, path = place
    docs = copy.deepcopy(DOCS)
    target = docs[name]
    for key in path[:-1]:
        target = target[key]
    target[path[-1]] = junk
    order = ["pack.yaml"] + [n for n in docs if n != "pack.yaml"]
    src = PackSource("mini-brake", "mini", [Document(n, docs[n]) for n in order])
    model, problems = compile_sources([src])
    assert model is not None or any(p.level == "error" for p in problems)


# --- raw text: the whole loader (bounded YAML reader, schema, compiler) on fuzzed files ---------

MINI_TEXT = {f.name: f.read_text(encoding="utf-8") for f in sorted(MINI.glob("*.yaml"))}
YAML_PIECES = st.sampled_from(
    list("abc019 :-[]{},&*!|>'\"#%@`?\n\t\x1b\x9b") +
    ["!!int ", "!!float ", "!!binary ", "!!set ", "<<: ", "&a ", "*a", "? ", "--- ", "...\n",
     "causes:\n  - id: ", "checks:\n  - id: x\n    effects: ", "title: ", "prior: ", "1e999",
     "9" * 40, "\n  ", "\n    - ", "only_if: {", "builds_on: [", "../x", "\ufeff"])


@settings(max_examples=200, deadline=2000,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(st.sampled_from(sorted(MINI_TEXT)), st.integers(0, 4000),
       st.lists(YAML_PIECES, max_size=40).map("".join), st.booleans())
def test_fuzz_the_pack_loader_on_raw_text(tmp_path_factory, name, at, insert, replace_all):
    """A pack file spoilt anywhere, or replaced by noise: problems or a model, never a crash."""
    from diagnose.errors import DiagnoseError
    from diagnose.kb.loader import check_pack

    folder = tmp_path_factory.mktemp("fuzz") / "pack"
    folder.mkdir()
    for n, text in MINI_TEXT.items():
        (folder / n).write_text(text, encoding="utf-8")
    text = MINI_TEXT[name]
    at = min(at, len(text))
    spoilt = insert if replace_all else text[:at] + insert + text[at:]
    (folder / name).write_text(spoilt, encoding="utf-8")
    try:
        model, problems = check_pack(str(folder))
    except DiagnoseError as exc:
        assert "\n" not in str(exc)
        return
    assert model is not None or any(p.level == "error" for p in problems)
    for p in problems:
        assert "\n" not in str(p) and len(str(p)) < 2000, str(p)[:300]
