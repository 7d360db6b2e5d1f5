"""Quantities as people type them: "24V", "0.006 in", "40 degC", "0.5mm2", "OL".

The units the packs, the calculators and technicians commonly use (volts,
ohms, millimetres, inches, degrees Celsius, ...: :data:`_TABLE`) are
converted with a small table of factors to SI and powers of the base
dimensions, so that a calculation or a pack's compilation needs no unit
library. Anything else goes to pint, imported on first use, with one
``UnitRegistry`` shared from then on; pint also writes every message about a
value it cannot use (the table answers only what succeeds), and it is the
reference the tests hold the table to (the same dimension and, to 1e-14
relative, the same conversion for every unit in the table). Every unusable
value raises :class:`~diagnose.errors.InputError` naming the field and what
was expected.

Temperatures in degC or degF are offset units: they are built with
``Quantity(value, "degC")`` and converted with ``.to()``, never multiplied,
so 104 degF is 40 degC and not 104 * 5/9.

pint never sees text that this module has not parsed first. A value is at
most :data:`MAX_TEXT` characters; its number has an exponent of at most
three digits; its unit must follow a small grammar (:func:`parse_unit`):
unit names joined by ``*``, ``/``, a space or parentheses, each with an
optional whole power from -4 to 4. Only the text the grammar rebuilds is
given to pint, whose own expression parser would evaluate ``ohm**(9**9**9)``.

References:
    pint documentation, "Temperature conversion" (offset units).
    NIST SP 811 (2008), appendix B: 1 in = 25.4 mm exactly.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from functools import lru_cache
from typing import Any

from diagnose.errors import InputError

#: Words a meter or a person uses for an open circuit (infinite resistance).
OPEN_WORDS = frozenset({"ol", "o.l.", "o.l", "inf", "+inf", "infinity", "open", "∞", "+∞"})

#: Longest text read as one value ("0.62 mm"); longer text is refused before any parsing.
MAX_TEXT = 200
#: Largest power of a unit, either sign ("mm**2", "J/(kg*K)", "s**-1").
MAX_POWER = 4
#: Deepest nesting of parentheses in a unit.
MAX_GROUPS = 4
#: Characters of a refused value shown in a message.
ECHO = 60

_NUMBER = re.compile(r"^\s*([+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d{1,3}(?!\d))?)\s*(.*?)\s*$")
_LONG_EXPONENT = re.compile(r"^[eE][+-]?\d{4}")

_SUPERSCRIPT = str.maketrans("\u207b\u2070\u00b9\u00b2\u00b3\u2074\u2075\u2076\u2077\u2078\u2079",
                             "-0123456789")


def _superscript(match: re.Match[str]) -> str:
    return "**" + match.group().translate(_SUPERSCRIPT)


# Spellings pint does not know, in the order they are applied.
_SPELLINGS: tuple[tuple[re.Pattern[str], Any], ...] = tuple(
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
        # superscript powers: m² -> m**2, s⁻¹ -> s**-1
        ("\u207b?[\u2070\u00b9\u00b2\u00b3\u2074-\u2079]+", _superscript),
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


# --- the table: the units in everyday use, without pint ----------------------------------------

#: Powers of (length, mass, time, current, temperature), pint's base dimensions.
_Dims = tuple[int, int, int, int, int]
_PLAIN: _Dims = (0, 0, 0, 0, 0)
_LENGTH: _Dims = (1, 0, 0, 0, 0)
_VOLT: _Dims = (2, 1, -3, -1, 0)
_OHM: _Dims = (2, 1, -3, -2, 0)
_WATT: _Dims = (2, 1, -3, 0, 0)

#: Unit name (as :func:`parse_unit` rebuilds it) -> (SI units in one of it, dimension).
#: Sources: NIST SP 811 (2008) appendix B (1 in = 25.4 mm, 1 ft = 0.3048 m, rpm, degree);
#: the SI prefixes; pint's default definitions for the names (thou = 0.001 in, "revolution"
#: = 2 pi rad, "percent" = 0.01, radian and degree dimensionless as pint has them).
_TABLE: dict[str, tuple[float, _Dims]] = {
    **{name: (1.0, _LENGTH) for name in ("m", "meter")},
    "mm": (1e-3, _LENGTH), "cm": (1e-2, _LENGTH), "km": (1e3, _LENGTH),
    **{name: (1e-6, _LENGTH) for name in ("um", "\u00b5m", "\u03bcm")},
    "in": (0.0254, _LENGTH), "inch": (0.0254, _LENGTH), "thou": (2.54e-5, _LENGTH),
    "ft": (0.3048, _LENGTH),
    "V": (1.0, _VOLT), "volt": (1.0, _VOLT), "mV": (1e-3, _VOLT), "kV": (1e3, _VOLT),
    "A": (1.0, (0, 0, 0, 1, 0)), "mA": (1e-3, (0, 0, 0, 1, 0)),
    "W": (1.0, _WATT), "mW": (1e-3, _WATT), "kW": (1e3, _WATT),
    **{name: (1.0, _OHM) for name in ("ohm", "ohms", "\u03a9")},
    **{name: (1e-3, _OHM) for name in ("mohm", "m\u03a9")},
    **{name: (1e3, _OHM) for name in ("kohm", "k\u03a9")},
    **{name: (1e6, _OHM) for name in ("Mohm", "megaohm", "M\u03a9")},
    "K": (1.0, (0, 0, 0, 0, 1)), "kelvin": (1.0, (0, 0, 0, 0, 1)),
    "kg": (1.0, (0, 1, 0, 0, 0)), "g": (1e-3, (0, 1, 0, 0, 0)),
    "s": (1.0, (0, 0, 1, 0, 0)), "ms": (1e-3, (0, 0, 1, 0, 0)),
    "min": (60.0, (0, 0, 1, 0, 0)), "h": (3600.0, (0, 0, 1, 0, 0)),
    "rpm": (2 * math.pi / 60, (0, 0, -1, 0, 0)), "Hz": (1.0, (0, 0, -1, 0, 0)),
    "revolution": (2 * math.pi, _PLAIN), "rad": (1.0, _PLAIN),
    "degree": (math.pi / 180, _PLAIN), "percent": (0.01, _PLAIN),
    "N": (1.0, (1, 1, -2, 0, 0)),
    "J": (1.0, (2, 1, -2, 0, 0)), "kJ": (1e3, (2, 1, -2, 0, 0)),
}
#: Offset temperatures, only alone: name -> (kelvin per degree, kelvin at zero of the scale).
#: NIST SP 811 (2008) B.9: t/degC = T/K - 273.15, t/degF = 1.8 t/degC + 32.
_OFFSET: dict[str, tuple[float, float]] = {"degC": (1.0, 273.15),
                                           "degF": (5 / 9, 273.15 - 32 * 5 / 9)}
#: The metric lengths of the table (pint names them "...meter").
_METRIC = frozenset({"m", "meter", "mm", "cm", "km", "um", "\u00b5m", "\u03bcm"})


_TEMPERATURE: _Dims = (0, 0, 0, 0, 1)


class _Unknown(Exception):
    """A name outside the table: pint decides."""


@dataclass(frozen=True)
class _Scale:
    """A unit as the table knows it: ``value * factor + offset`` is the value in SI units."""

    factor: float
    dims: _Dims
    offset: float = 0.0
    name: str = ""  # the text when it is one name of the table

    def to(self, value: float, other: _Scale) -> float:
        """``value`` in this unit expressed in ``other`` (the same dimension)."""
        if self == other:
            return value
        if self.offset or other.offset:
            return (value * self.factor + self.offset - other.offset) / other.factor
        return value * (self.factor / other.factor)


@lru_cache(maxsize=256)
def _known(text: str) -> _Scale | None:
    """The table's reading of a unit text, or None when pint must read it (or nobody can)."""
    try:
        rebuilt = parse_unit(text)
    except ValueError:
        return None
    if not rebuilt:
        return _Scale(1.0, _PLAIN)
    if rebuilt in _OFFSET:
        scale, offset = _OFFSET[rebuilt]
        return _Scale(scale, _TEMPERATURE, offset, rebuilt)
    try:
        factor, dims, _ = _product(_tokens(rebuilt), 0)
    except _Unknown:
        return None
    return _Scale(factor, dims, 0.0, rebuilt if rebuilt in _TABLE else "")


