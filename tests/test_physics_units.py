"""Units: parsing what technicians type, dimension checks, offset temperatures, bad input."""

from __future__ import annotations

import math
import subprocess
import sys

import pytest

from diagnose.errors import InputError
from diagnose.physics import units
from diagnose.physics.inputs import read_choice, read_flag, split_readings


@pytest.mark.parametrize(
    ("text", "unit", "expected"),
    [
        ("24V", "V", 24.0),
        ("24 VDC", "V", 24.0),
        ("230 V AC", "V", 230.0),
        ("28.8 ohm", "ohm", 28.8),
        ("28.8 ohms", "ohm", 28.8),
        ("28.8Ω", "ohm", 28.8),
        ("0.006 in", "mm", 0.1524),  # 1 in = 25.4 mm exactly (NIST SP 811)
        ('0.006"', "mm", 0.1524),  # 1 in = 25.4 mm exactly (NIST SP 811)
        ("6 thou", "mm", 0.1524),  # 1 thou = 0.001 in (NIST SP 811)
        ("6 mil", "mm", 0.1524),  # trade usage: mil = thou
        ("0.5mm2", "mm**2", 0.5),
        ("0.5 mm²", "mm**2", 0.5),
        ("20W", "W", 20.0),
        ("3000 rpm", "rpm", 3000.0),
        ("3000 r/min", "rpm", 3000.0),
        ("50 rev/s", "rpm", 3000.0),
        (f"{100 * math.pi} rad/s", "rpm", 3000.0),  # omega = 2*pi*n/60
        ("1 megaohm", "megaohm", 1.0),
        ("1 megohm", "megaohm", 1.0),
        ("200 Mohm", "megaohm", 200.0),
        ("200 MΩ", "megaohm", 200.0),
        ("2 kohm", "megaohm", 0.002),
        ("10 %", "", 0.1),
        ("0.1", "", 0.1),
        ("0.01 kg*m2", "kg*m**2", 0.01),
        ("10 N·m", "N*m", 10.0),
        (" 1e3 ohm ", "ohm", 1000.0),
    ],
)
def test_parse_text_with_units(text, unit, expected):
    assert units.parse_quantity(text, unit, "x") == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("40 degC", 40.0),
        ("40degC", 40.0),
        ("40 °C", 40.0),
        ("40 C", 40.0),  # on a temperature input "C" means degC, not coulomb
        ("104 degF", 40.0),  # (104 - 32) * 5/9 = 40 (NIST SP 811, B.9)
        ("313.15 K", 40.0),  # 0 degC = 273.15 K (NIST SP 811)
        ("-10 degC", -10.0),
        (40, 40.0),
    ],
)
def test_temperatures_are_offset_units(text, expected):
    assert units.parse_quantity(text, "degC", "temperature") == pytest.approx(expected)


def test_plain_numbers_and_quantities_take_the_default_unit():
    q = units.registry().Quantity(0.25, "inch")
    assert units.parse_quantity(0.25, "mm", "gap") == 0.25
    assert units.parse_quantity(q, "mm", "gap") == pytest.approx(6.35)  # 25.4 mm/in (NIST SP 811)
    assert units.parse_quantity(units.registry().Quantity(40, "degC"), "degC", "t") == 40


@pytest.mark.parametrize("text", ["OL", "ol", "O.L.", "inf", "open", "∞", math.inf])
def test_open_readings(text):
    assert units.is_open(text)
    assert units.parse_quantity(text, "ohm", "ohms", open_ok=True) == math.inf


@pytest.mark.parametrize(
    ("value", "kwargs", "needle"),
    [
        ("abc", {}, "expected a resistance"),
        ("", {}, "expected a resistance"),
        (None, {}, "expected a resistance"),
        (True, {}, "expected a resistance"),
        ("nan", {}, "expected a finite number"),
        (math.nan, {}, "finite"),
        ("OL", {}, "open or infinite"),
        (math.inf, {}, "open or infinite"),
        ("-3 ohm", {}, "must not be negative"),
        ("3 kg", {}, "which is a mass"),
        ("3 bananas", {}, "unknown unit 'bananas'"),
        ("3 ohm)", {}, "unknown unit"),
    ],
)
def test_bad_values_raise_one_line_input_errors(value, kwargs, needle):
    with pytest.raises(InputError) as info:
        units.parse_quantity(value, "ohm", "ohms", **kwargs)
    assert info.value.field == "ohms"
    assert needle in str(info.value)
    assert "\n" not in str(info.value)


