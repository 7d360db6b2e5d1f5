"""Quantities as people type them: "24V", "0.006 in", "40 degC", "0.5mm2", "OL".

pint does the unit arithmetic. It is imported on first use, and one
``UnitRegistry`` is shared from then on, so importing :mod:`diagnose.physics`
stays cheap. Every unusable value raises :class:`~diagnose.errors.InputError`
naming the field and what was expected.

Temperatures in degC or degF are offset units: they are built with
``Quantity(value, "degC")`` and converted with ``.to()``, never multiplied,
so 104 degF is 40 degC and not 104 * 5/9.

References:
    pint documentation, "Temperature conversion" (offset units).
    NIST SP 811 (2008), appendix B: 1 in = 25.4 mm exactly.
"""

from __future__ import annotations

import math
import re
from functools import lru_cache
from typing import Any

from diagnose.errors import InputError

#: Words a meter or a person uses for an open circuit (infinite resistance).
OPEN_WORDS = frozenset({"ol", "o.l.", "o.l", "inf", "+inf", "infinity", "open", "∞", "+∞"})

_NUMBER = re.compile(r"^\s*([+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?)\s*(.*?)\s*$")

# Spellings pint does not know, in the order they are applied.
_SPELLINGS: tuple[tuple[re.Pattern[str], str], ...] = tuple(
    (re.compile(pattern), repl)
    for pattern, repl in (
        (r"°\s*C\b", "degC"),
        (r"°\s*F\b", "degF"),
        (r"\bdeg\s+C\b", "degC"),
        (r"\bdeg\s+F\b", "degF"),
        (r"°", "degree"),
        (r"\bmeg(?:a)?ohms?\b", "megaohm"),
        (r"\bmils?\b", "thou"),
        (r'^"$', "inch"),
        (r"\br/min\b|\bmin-1\b|\bmin\^-1\b|\bmin⁻¹", "rpm"),
        (r"\brevs?\b", "revolution"),
        (r"\b([kmµu]?V)\s*(?:DC|AC|dc|ac|d\.c\.|a\.c\.)(?=\s|$)", r"\1"),
        (r"²", "**2"),
        (r"³", "**3"),
        (r"[·⋅]", "*"),
        (r"(?<=[A-Za-z])([23])\b", r"**\1"),  # mm2 -> mm**2, m3 -> m**3
        (r"%", "percent"),
    )
)

# What people call a dimension, for messages: (unit of that dimension, word, example).
_KINDS: tuple[tuple[str, str, str], ...] = (
    ("V", "voltage", "24 V"),
    ("ohm", "resistance", "28.8 ohm"),
    ("A", "current", "0.8 A"),
    ("W", "power", "20 W"),
    ("m", "length", "0.25 mm"),
    ("mm**2", "cross-section", "0.75 mm2"),
    ("degC", "temperature", "40 degC"),
    ("kg", "mass", "2 kg"),
    ("s", "time", "0.3 s"),
    ("rpm", "speed", "3000 rpm"),
    ("J", "torque or energy", "10 N*m"),
    ("kg*m**2", "moment of inertia", "0.01 kg*m2"),
    ("J/(kg*K)", "specific heat", "460 J/(kg*K)"),
    ("", "plain number", "0.1"),
)


@lru_cache(maxsize=1)
def registry() -> Any:
    """The one shared pint ``UnitRegistry``, created on first use."""
    import pint

    return pint.UnitRegistry()


def normalize_unit(text: str) -> str:
    """Rewrite trade spellings ("mm2", "MΩ", "°C", "VDC", "megohm") into pint's syntax.

    >>> normalize_unit("mm2"), normalize_unit("°C"), normalize_unit("VDC")
    ('mm**2', 'degC', 'V')
    """
    text = text.strip()
    for pattern, repl in _SPELLINGS:
        text = pattern.sub(repl, text)
    return text


@lru_cache(maxsize=256)
def _units(text: str) -> Any:
    """pint units for a unit text; raises ValueError when the text is not a unit."""
    try:
        return registry().parse_units(normalize_unit(text))
    except Exception as exc:  # pint raises several kinds (tokenize, assertion, undefined)
        raise ValueError(str(exc)) from None


def _kind(units: Any) -> tuple[str, str]:
    """(word, example) for the dimension of ``units``."""
    for unit, word, example in _KINDS:
        if _units(unit).dimensionality == units.dimensionality:
            return word, example
    return str(units.dimensionality), ""


def _expected(default_unit: str) -> str:
    word, example = _kind(_units(default_unit))
    article = "an" if word[:1] in "aeiou" else "a"
    return f"{article} {word} (for example {example})" if example else f"{article} {word}"


def fits(unit_text: str, input_unit: str) -> bool:
    """Whether ``unit_text`` measures the same thing as ``input_unit``.

    "" means a plain number (dimensionless). Text that is no unit does not fit.

    >>> fits("mm", "in"), fits("degF", "degC"), fits("%", ""), fits("kg", "mm")
    (True, True, True, False)
    """
    try:
        return bool(_units(unit_text).dimensionality == _units(input_unit).dimensionality)
    except ValueError:
        return False