_KELVIN = _Scale(1.0, _TEMPERATURE, 0.0, "K")


def _product(tokens: list[tuple[str, str]], at: int) -> tuple[float, _Dims, int]:
    """Factor and dimension of ``unit`` (the grammar of :func:`parse_unit`) from ``tokens[at]``."""
    factor, dims, at = _power_of(tokens, at)
    while at < len(tokens) and tokens[at][0] == "op":
        sign = 1 if tokens[at][1] == "*" else -1
        f, d, at = _power_of(tokens, at + 1)
        factor = factor * f if sign > 0 else factor / f
        dims = tuple(a + sign * b for a, b in zip(dims, d))  # type: ignore[assignment]
    return factor, dims, at


def _power_of(tokens: list[tuple[str, str]], at: int) -> tuple[float, _Dims, int]:
    kind, value = tokens[at]
    if kind == "name":
        if value not in _TABLE:
            raise _Unknown(value)
        factor, dims = _TABLE[value]
        at += 1
    elif kind == "int":  # "1", as in "1 / s"
        factor, dims, at = 1.0, _PLAIN, at + 1
    else:  # "(" unit ")"
        factor, dims, at = _product(tokens, at + 1)
        at += 1
    if at < len(tokens) and tokens[at][0] == "power":
        at += 1
        sign = -1 if tokens[at][0] == "sign" and tokens[at][1] == "-" else 1
        at += tokens[at][0] == "sign"
        power = sign * int(tokens[at][1])
        factor, dims, at = factor ** power, tuple(d * power for d in dims), at + 1  # type: ignore
    return factor, dims, at


