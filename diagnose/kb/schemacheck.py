"""Whether a document is valid against a JSON Schema, fast: the schema compiled to closures.

jsonschema walks a schema anew for every value and builds a validator object
at every step; on a 10,000-cause pack that is most of the time of loading it.
Most documents are valid, and for those a yes is all that is needed.
:func:`compile_schema` turns a schema into one Python function per
sub-schema, once; the function answers True (valid) or False (not valid).
The loader asks it first and runs jsonschema only on a document it says is
not valid, so every message still comes from jsonschema, word for word.

The answer is exact for the keywords the pack schema uses (``type``,
``properties``, ``required``, ``additionalProperties``, ``propertyNames``,
``items``, ``minItems``, ``uniqueItems``, ``minProperties``,
``maxProperties``, ``minLength``, ``pattern``, ``minimum``,
``exclusiveMinimum``, ``maximum``, ``enum``, ``const``, ``anyOf``,
``oneOf``, ``not``) with draft 2020-12's meaning (a boolean is no number,
1.0 is an integer). Where exactness would need jsonschema's own rules for
equality across types (an ``enum`` or ``uniqueItems`` over values that are
not all text), the function raises :class:`Unsure` and the caller asks
jsonschema. A keyword it does not know makes :func:`compile_schema` raise,
so a schema cannot grow a keyword that the fast check would silently ignore.

References:
    JSON Schema Validation, draft 2020-12, sections 6.1-6.5.
"""

from __future__ import annotations

import numbers
import re
from collections.abc import Callable, Mapping
from typing import Any

Check = Callable[[Any], bool]

#: Keywords that say nothing about validity.
ANNOTATIONS = frozenset({"$schema", "$id", "$comment", "title", "description", "default",
                         "examples", "deprecated", "readOnly", "writeOnly"})


class Unsure(Exception):
    """The fast check cannot tell exactly: ask jsonschema."""


def _number(x: Any) -> bool:
    """JSON's number: an int or a float, never a boolean; Unsure for other numeric types."""
    if type(x) is int or type(x) is float:
        return True
    if isinstance(x, bool) or not isinstance(x, numbers.Number):
        return False
    raise Unsure("a number of another type")


def _integer(x: Any) -> bool:
    return _number(x) and (not isinstance(x, float) or x.is_integer())


_TYPES: dict[str, Check] = {
    "object": lambda x: isinstance(x, dict),
    "array": lambda x: isinstance(x, list),
    "string": lambda x: isinstance(x, str),
    "boolean": lambda x: isinstance(x, bool),
    "null": lambda x: x is None,
    "number": _number,
    "integer": _integer,
}


def is_valid(check: Check, instance: Any) -> bool | None:
    """``check(instance)``, or None when the fast check cannot tell (ask jsonschema)."""
    try:
        return check(instance)
    except Unsure:
        return None


def compile_schema(schema: Any) -> Check:
    """The function that tells whether a value is valid against ``schema``.

    Raises:
        ValueError: the schema uses a keyword this module does not implement.

    >>> check = compile_schema({"type": "object", "required": ["id"],
    ...                         "properties": {"id": {"type": "string", "pattern": "^[a-z]+$"}}})
    >>> check({"id": "coil"}), check({"id": "Coil"}), check({}), check([])
    (True, False, False, False)
    """
    if schema is True or schema == {}:
        return lambda x: True
    if schema is False:
        return lambda x: False
    if not isinstance(schema, Mapping):
        raise ValueError(f"a schema is an object or a boolean, not {schema!r}")
    unknown = set(schema) - ANNOTATIONS - set(_KEYWORDS) - _OBJECT_KEYWORDS - {"type"}
    if unknown:
        raise ValueError(f"keyword {sorted(unknown)[0]!r} is not implemented by the fast check")
    checks: list[Check] = []
    if "type" in schema:
        checks.append(_type(schema["type"]))
    if _OBJECT_KEYWORDS & set(schema):
        checks.append(_object(schema))
    for keyword, value in schema.items():
        if keyword in _KEYWORDS:
            checks.append(_KEYWORDS[keyword](value))
    if len(checks) == 1:
        return checks[0]
    if len(checks) == 2:
        first, second = checks
        return lambda x: first(x) and second(x)
    found = tuple(checks)
    return lambda x: all(c(x) for c in found)