def test_a_length_in_kilograms_names_both_kinds():
    with pytest.raises(InputError, match=r"expected a length .*'0.5 kg', which is a mass"):
        units.parse_quantity("0.5 kg", "mm", "gap")


def test_below_absolute_zero_is_refused():
    with pytest.raises(InputError, match="absolute zero"):
        units.parse_quantity("-300 degC", "degC", "temperature")


def test_negative_allowed_when_asked():
    assert units.parse_quantity("-24V", "V", "volts", negative=True) == -24.0


@pytest.mark.parametrize(
    ("unit_text", "input_unit", "expected"),
    [
        ("mm", "in", True),
        ("in", "mm", True),
        ("V", "V", True),
        ("mV", "V", True),
        ("degF", "degC", True),
        ("K", "degC", True),
        ("%", "", True),
        ("", "", True),
        ("MΩ", "megaohm", True),
        ("mm2", "mm**2", True),
        ("kg", "mm", False),
        ("V", "ohm", False),
        ("", "V", False),
        ("bananas", "V", False),
        ("mm)", "mm", False),
    ],
)
def test_fits(unit_text, input_unit, expected):
    assert units.fits(unit_text, input_unit) is expected


def test_unit_of_and_is_unit():
    assert units.unit_of("0.006 in") == "in"
    assert units.unit_of("0.5mm2") == "mm**2"
    assert units.unit_of("0.006") is None
    assert units.unit_of(0.006) is None
    assert units.is_unit("mm") and units.is_unit("in")
    assert not units.is_unit("0.5 mm") and not units.is_unit("bananas")


def test_convert_inch_exact():
    assert units.convert(1.0, "in", "mm") == pytest.approx(25.4, rel=1e-15)  # NIST SP 811


def test_split_readings_attaches_a_trailing_unit():
    assert split_readings("0.62 0.65 0.60 mm") == ["0.62 mm", "0.65 mm", "0.60 mm"]
    assert split_readings(["0.1", "mm", "0.004", "in"]) == ["0.1 mm", "0.004 in"]
    assert split_readings("0.62mm, 0.65mm; 0.60mm") == ["0.62mm", "0.65mm", "0.60mm"]
    with pytest.raises(InputError, match="follows no number"):
        split_readings(["mm", "0.1"])


def test_choices_and_flags():
    assert read_choice("Half Wave", ("half-wave", "bridge"), "type") == "half-wave"
    with pytest.raises(InputError, match="unknown choice 'fullwave'; expected one of: "):
        read_choice("fullwave", ("half-wave", "bridge"), "type")
    assert read_flag("yes", "f") is True and read_flag("No", "f") is False
    assert read_flag(True, "f") is True
    with pytest.raises(InputError, match="expected yes or no"):
        read_flag("maybe", "f")