#: The sub-folder of the user's cache folder where pint keeps its parsed definitions.
UNITS_CACHE = "units"


@lru_cache(maxsize=1)
def registry() -> Any:
    """The one shared pint ``UnitRegistry``, created on first use.

    Reading pint's definitions takes a quarter of a second; pint's own disk
    cache (``cache_folder``, keyed by pint's version and the definitions'
    content) keeps them parsed in ``units`` under the user's cache folder, when
    that folder is the user's own, no symbolic link and written by nobody else.
    A cache that cannot be read is emptied and made again; the registry is the
    same either way.
    """
    import pint

    folder = _registry_cache()
    if folder is not None:
        for _ in range(2):
            try:
                return pint.UnitRegistry(cache_folder=folder)
            except Exception:  # noqa: BLE001 (a damaged cache file: pint unpickles it as it is)
                _empty(folder)
    return pint.UnitRegistry()


def _registry_cache() -> str | None:
    """pint's cache folder in the user's cache folder (made), or None when it may not be used."""
    import os
    import stat

    from diagnose.paths import cache_dir

    try:
        folder = cache_dir() / UNITS_CACHE
        folder.mkdir(parents=True, exist_ok=True, mode=0o700)
        mine = [os.lstat(p) for p in (folder.parent, folder)]
    except (OSError, RuntimeError, KeyError):
        return None
    uid = os.getuid() if hasattr(os, "getuid") else None
    for st in mine:
        if stat.S_ISLNK(st.st_mode) or not stat.S_ISDIR(st.st_mode) or (
                uid is not None and st.st_uid != uid):
            return None
    if os.name == "posix" and mine[1].st_mode & 0o022:
        return None
    return str(folder)


def _empty(folder: str) -> None:
    """Remove the files of pint's cache folder (not what is below it)."""
    import os

    try:
        names = os.listdir(folder)
    except OSError:
        return
    for name in names:
        path = os.path.join(folder, name)
        try:
            if os.path.isfile(path) and not os.path.islink(path):
                os.unlink(path)
        except OSError:
            continue


def normalize_unit(text: str) -> str:
    """Rewrite trade spellings ("mm2", "MΩ", "°C", "VDC", "megohm") into pint's syntax.

    >>> normalize_unit("mm2"), normalize_unit("°C"), normalize_unit("VDC")
    ('mm**2', 'degC', 'V')
    """
    text = text.strip()
    for pattern, repl in _SPELLINGS:
        text = pattern.sub(repl, text)
    return text