def unit_of(value: Any) -> str | None:
    """The unit a person typed with ``value`` ("0.006 in" -> "in"); None for a bare number."""
    if isinstance(value, str):
        match = _NUMBER.match(value)
        if match and match.group(2):
            return normalize_unit(match.group(2))
        return None
    if hasattr(value, "units") and hasattr(value, "magnitude"):
        return str(value.units)
    return None


def is_unit(text: str) -> bool:
    """Whether ``text`` is a unit alone, with no number ("mm", "in")."""
    if not isinstance(text, str) or not text.strip() or _NUMBER.match(text):
        return False
    try:
        _units(text)
    except ValueError:
        return False
    return True


def is_open(value: Any) -> bool:
    """Whether ``value`` is an open-circuit reading: "OL", "inf", "open" or infinity."""
    if isinstance(value, str):
        return value.strip().lower() in OPEN_WORDS
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return math.isinf(value) and value > 0
    return False


def parse_quantity(
    value: Any,
    default_unit: str,
    field: str,
    *,
    negative: bool = False,
    open_ok: bool = False,
) -> float:
    """A typed value as a float in ``default_unit``.

    ``value`` is text with or without a unit ("24V", "0.006 in", "40 degC"),
    a plain number (taken in ``default_unit``) or a pint quantity. An open
    reading ("OL", "inf") gives ``math.inf`` when ``open_ok``. Negative values
    are refused unless ``negative``; a temperature may be below zero degC
    but not below absolute zero.

    Raises:
        InputError: not a number, an unknown unit, the wrong dimension (a length
            given in kilograms), NaN, infinity where no open reading makes
            sense, a negative value where none is possible.

    >>> parse_quantity("0.5mm2", "mm**2", "area"), round(parse_quantity("104 degF", "degC", "t"), 9)
    (0.5, 40.0)
    """
    if isinstance(value, bool) or value is None:
        raise InputError(field, f"expected {_expected(default_unit)}, got {value!r}")
    if is_open(value):
        if open_ok:
            return math.inf
        raise InputError(field, f"an open or infinite reading makes no sense here; "
                                f"expected {_expected(default_unit)}")
    target = _units(default_unit)
    quantity = _to_quantity(value, target, field, default_unit)
    if quantity.dimensionality != target.dimensionality:
        word, _ = _kind(quantity.units)
        raise InputError(field, f"expected {_expected(default_unit)}, got {_show(value)}, "
                                f"which is a {word}")
    magnitude = float(quantity.to(target).magnitude)
    if math.isnan(magnitude) or math.isinf(magnitude):
        raise InputError(field, f"expected a finite number, got {_show(value)}")
    if target.dimensionality == _units("K").dimensionality:
        if quantity.to("K").magnitude < 0:
            raise InputError(field, f"{_show(value)} is below absolute zero")
    elif magnitude < 0 and not negative:
        raise InputError(field, f"must not be negative, got {_show(value)}")
    return magnitude


def _show(value: Any) -> str:
    return repr(value.strip()) if isinstance(value, str) else str(value)


def _to_quantity(value: Any, target: Any, field: str, default_unit: str) -> Any:
    ureg = registry()
    if isinstance(value, (int, float)):
        if math.isnan(value) or math.isinf(value):
            raise InputError(field, f"expected a finite number, got {value}")
        return ureg.Quantity(float(value), target)
    if hasattr(value, "units") and hasattr(value, "magnitude"):
        try:
            return ureg.Quantity(float(value.magnitude), str(value.units))
        except (TypeError, ValueError):
            raise InputError(field, f"expected {_expected(default_unit)}, got {value}") from None
    if not isinstance(value, str):
        raise InputError(field, f"expected {_expected(default_unit)}, got {value!r}")
    match = _NUMBER.match(value)
    if not match:
        if value.strip().lower().lstrip("+-").startswith("nan"):
            raise InputError(field, f"expected a finite number, got {_show(value)}")
        raise InputError(field, f"expected {_expected(default_unit)}, got {_show(value)}")
    number, unit_text = float(match.group(1)), match.group(2)
    if not unit_text:
        return ureg.Quantity(number, target)
    if unit_text in ("C", "F") and target.dimensionality == _units("K").dimensionality:
        unit_text = "deg" + unit_text  # "40 C" on a temperature input means degC, not coulomb
    try:
        units = _units(unit_text)
    except ValueError:
        raise InputError(field, f"unknown unit {unit_text!r}; "
                                f"expected {_expected(default_unit)}") from None
    return ureg.Quantity(number, units)


def convert(value: float, from_unit: str, to_unit: str) -> float:
    """``value`` in ``from_unit`` expressed in ``to_unit`` (offset temperatures handled).

    >>> round(convert(0.007, "in", "mm"), 4)
    0.1778
    """
    return float(registry().Quantity(value, _units(from_unit)).to(_units(to_unit)).magnitude)


#: Relative slack in comparisons, so that the same length typed in mm or in
#: inches gets the same verdict in spite of rounding in the conversion.
ROUNDING = 1e-9


def above(value: float, limit: float) -> bool:
    """``value > limit`` by more than conversion rounding.

    >>> above(0.5000000000000001, 0.5), above(0.51, 0.5)
    (False, True)
    """
    return value > limit + ROUNDING * max(abs(limit), abs(value), 1e-12)


def below(value: float, limit: float) -> bool:
    """``value < limit`` by more than conversion rounding."""
    return above(limit, value)
