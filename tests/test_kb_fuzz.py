"""A broken pack never produces a traceback: any value of any type at any place gives problems."""

from __future__ import annotations

import copy
from pathlib import Path

import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from diagnose.kb.compiler import compile_sources
from diagnose.kb.loader import PackSource
from diagnose.kb.yamlpos import Document

MINI = Path(__file__).parent / "fixtures" / "mini"
DOCS = {f.name: yaml.safe_load(f.read_text()) for f in sorted(MINI.glob("*.yaml"))}


def _paths(value, at=()):
    yield at
    if isinstance(value, dict):
        for k, v in value.items():
            yield from _paths(v, at + (k,))
    elif isinstance(value, list):
        for i, v in enumerate(value):
            yield from _paths(v, at + (i,))


PLACES = [(name, p) for name, data in DOCS.items() for p in _paths(data) if p]
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