def excerpt(value: Any) -> str:
    """``value`` as a message shows it: quoted, cut to :data:`ECHO` characters with its length.

    >>> excerpt("24 V"), excerpt("9" * 5000)[-24:]
    ("'24 V'", "99'... (5000 characters)")
    """
    if isinstance(value, str):
        text = value.strip()
        if len(text) <= ECHO:
            return repr(text)
        return f"{text[:ECHO]!r}... ({len(value)} characters)"
    try:
        text = str(value)
    except (ValueError, RecursionError):  # an integer too long to print, a cycle
        return f"a {type(value).__name__}"
    return text if len(text) <= ECHO else f"{text[:ECHO]}... ({len(text)} characters)"


_TOKEN = re.compile(r"""
    (?P<space>\s+)
  | (?P<name>[A-Za-z_\u00b5\u03bc\u03a9\u2126]+)        # letters, micro, ohm
  | (?P<power>\*\*|\^)
  | (?P<op>[*/])
  | (?P<open>\()
  | (?P<close>\))
  | (?P<sign>[+-])
  | (?P<int>\d+)
""", re.VERBOSE)


def parse_unit(text: str) -> str:
    """Check a unit expression against the grammar; return it rebuilt for pint.

    The grammar, after :func:`normalize_unit` (which turns "mm2", "m²", "°C",
    "%" and the like into plain names and powers)::

        unit   := term { ("*" | "/" | " ") term }
        term   := factor [ ("**" | "^") int | "**(" int ")" ]
        factor := name | "1" | "(" unit ")"
        int    := ["+" | "-"] digits, from -4 to 4

    A name is letters, "_", "µ" and "Ω". Parentheses nest at most
    :data:`MAX_GROUPS` deep. Whether a name is a unit pint knows is not
    checked here.

    Raises:
        ValueError: the text is too long or does not follow the grammar; the
            message says what is wrong, in a few words.

    >>> parse_unit("J/(kg*K)"), parse_unit("kg m2"), parse_unit("min⁻¹")
    ('J / (kg * K)', 'kg * m**2', 'rpm')
    """
    if len(text) > MAX_TEXT:
        raise ValueError(f"longer than {MAX_TEXT} characters")
    normal = normalize_unit(text)
    tokens = _tokens(normal)
    if not tokens:
        return ""
    out, at = _unit(tokens, 0, 0)
    if at < len(tokens):
        kind, value = tokens[at]
        raise ValueError("a ')' without its '('" if kind == "close" else f"unexpected {value!r}")
    return out


def _tokens(text: str) -> list[tuple[str, str]]:
    tokens: list[tuple[str, str]] = []
    at = 0
    while at < len(text):
        match = _TOKEN.match(text, at)
        if match is None:
            raise ValueError(f"{text[at]!r} is not part of a unit")
        kind = match.lastgroup or ""
        if kind != "space":
            tokens.append((kind, match.group()))
        at = match.end()
    return tokens


def _unit(tokens: list[tuple[str, str]], at: int, depth: int) -> tuple[str, int]:
    """``unit`` from ``tokens[at]``: the rebuilt text and the position after it."""
    out, at = _term(tokens, at, depth)
    while at < len(tokens):
        kind, value = tokens[at]
        if kind == "op":
            term, at = _term(tokens, at + 1, depth)
            out = f"{out} {value} {term}"
        elif kind in ("name", "open", "int"):  # a space between two units multiplies them
            term, at = _term(tokens, at, depth)
            out = f"{out} * {term}"
        else:
            break
    return out, at


def _term(tokens: list[tuple[str, str]], at: int, depth: int) -> tuple[str, int]:
    if at >= len(tokens):
        raise ValueError("a unit name is missing at the end")
    kind, value = tokens[at]
    if kind == "name":
        factor, at = value, at + 1
    elif kind == "int" and value == "1":  # "1/s"
        factor, at = value, at + 1
    elif kind == "open":
        if depth >= MAX_GROUPS:
            raise ValueError(f"parentheses nested more than {MAX_GROUPS} deep")
        inner, at = _unit(tokens, at + 1, depth + 1)
        if at >= len(tokens) or tokens[at][0] != "close":
            raise ValueError("a '(' without its ')'")
        factor, at = f"({inner})", at + 1
    else:
        raise ValueError(f"expected a unit name, got {value!r}")
    if at < len(tokens) and tokens[at][0] == "power":
        power, at = _exponent(tokens, at + 1)
        return f"{factor}**{power}", at
    return factor, at


