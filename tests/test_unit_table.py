"""The unit table of ``diagnose.physics.units`` against pint, the reference.

The table converts the units in everyday use without importing pint. pint
itself (a registry of its own, not the project's) is the reference here: for
every unit of the table and every unit the packs and calculators name, the
same dimension and, to 1e-14 relative, the same conversion.
"""

from __future__ import annotations

import math
import os
import subprocess
import sys
from pathlib import Path

import pytest
from packdata import units_in_use

from diagnose.physics import units

ROOT = Path(__file__).parent.parent
PACKS = [*(ROOT / "knowledge").glob("*/*.yaml"), *(ROOT / "tests" / "fixtures").rglob("*.yaml")]
#: pint's base dimensions, in the order of the table's powers.
BASE = ("[length]", "[mass]", "[time]", "[current]", "[temperature]")
#: Values converted in every comparison: small, large, negative, zero, a typical reading.
VALUES = (0.0, 1.0, 0.007, 31.1, -12.5, 1e6, 104.0)


@pytest.fixture(scope="module")
def ureg():
    pint = pytest.importorskip("pint")
    return pint.UnitRegistry()


def _units_in_use() -> set[str]:
    """Every unit the calculators and the shipped and test packs name."""
    return units_in_use(PACKS)


#: Spellings technicians type (as in tests/test_physics_units.py) and compound units.
TYPED = ("V", "VDC", "mV", "kV", "ohms", "Ω", "kΩ", "MΩ", "Mohm", "megohm", "kohm", "mohm",
         "A", "mA", "W", "kW", "mm", "um", "µm", "μm", "cm", "m", "km", "in", "inch", '"',
         "thou", "mil", "mils", "ft", "mm2", "mm²", "mm**2", "m2", "kg*m2", "kg m2", "kg*m**2",
         "N*m", "N·m", "J", "kJ", "J/(kg*K)", "rpm", "r/min", "min-1", "min⁻¹", "rev/s",
         "rad/s", "1/s", "s⁻¹", "s^-1", "Hz", "s", "ms", "min", "h", "kg", "g", "K", "degC",
         "°C", "deg C", "degF", "°F", "%", "percent", "degree", "°", "")


def _pint_units(ureg, text):
    return ureg.parse_units(units.parse_unit(text))


def _same_dimension(ureg, a: str, b: str) -> bool:
    return _pint_units(ureg, a).dimensionality == _pint_units(ureg, b).dimensionality


@pytest.mark.parametrize("name", sorted(units._TABLE) + sorted(units._OFFSET))
def test_each_name_of_the_table_has_pints_dimension(ureg, name):
    known = units._known(name)
    assert known is not None
    dims = _pint_units(ureg, name).dimensionality
    assert {d: p for d, p in zip(BASE, known.dims) if p} == dict(dims)


@pytest.mark.parametrize("name", sorted(units._TABLE))
def test_each_name_of_the_table_has_pints_factor(ureg, name):
    # pint's root units are the SI base units with the gram for the kilogram
    factor, _ = ureg._get_root_units(_pint_units(ureg, name)._units)
    grams = 1000.0 ** units._known(name).dims[1]
    assert units._known(name).factor * grams == pytest.approx(factor, rel=1e-14)


def test_every_unit_in_use_is_in_the_table():
    """The packs and calculators need no pint on the way of a value that reads well."""
    missing = sorted(u for u in _units_in_use() if units._known(u) is None)
    assert missing == []


def _pairs(ureg, texts):
    texts = sorted(set(texts))
    return [(a, b) for a in texts for b in texts if _same_dimension(ureg, a, b)]


def test_every_unit_in_use_converts_as_pint_converts(ureg):
    texts = _units_in_use() | set(TYPED)
    pairs = _pairs(ureg, texts)
    assert len(pairs) > 100  # lengths, voltages, resistances, temperatures, ...
    for a, b in pairs:
        mine, theirs = units._known(a), units._known(b)
        assert mine is not None and theirs is not None, (a, b)
        for v in VALUES:
            want = ureg.Quantity(v, _pint_units(ureg, a)).to(_pint_units(ureg, b)).magnitude
            got = mine.to(v, theirs)
            assert got == pytest.approx(want, rel=1e-14, abs=1e-12 * abs(v)), (v, a, b)
            assert units.convert(v, a, b) == got