def _type(kinds: Any) -> Check:
    names = [kinds] if isinstance(kinds, str) else list(kinds)
    tests = tuple(_TYPES[n] for n in names)
    if len(tests) == 1:
        return tests[0]
    return lambda x: any(t(x) for t in tests)


_OBJECT_KEYWORDS = frozenset({"properties", "required", "additionalProperties"})


def _object(schema: Mapping[str, Any]) -> Check:
    """``properties``, ``required`` and ``additionalProperties`` in one pass over the keys."""
    props = {k: compile_schema(v) for k, v in schema.get("properties", {}).items()}
    required = tuple(schema.get("required", ()))
    extra = schema.get("additionalProperties", True)
    closed = extra is False
    rest = None if extra is True or closed else compile_schema(extra)

    def check(x: Any) -> bool:
        if not isinstance(x, dict):
            return True
        for key, value in x.items():
            c = props.get(key)
            if c is not None:
                if not c(value):
                    return False
            elif closed:
                return False
            elif rest is not None and not rest(value):
                return False
        return all(r in x for r in required)

    return check


def _property_names(schema: Any) -> Check:
    names = compile_schema(schema)
    return lambda x: not isinstance(x, dict) or all(names(k) for k in x)


def _items(schema: Any) -> Check:
    each = compile_schema(schema)
    return lambda x: not isinstance(x, list) or all(each(v) for v in x)


def _unique(flag: Any) -> Check:
    if not flag:
        return lambda x: True

    def check(x: Any) -> bool:
        if not isinstance(x, list):
            return True
        if not all(isinstance(v, str) for v in x):
            raise Unsure("uniqueItems over values that are not all text")
        return len(set(x)) == len(x)

    return check


def _enum(values: Any) -> Check:
    texts = frozenset(v for v in values if isinstance(v, str))
    only_text = len(texts) == len(values)

    def check(x: Any) -> bool:
        if isinstance(x, str):
            return x in texts  # text equals only text (jsonschema's equal)
        if only_text:
            return False
        raise Unsure("enum over values that are not all text")

    return check


def _pattern(text: str) -> Check:
    search = re.compile(text).search
    return lambda x: not isinstance(x, str) or search(x) is not None


def _bound(compare: Callable[[Any], bool]) -> Check:
    return lambda x: not _number(x) or compare(x)


def _any_of(schemas: Any) -> Check:
    checks = tuple(compile_schema(s) for s in schemas)
    return lambda x: any(c(x) for c in checks)


def _one_of(schemas: Any) -> Check:
    checks = tuple(compile_schema(s) for s in schemas)
    return lambda x: sum(1 for c in checks if c(x)) == 1


def _not(schema: Any) -> Check:
    inner = compile_schema(schema)
    return lambda x: not inner(x)


_KEYWORDS: dict[str, Callable[[Any], Check]] = {
    "propertyNames": _property_names,
    "items": _items,
    "uniqueItems": _unique,
    "enum": _enum,
    "const": lambda value: _enum([value]),
    "pattern": _pattern,
    "minLength": lambda n: lambda x: not isinstance(x, str) or len(x) >= n,
    "minItems": lambda n: lambda x: not isinstance(x, list) or len(x) >= n,
    "minProperties": lambda n: lambda x: not isinstance(x, dict) or len(x) >= n,
    "maxProperties": lambda n: lambda x: not isinstance(x, dict) or len(x) <= n,
    "minimum": lambda m: _bound(lambda x: x >= m),
    "exclusiveMinimum": lambda m: _bound(lambda x: x > m),
    "maximum": lambda m: _bound(lambda x: x <= m),
    "anyOf": _any_of,
    "oneOf": _one_of,
    "not": _not,
}