def _exponent(tokens: list[tuple[str, str]], at: int) -> tuple[int, int]:
    """The whole power after "**" or "^", bare or in parentheses, and the position after it."""
    grouped = at < len(tokens) and tokens[at][0] == "open"
    at += grouped
    text = ""
    if at < len(tokens) and tokens[at][0] == "sign":
        text, at = tokens[at][1], at + 1
    if at >= len(tokens) or tokens[at][0] != "int":
        raise ValueError(_POWER_RULE)
    text, at = text + tokens[at][1], at + 1
    if grouped:
        if at >= len(tokens) or tokens[at][0] != "close":
            raise ValueError(_POWER_RULE)
        at += 1
    return _power(text), at


_POWER_RULE = f"a power is a whole number from -{MAX_POWER} to {MAX_POWER}, as in mm**2 or s^-1"


def _power(text: str) -> int:
    digits = text.lstrip("+-")
    if not digits or len(digits) > 2 or abs(int(text)) > MAX_POWER:
        raise ValueError(_POWER_RULE)
    return int(text)


@lru_cache(maxsize=256)
def _units(text: str) -> Any:
    """pint units for a unit text; raises ValueError when the text is not a unit.

    The text is checked with :func:`parse_unit` first; pint sees only what
    that rebuilds.
    """
    unit = parse_unit(text)
    try:
        return registry().parse_units(unit)
    except Exception:  # pint raises several kinds (tokenize, assertion, undefined)
        raise ValueError() from None  # no reason to add: the name is simply not known


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
    if not isinstance(unit_text, str) or not isinstance(input_unit, str):
        return False
    mine, wanted = _known(unit_text), _known(input_unit)
    if mine is not None and wanted is not None:
        return mine.dims == wanted.dims
    try:
        return bool(_units(unit_text).dimensionality == _units(input_unit).dimensionality)
    except ValueError:
        return False


def unit_of(value: Any) -> str | None:
    """The unit a person typed with ``value`` ("0.006 in" -> "in"); None for a bare number.

    Text longer than :data:`MAX_TEXT` has no unit here: reading it is refused later.
    """
    if isinstance(value, str):
        if len(value) > MAX_TEXT:
            return None
        match = _NUMBER.match(value)
        if match and match.group(2):
            return normalize_unit(match.group(2))
        return None
    if hasattr(value, "units") and hasattr(value, "magnitude"):
        return str(value.units)
    return None


def is_unit(text: str) -> bool:
    """Whether ``text`` is a unit alone, with no number ("mm", "in")."""
    if not isinstance(text, str) or len(text) > MAX_TEXT or not text.strip() or _NUMBER.match(text):
        return False
    if _known(text) is not None:
        return True
    try:
        _units(text)
    except ValueError:
        return False
    return True


