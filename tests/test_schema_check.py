"""The fast schema check (``diagnose.kb.schemacheck``) against jsonschema, the reference.

A yes from the fast check must be a yes from jsonschema (else a broken pack
would load without its messages); where it is exact (no ``Unsure``) it must
give jsonschema's answer. Checked on every pack file of the project and on
many documents broken at random.
"""

from __future__ import annotations

import copy
from pathlib import Path

import jsonschema
import pytest
import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from packdata import places

from diagnose.kb.schema import pack_schema
from diagnose.kb.schemacheck import Unsure, compile_schema, is_valid

ROOT = Path(__file__).parent.parent
FILES = sorted([*(ROOT / "knowledge").glob("*/*.yaml"),
                *(ROOT / "tests" / "fixtures").rglob("*.yaml")])
CHECK = compile_schema(pack_schema())
VALIDATOR = jsonschema.Draft202012Validator(pack_schema())


def _docs() -> dict[str, object]:
    out = {}
    for path in FILES:
        try:
            out[str(path.relative_to(ROOT))] = yaml.safe_load(path.read_text(encoding="utf-8"))
        except yaml.YAMLError:  # a fixture broken on purpose
            continue
    return out


DOCS = _docs()


def _agree(data: object) -> None:
    fast = is_valid(CHECK, data)
    if fast is not None:
        assert fast is VALIDATOR.is_valid(data)


@pytest.mark.parametrize("name", sorted(DOCS))
def test_every_pack_file_gets_jsonschemas_answer(name):
    _agree(DOCS[name])


def test_the_shipped_packs_are_valid_by_the_fast_check():
    shipped = [n for n in DOCS if n.startswith("knowledge")]
    assert shipped and all(is_valid(CHECK, DOCS[n]) is True for n in shipped)


PLACES = [(name, p) for name, data in DOCS.items() for p in places(data) if p]
JUNK = st.sampled_from(["ten", "", "Coil Open", "a b", -1, 0, 0.5, 1, 1.0, 2, 1e308, -0.0,
                        [], {}, None, True, False, [{"x": 1}], {"a": [1]}, ["a", "a"],
                        ["a", "b"], [1, True], "DANGER", "$nope", {"id": "x"}])


@settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.sampled_from(PLACES), JUNK, st.booleans())
def test_a_value_changed_anywhere_gets_jsonschemas_answer(place, junk, as_key):
    name, path = place
    data = copy.deepcopy(DOCS[name])
    target = data
    for key in path[:-1]:
        target = target[key]
    if as_key and isinstance(target, dict) and isinstance(junk, (str, int, float, bool)):
        target[junk] = target.pop(path[-1])  # a key renamed: unknown field, bad id, ...
    else:
        target[path[-1]] = junk
    _agree(data)


@pytest.mark.parametrize(("schema", "value", "expected"), [
    ({"type": "integer"}, 1.0, True),  # draft 2020-12: 1.0 is an integer
    ({"type": "integer"}, True, False),  # a boolean is no number
    ({"type": "number"}, False, False),
    ({"minimum": 0}, -1, False),
    ({"minimum": 0}, "text", True),  # bounds apply to numbers only
    ({"exclusiveMinimum": 0}, 0, False),
    ({"maximum": 1}, True, True),  # a boolean is not compared
    ({"enum": ["a", "b"]}, "a", True),
    ({"enum": ["a", "b"]}, 1, False),
    ({"const": "x"}, "y", False),
    ({"oneOf": [{"type": "string"}, {"minLength": 2}]}, "abc", False),  # both: not one
    ({"oneOf": [{"type": "string"}, {"type": "object"}]}, {}, True),
    ({"not": {"type": "string"}}, 1, True),
    ({"propertyNames": {"pattern": "^[a-z]+$"}}, {"Ab": 1}, False),
    ({"additionalProperties": False, "properties": {"a": {}}}, {"a": 1, "b": 2}, False),
    ({"additionalProperties": {"type": "number"}}, {"a": "x"}, False),
    ({"required": ["a"]}, [], True),  # required applies to objects only
    ({"uniqueItems": True}, ["a", "b", "a"], False),
    ({"minProperties": 1, "maxProperties": 2}, {}, False),
    ({"minItems": 1}, [], False),
    ({"items": {"type": "string"}}, ["a", 1], False),
    ({"anyOf": [{"type": "string"}, {"type": "number"}]}, None, False),
])
def test_keywords_mean_what_jsonschema_says(schema, value, expected):
    assert jsonschema.Draft202012Validator(schema).is_valid(value) is expected
    assert compile_schema(schema)(value) is expected


@pytest.mark.parametrize(("schema", "value"), [
    ({"uniqueItems": True}, [1, True]),  # jsonschema's own equality across types
    ({"enum": [1, "a"]}, True),
])
def test_unsure_cases_are_left_to_jsonschema(schema, value):
    with pytest.raises(Unsure):
        compile_schema(schema)(value)
    assert is_valid(compile_schema(schema), value) is None


def test_a_keyword_it_does_not_know_is_refused():
    with pytest.raises(ValueError, match="patternProperties"):
        compile_schema({"type": "object", "patternProperties": {"^a": {}}})
