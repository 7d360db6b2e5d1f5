"""An evaluator's inputs read against its registry spec: defaults, units, choices, flags.

Each evaluator calls :func:`read_inputs` first; it returns plain floats in
each input's default unit, so the physics below works on numbers alone.

Every value is bounded before it is read: one value by
:data:`~diagnose.physics.units.MAX_TEXT`, a list of readings by
:data:`MAX_READINGS` items and :data:`MAX_READINGS_TEXT` characters; a
message shows a value cut short (:func:`~diagnose.physics.units.excerpt`).
"""

from __future__ import annotations

import re
from typing import Any, Collection, Mapping

from diagnose.errors import InputError
from diagnose.physics import units
from diagnose.physics.registry import EVALUATORS, InputSpec

#: Most readings in one input ("0.62 0.65 0.60 mm" is three).
MAX_READINGS = 100
#: Longest text of one input of several readings.
MAX_READINGS_TEXT = 2000

_TRUE = frozenset({"yes", "y", "true", "1", "on"})
_FALSE = frozenset({"no", "n", "false", "0", "off"})


def read_inputs(
    evaluator: str,
    values: Mapping[str, Any],
    *,
    positive: Collection[str] = (),
    negative: Collection[str] = (),
    open_ok: Collection[str] = (),
    at_least: Mapping[str, int] | None = None,
) -> dict[str, Any]:
    """Every input of ``evaluator``, parsed: float (default unit), list of floats, str or bool.

    Inputs left out take the registry default, or None when there is none.
    ``positive`` inputs must be above zero, ``negative`` ones may be below
    zero, ``open_ok`` ones may be an open reading (``math.inf``);
    ``at_least`` gives the least count of readings of ``many`` inputs.

    Raises:
        InputError: an unknown input name, a required input missing, or any
            value :func:`diagnose.physics.units.parse_quantity` refuses.
    """
    spec = EVALUATORS[evaluator]
    known = {s.name for s in spec.inputs}
    for name in values:
        if name not in known:
            shown = name if isinstance(name, str) and len(name) <= units.ECHO \
                else units.excerpt(name)
            raise InputError(shown, f"not an input of {evaluator}; "
                                    f"known: {', '.join(sorted(known))}")
    out: dict[str, Any] = {}
    for inp in spec.inputs:
        raw = values.get(inp.name)
        if raw is None or (isinstance(raw, str) and not raw.strip()):
            raw = inp.default
        if raw is None:
            if inp.required:
                raise InputError(inp.name, f"missing: {inp.help}")
            out[inp.name] = None
            continue
        out[inp.name] = _read(inp, raw, positive, negative, open_ok, (at_least or {}))
    return out


def _read(inp: InputSpec, raw: Any, positive: Collection[str], negative: Collection[str],
          open_ok: Collection[str], at_least: Mapping[str, int]) -> Any:
    if inp.kind == "choice":
        return read_choice(raw, inp.choices, inp.name)
    if inp.kind == "flag":
        return read_flag(raw, inp.name)
    kwargs = {"negative": inp.name in negative, "open_ok": inp.name in open_ok}
    if inp.many:
        items = split_readings(raw, inp.name)
        least = at_least.get(inp.name, 1)
        if len(items) < least:
            raise InputError(inp.name, f"expected at least {least} readings ({inp.help}), "
                                       f"got {len(items)}")
        numbers = [units.parse_quantity(item, inp.unit, inp.name, **kwargs) for item in items]
        if inp.name in positive:
            for number, item in zip(numbers, items):
                _positive(number, item, inp.name)
        return numbers
    number = units.parse_quantity(raw, inp.unit, inp.name, **kwargs)
    if inp.name in positive:
        _positive(number, raw, inp.name)
    return number


def _positive(number: float, raw: Any, field: str) -> None:
    if not number > 0:
        raise InputError(field, f"must be above zero, got {_plain(raw)}")


def _plain(raw: Any) -> str:
    """A short value as typed (24 V), a long one cut short with its length."""
    if isinstance(raw, str) and len(raw.strip()) <= units.ECHO:
        return raw.strip()
    return units.excerpt(raw)


def split_readings(raw: Any, field: str = "readings") -> list[Any]:
    """Readings as a list; a unit standing alone applies to the bare numbers just before it.

    >>> split_readings("0.62 0.65 0.60 mm")
    ['0.62 mm', '0.65 mm', '0.60 mm']
    >>> split_readings(["0.1 mm", "0.004", "in"])
    ['0.1 mm', '0.004 in']

    Raises:
        InputError: more than :data:`MAX_READINGS` readings, text longer than
            :data:`MAX_READINGS_TEXT`, or a unit that follows no number.
    """
    if isinstance(raw, str) and len(raw) > MAX_READINGS_TEXT:
        raise InputError(field, f"too long: {units.excerpt(raw)}; at most "
                                f"{MAX_READINGS_TEXT} characters of readings are read")
    if isinstance(raw, (list, tuple)) and len(raw) > 2 * MAX_READINGS:  # numbers and units
        raise InputError(field, f"{len(raw)} items; at most {MAX_READINGS} readings are read")
    if isinstance(raw, str):
        items: list[Any] = [t for t in re.split(r"[\s,;]+", raw.strip()) if t]
    elif isinstance(raw, (list, tuple)):
        items = list(raw)
    else:
        items = [raw]
    out: list[Any] = []
    bare: list[int] = []  # positions in out of numbers typed without a unit
    for item in items:
        if isinstance(item, str) and units.is_unit(item):
            if not bare:
                raise InputError(field, f"unit {units.excerpt(item)} follows no number")
            for i in bare:
                out[i] = f"{out[i]} {item.strip()}"
            bare = []
            continue
        if isinstance(item, (int, float, str)) and units.unit_of(item) is None:
            bare.append(len(out))
        out.append(item)
    if len(out) > MAX_READINGS:
        raise InputError(field, f"{len(out)} readings; at most {MAX_READINGS} are read")
    return out