def is_open(value: Any) -> bool:
    """Whether ``value`` is an open-circuit reading: "OL", "inf", "open" or infinity."""
    if isinstance(value, str):
        return len(value) <= MAX_TEXT and value.strip().lower() in OPEN_WORDS
    if isinstance(value, float):  # an int is never infinite (and may be too large for a float)
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

    Text is read only if it is at most :data:`MAX_TEXT` characters long, its
    exponent has at most three digits and its unit follows :func:`parse_unit`;
    messages show at most :data:`ECHO` characters of it (:func:`excerpt`).

    Raises:
        InputError: text too long, not a number, an unknown unit or one that
            does not follow the grammar, the wrong dimension (a length given
            in kilograms), NaN, infinity where no open reading makes sense, a
            negative value where none is possible.

    >>> parse_quantity("0.5mm2", "mm**2", "area"), round(parse_quantity("104 degF", "degC", "t"), 9)
    (0.5, 40.0)
    """
    if isinstance(value, str) and len(value) > MAX_TEXT:
        raise InputError(field, f"too long: {excerpt(value)}; a value has at most "
                                f"{MAX_TEXT} characters")
    quick = _table_quantity(value, default_unit, negative)
    if quick is not None:
        return quick
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
    return excerpt(value)


def _table_quantity(value: Any, default_unit: str, negative: bool) -> float | None:
    """:func:`parse_quantity` by the table for a usable value in units it knows, else None.

    None is no verdict: pint reads the value again and says what is wrong with it.
    """
    target = _known(default_unit)
    if target is None or isinstance(value, bool):
        return None
    if isinstance(value, (int, float)):
        try:
            number, unit = float(value), target
        except OverflowError:
            return None
    elif isinstance(value, str) and not is_open(value):
        match = _NUMBER.match(value)
        if match is None or _LONG_EXPONENT.match(match.group(2)):
            return None
        number, unit_text = float(match.group(1)), match.group(2)
        if unit_text in ("C", "F") and target.dims == _TEMPERATURE:
            unit_text = "deg" + unit_text  # as _to_quantity reads it
        found = _known(unit_text) if unit_text else target
        if found is None:
            return None
        unit = found
    else:
        return None
    if unit.dims != target.dims or not math.isfinite(number):
        return None
    magnitude = unit.to(number, target)
    if not math.isfinite(magnitude):
        return None
    if target.dims == _TEMPERATURE:
        if unit.to(number, _KELVIN) < 0:
            return None
    elif magnitude < 0 and not negative:
        return None
    return magnitude


def _to_quantity(value: Any, target: Any, field: str, default_unit: str) -> Any:
    ureg = registry()
    if isinstance(value, (int, float)):
        try:
            number = float(value)
        except OverflowError:  # an int beyond the range of a float
            raise InputError(field, f"expected a finite number, got {_show(value)}") from None
        if math.isnan(number) or math.isinf(number):
            raise InputError(field, f"expected a finite number, got {_show(value)}")
        return ureg.Quantity(number, target)
    if hasattr(value, "units") and hasattr(value, "magnitude"):
        try:
            return ureg.Quantity(float(value.magnitude), _units(str(value.units)))
        except (TypeError, ValueError, OverflowError):
            raise InputError(field, f"expected {_expected(default_unit)}, "
                                    f"got {_show(value)}") from None
    if not isinstance(value, str):
        raise InputError(field, f"expected {_expected(default_unit)}, got {value!r}")
    match = _NUMBER.match(value)
    if not match:
        if value.strip().lower().lstrip("+-").startswith("nan"):
            raise InputError(field, f"expected a finite number, got {_show(value)}")
        raise InputError(field, f"expected {_expected(default_unit)}, got {_show(value)}")
    number, unit_text = float(match.group(1)), match.group(2)
    if _LONG_EXPONENT.match(unit_text):
        raise InputError(field, f"an exponent has at most 3 digits, got {_show(value)}")
    if not unit_text:
        return ureg.Quantity(number, target)
    if unit_text in ("C", "F") and target.dimensionality == _units("K").dimensionality:
        unit_text = "deg" + unit_text  # "40 C" on a temperature input means degC, not coulomb
    try:
        units = _units(unit_text)
    except ValueError as exc:
        why = f": {exc}" if str(exc) else ""
        raise InputError(field, f"unknown unit {excerpt(unit_text)}{why}; "
                                f"expected {_expected(default_unit)}") from None
    return ureg.Quantity(number, units)


def convert(value: float, from_unit: str, to_unit: str) -> float:
    """``value`` in ``from_unit`` expressed in ``to_unit`` (offset temperatures handled).

    >>> round(convert(0.007, "in", "mm"), 4)
    0.1778
    """
    mine, wanted = _known(from_unit), _known(to_unit)
    if mine is not None and wanted is not None and mine.dims == wanted.dims:
        return float(mine.to(value, wanted))
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


# --- the technician's preferred unit -------------------------------------------------------------

#: The unit systems a technician may prefer (the settings file's ``units``).
PREFERENCES = ("metric", "inch")
#: The unit a bare length is taken in under each preference (None: the pack's own unit).
_BARE_UNIT = {"metric": None, "inch": "in"}
#: The largest pack unit of length that the preference applies to: feeler gauges, dial
#: indicators and calipers (mm, µm); a length in metres (a cable run) stays as it is.
_SMALL_LENGTH_MM = 25.4
_SEPARATORS = re.compile(r"([\s,;]+)")


def preferred_reading(text: Any, pack_unit: str, units: str) -> Any:
    """``text`` with the preferred unit written on each bare number, for a reading in ``pack_unit``.

    With ``units == "inch"`` and ``pack_unit`` a small metric length (mm, µm;
    the air gap, a runout, a wear), each number typed without a unit gets
    ``in``: the technician measured in inches. A number with its unit
    ("0.46 mm"), numbers followed by a unit standing alone ("0.46 0.48 mm",
    which the session reads as all in mm), an open reading ("OL") and words
    ("unsure", an outcome) stay as typed. ``text`` may be one reading, several
    separated by spaces, commas or semicolons, a number, or a list of them.
    Anything else, and every reading under the metric preference, is given
    back unchanged.

    >>> preferred_reading("0.018 0.019 0.017", "mm", "inch")
    '0.018 in 0.019 in 0.017 in'
    >>> preferred_reading("0.46 mm", "mm", "inch"), preferred_reading("0.018", "mm", "metric")
    ('0.46 mm', '0.018')
    >>> preferred_reading([0.018, "0.019"], "mm", "inch"), preferred_reading("24", "V", "inch")
    (['0.018 in', '0.019 in'], '24')
    """
    unit = bare_unit(pack_unit, units)
    if unit == pack_unit or isinstance(text, bool):
        return text
    if isinstance(text, (int, float)):
        return _with_unit(text, unit)
    if isinstance(text, (list, tuple)):
        marked = _bare_numbers(list(text))
        return type(text)(_with_unit(x, unit) if i in marked else x for i, x in enumerate(text))
    if not isinstance(text, str) or len(text) > 20 * MAX_TEXT:
        return text  # not a reading, or too long: the session says why
    pieces = _SEPARATORS.split(text)  # readings at even places, separators between
    marked = {2 * i for i in _bare_numbers(pieces[::2])}
    return "".join(_with_unit(p, unit) if i in marked else p for i, p in enumerate(pieces))


def bare_unit(pack_unit: str, units: str) -> str:
    """The unit a bare number is taken in, for a reading in ``pack_unit`` under ``units``.

    >>> bare_unit("mm", "inch"), bare_unit("mm", "metric"), bare_unit("ohm", "inch")
    ('in', 'mm', 'ohm')
    """
    preferred = _BARE_UNIT.get(units)
    return preferred if preferred is not None and _small_length(pack_unit) else pack_unit


def _small_length(pack_unit: str) -> bool:
    """Whether ``pack_unit`` is a metric length of at most an inch (mm, µm, cm)."""
    if not isinstance(pack_unit, str) or not fits(pack_unit, "mm"):
        return False
    known = _known(pack_unit)
    if known is not None and known.name:
        metric = known.name in _METRIC
    else:
        metric = str(_units(pack_unit)).endswith("meter")  # not in, thou: those are inches already
    return metric and convert(1.0, pack_unit, "mm") <= _SMALL_LENGTH_MM * (1 + ROUNDING)


def _bare_numbers(items: list[Any]) -> set[int]:
    """Positions of the numbers typed without a unit that no later unit standing alone claims.

    A unit standing alone applies to the bare numbers since the previous one
    (as :func:`diagnose.physics.inputs.split_readings` reads them).
    """
    pending: list[int] = []
    for i, item in enumerate(items):
        if isinstance(item, str) and is_unit(item):
            pending = []
        elif _is_bare_number(item):
            pending.append(i)
    return set(pending)


def _is_bare_number(item: Any) -> bool:
    if isinstance(item, bool):
        return False
    if isinstance(item, (int, float)):
        return math.isfinite(item)
    if not isinstance(item, str) or not item or len(item) > MAX_TEXT:
        return False
    match = _NUMBER.match(item)
    return match is not None and not match.group(2)


def _with_unit(value: Any, unit: str) -> str:
    return f"{str(value).strip()} {unit}"