def test_fits_and_is_unit_agree_with_pint(ureg):
    texts = sorted(_units_in_use() | set(TYPED))
    for a in texts:
        assert units.is_unit(a) is bool(a.strip() and not units._NUMBER.match(a))  # '1/s'
        for b in texts:
            assert units.fits(a, b) is _same_dimension(ureg, a, b), (a, b)


@pytest.mark.parametrize(("text", "unit"), [
    ("24V", "V"), ("24 VDC", "V"), ("230 V AC", "V"), ("28.8Ω", "ohm"), ("0.006 in", "mm"),
    ('0.006"', "mm"), ("6 thou", "mm"), ("6 mil", "mm"), ("0.5mm2", "mm**2"),
    ("0.5 mm²", "mm**2"), ("3000 r/min", "rpm"), ("50 rev/s", "rpm"),
    (f"{100 * math.pi} rad/s", "rpm"), ("200 MΩ", "megaohm"), ("2 kohm", "megaohm"),
    ("10 %", ""), ("0.01 kg m2", "kg*m**2"), ("10 N·m", "J"), (" 1e3 ohm ", "ohm"),
    ("40 degC", "degC"), ("40 C", "degC"), ("104 degF", "degC"), ("313.15 K", "degC"),
    ("-10 °C", "degC"), ("40 degC", "K"), ("0 degF", "K"), ("460 J/(kg*K)", "J/(kg*K)"),
    (0.25, "mm"), (40, "degC"), ("-24V", "V"),
])
def test_typed_values_read_by_the_table_as_pint_reads_them(ureg, text, unit):
    got = units._table_quantity(text, unit, negative=True)
    assert got is not None  # read without pint
    if isinstance(text, str):
        match = units._NUMBER.match(text)
        number, typed = float(match.group(1)), match.group(2) or unit
        if typed in ("C", "F"):
            typed = "deg" + typed
    else:
        number, typed = float(text), unit
    want = ureg.Quantity(number, _pint_units(ureg, typed)).to(_pint_units(ureg, unit)).magnitude
    assert got == pytest.approx(want, rel=1e-14, abs=1e-12)
    assert units.parse_quantity(text, unit, "x", negative=True) == got


@pytest.mark.parametrize("value", ["3 bananas", "3 kg", "-3 ohm", "OL", "nan", "1e999 ohm",
                                   "-300 degC", True, None, "3 C", math.inf, "3 ohm)"])
def test_the_table_leaves_every_unusable_value_to_pint(value):
    """pint writes the messages: the table answers only for values that read well."""
    unit = "degC" if value == "-300 degC" else "ohm"
    assert units._table_quantity(value, unit, negative=False) is None


def _run(code: str, tmp_path: Path, stdin: str = "") -> str:
    env = {**os.environ, "DIAGNOSE_JOURNAL": str(tmp_path / "j.sqlite3"),
           "XDG_CACHE_HOME": str(tmp_path / "cache"), "XDG_STATE_HOME": str(tmp_path / "state"),
           "XDG_DATA_HOME": str(tmp_path / "data"), "XDG_CONFIG_HOME": str(tmp_path / "config")}
    env.pop("DIAGNOSE_SETTINGS", None)
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          env=env, input=stdin, timeout=120, check=False)
    assert done.returncode == 0, done.stderr
    return done.stdout


HEAVY = ("pint", "numpy", "networkx", "jsonschema", "prompt_toolkit", "scipy")
_AFTER = ("import sys\n"
          "sys.stdout.flush()\n"
          "print('\\nIMPORTED', *[m for m in {heavy!r} if m in sys.modules])\n")


def test_calc_coil_needs_no_pint(tmp_path):
    code = ("from diagnose.cli import main\n"
            "main(['calc', 'coil', '--rated-voltage', '24V', '--rated-power', '20W',"
            " '--ohms', '31.1ohm', '--temp', '40degC'])\n" + _AFTER.format(heavy=HEAVY))
    out = _run(code, tmp_path)
    assert "31.06" in out  # 28.8 ohm * (234.5 + 40) / (234.5 + 20), IEC 60228 copper
    assert out.strip().splitlines()[-1] == "IMPORTED"


def test_the_piped_first_question_needs_no_heavy_library(tmp_path):
    """Up to the nameplate's first question a piped session imports none of them."""
    code = ("from diagnose.cli import main\n"
            "main(['start', 'spring-applied-brake'])\n" + _AFTER.format(heavy=HEAVY))
    _run(code, tmp_path)  # the first start fills the compiled-pack cache
    out = _run(code, tmp_path)
    assert "Unit identification: the nameplate" in out
    assert out.strip().splitlines()[-1] == "IMPORTED"