_NAMED = re.compile(r"(?<![\w.])([a-z][a-z0-9_]*)\s*=\s*", re.IGNORECASE)


def named_readings(raw: Any, wanted: Mapping[str, str], field: str = "readings"
                   ) -> dict[str, str]:
    """Several named readings of one card, as ``{name: text}`` in ``wanted``'s order.

    ``raw`` is a mapping, or text (or a list of texts) of ``name=value`` pairs;
    ``wanted`` maps each name to its unit, for the messages.

    >>> named_readings("volts=23.4 V, gap=0.61 mm", {"gap": "mm", "volts": "V"})
    {'gap': '0.61 mm', 'volts': '23.4 V'}
    >>> named_readings({"gap": 0.6, "volts": "23 V"}, {"gap": "mm", "volts": "V"})
    {'gap': '0.6', 'volts': '23 V'}

    Raises:
        InputError: text too long, a name that is not read here, a name given
            twice, or a reading missing (each named with its unit).
    """
    if isinstance(raw, (list, tuple)):
        raw = " ".join(str(x) for x in raw)
    given: dict[str, str] = {}
    if isinstance(raw, Mapping):
        given = {str(k).strip().lower(): _plain(v).strip() for k, v in raw.items()}
    elif isinstance(raw, str):
        if len(raw) > MAX_READINGS_TEXT:
            raise InputError(field, f"too long: {units.excerpt(raw)}; at most "
                                    f"{MAX_READINGS_TEXT} characters of readings are read")
        marks = list(_NAMED.finditer(raw))
        if not marks or raw[:marks[0].start()].strip(" ,;"):
            raise InputError(field, "expected named readings, such as "
                             + " ".join(f"{n}=… {u}".rstrip() for n, u in wanted.items()))
        for here, after in zip(marks, [*marks[1:], None]):
            name = here.group(1).lower()
            if name in given:
                raise InputError(field, f"{name} is given twice")
            end = after.start() if after is not None else len(raw)
            given[name] = raw[here.end():end].strip(" ,;")
    else:
        raise InputError(field, f"expected named readings, got {units.excerpt(raw)}")
    extra = [n for n in given if n not in wanted]
    if extra:
        raise InputError(field, f"{units.excerpt(extra[0])} is not read here; the readings: "
                                f"{', '.join(wanted)}")
    missing = [f"{n} ({u})" if u else n for n, u in wanted.items() if not given.get(n)]
    if missing:
        raise InputError(field, f"needs the reading{'s' if len(missing) > 1 else ''} "
                                f"{', '.join(missing)} too")
    return {n: given[n] for n in wanted}


def read_choice(raw: Any, choices: tuple[str, ...], field: str) -> str:
    """One of ``choices``; case, spaces, hyphens and underscores do not matter.

    >>> read_choice("Half_Wave", ("half-wave", "bridge"), "type")
    'half-wave'
    """
    if isinstance(raw, str) and len(raw) <= units.MAX_TEXT:
        key = _squash(raw)
        for choice in choices:
            if _squash(choice) == key:
                return choice
    raise InputError(field, f"unknown choice {units.excerpt(raw)}; "
                            f"expected one of: {', '.join(choices)}")


def _squash(text: str) -> str:
    return re.sub(r"[\s_\-]+", "", text.strip().lower())


def read_flag(raw: Any, field: str) -> bool:
    """A yes/no answer: a bool, or text such as yes, no, true, false, 1, 0."""
    if isinstance(raw, bool):
        return raw
    word = raw.strip().lower() if isinstance(raw, str) and len(raw) <= units.MAX_TEXT else None
    if word in _TRUE | _FALSE:
        return word in _TRUE
    raise InputError(field, f"expected yes or no, got {units.excerpt(raw)}")


def require(condition: bool, field: str, message: str) -> None:
    """Raise InputError(field, message) unless ``condition`` holds (a guard for evaluators)."""
    if not condition:
        raise InputError(field, message)


def typed_unit(raw: Any, input_unit: str) -> str:
    """The unit a person typed on the readings of ``raw`` that fits ``input_unit``.

    The first reading with a fitting unit wins; the input's default unit when
    none was typed. Used to show figures in the unit the technician used.
    """
    try:
        items = split_readings(raw)
    except InputError:
        return input_unit
    for item in items:
        unit = units.unit_of(item)
        if unit and units.fits(unit, input_unit):
            return unit
    return input_unit