def test_importing_physics_does_not_import_pint():
    code = ("import sys, diagnose.physics, diagnose.physics.coil, diagnose.commands.calc, "
            "diagnose.service.calc; print('pint' in sys.modules, 'rich' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.split() == ["False", "False"]


# --- the technician's preferred unit ---------------------------------------------------------

def test_preferred_reading_takes_bare_lengths_in_inches_as_pint_does():
    import pint

    ureg = pint.UnitRegistry()  # the reference: its own registry, not the project's
    text = units.preferred_reading("0.018 0.019 0.017", "mm", "inch")
    assert text == "0.018 in 0.019 in 0.017 in"
    for reading, typed in zip(split_readings(text), (0.018, 0.019, 0.017)):
        mm = units.parse_quantity(reading, "mm", "readings")
        assert mm == pytest.approx(ureg.Quantity(typed, "inch").to("mm").magnitude, rel=1e-12)
        # 1 in = 25.4 mm exactly, by definition (international yard and pound agreement, 1959)
        assert mm == pytest.approx(typed * 25.4, rel=1e-12)


@pytest.mark.parametrize(
    ("text", "pack_unit", "prefer", "expected"),
    [
        ("0.018", "mm", "inch", "0.018 in"),
        ("0.018, 0.019; 0.017", "mm", "inch", "0.018 in, 0.019 in; 0.017 in"),
        ("-0.002 0.003", "mm", "inch", "-0.002 in 0.003 in"),  # a runout indicator zeroed mid-way
        ("18 um", "um", "inch", "18 um"),
        ("5", "um", "inch", "5 in"),
        ("0.46 mm", "mm", "inch", "0.46 mm"),  # a unit typed stays as typed
        ("0.46mm 0.48", "mm", "inch", "0.46mm 0.48 in"),
        ("0.46 0.48 mm", "mm", "inch", "0.46 0.48 mm"),  # the unit after them is theirs
        ("0.46 0.48 mm 0.47", "mm", "inch", "0.46 0.48 mm 0.47 in"),
        ('0.018"', "mm", "inch", '0.018"'),
        ("OL", "mm", "inch", "OL"),
        ("unsure", "mm", "inch", "unsure"),
        ("", "mm", "inch", ""),
        ("0.018", "mm", "metric", "0.018"),  # metric: nothing changes
        ("24", "V", "inch", "24"),  # not a length
        ("15", "m", "inch", "15"),  # a cable run in metres: feet, not inches, would be the other
        ("0.1", "thou", "inch", "0.1"),  # the pack's unit is an inch unit already
        ("0.018", "in", "inch", "0.018"),
    ],
)
def test_preferred_reading_cases(text, pack_unit, prefer, expected):
    assert units.preferred_reading(text, pack_unit, prefer) == expected


def test_preferred_reading_of_numbers_and_lists():
    assert units.preferred_reading(0.018, "mm", "inch") == "0.018 in"
    assert units.preferred_reading([0.018, "0.019", "0.017 mm"], "mm", "inch") == [
        "0.018 in", "0.019 in", "0.017 mm"]
    assert units.preferred_reading(["0.46", "0.48", "mm"], "mm", "inch") == ["0.46", "0.48", "mm"]
    assert units.preferred_reading(("0.018",), "mm", "inch") == ("0.018 in",)
    assert units.preferred_reading(True, "mm", "inch") is True
    assert units.preferred_reading(None, "mm", "inch") is None
    assert units.preferred_reading("9" * 50_000, "mm", "inch") == "9" * 50_000  # refused later


@pytest.mark.parametrize(("pack_unit", "prefer", "expected"),
                         [("mm", "inch", "in"), ("mm", "metric", "mm"), ("ohm", "inch", "ohm"),
                          ("m", "inch", "m"), ("", "inch", "")])
def test_bare_unit(pack_unit, prefer, expected):
    assert units.bare_unit(pack_unit, prefer) == expected


@pytest.mark.parametrize(("value", "unit", "inches", "beside"), [
    (0.4572, "mm", 0.018, "0.46 mm"),
    (0.3, "mm", 0.011811, "0.3 mm"),
    (12.7, "mm", 0.5, "12.7 mm"),
    (0.018, "in", 0.018, "0.46 mm"),
    (0.0508, "mm", 0.002, "0.051 mm"),
])
def test_figures_in_inches_with_mm_beside_as_pint_converts(value, unit, inches, beside):
    import pint

    from diagnose.physics.verdict import preferred_figure, quantity_text

    ureg = pint.UnitRegistry()
    shown, shown_unit, mm_text = preferred_figure(value, unit, "inch")
    assert shown_unit == "in" and mm_text == beside
    assert shown == pytest.approx(ureg.Quantity(value, unit).to("inch").magnitude, rel=1e-5)
    assert shown == pytest.approx(inches, rel=1e-5)  # 1 in = 25.4 mm exactly (1959 agreement)
    assert quantity_text(value, unit, "inch").endswith(f" in ({beside})")


def test_metric_figures_are_as_before():
    from diagnose.physics.verdict import preferred_figure, quantity_text

    for value, unit in ((0.4572, "mm"), (24.0, "V"), (12.0, "%"), (0.5, "mm**2")):
        assert quantity_text(value, unit, "metric") == quantity_text(value, unit)
        assert preferred_figure(value, unit) == (value, unit, "")
    assert quantity_text(24.0, "V", "inch") == "24 V"
    assert quantity_text(5.0, "m", "inch") == "5 m"  # a cable run stays in metres
