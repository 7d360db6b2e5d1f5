"""The evaluators against outside sources; every check value names its source beside it."""

from __future__ import annotations

import math

import pytest

from diagnose.errors import InputError
from diagnose.physics import EVALUATORS, evaluate
from diagnose.physics.cable import CLASS5_OHM_PER_KM, loop_resistance
from diagnose.physics.copper import (
    ALPHA_20,
    K_ASTM,
    K_IEC,
    RESISTIVITY_20,
    conductor_resistance,
    resistance_at,
    winding_temperature,
)
from diagnose.physics.insulation import corrected_to_40
from diagnose.physics.rectifier import expected_dc
from diagnose.physics.runout import total_indicator_runout
from diagnose.physics.stop import stop_figures

NAMEPLATE = {"rated_voltage": "24V", "rated_power": "20W"}


# --- copper -----------------------------------------------------------------------------------

def test_annealed_copper_constants():
    assert RESISTIVITY_20 == pytest.approx(1 / 58)  # IEC 60028: 1/58 ohm*mm2/m at 20 degC
    assert ALPHA_20 == 0.00393  # IEC 60028: 0.00393 /K at 20 degC


def test_copper_resistance_at_75_degc():
    assert resistance_at(1.21, 75) == pytest.approx(1.472, abs=5e-4)  # IEC 60028, alpha 0.00393


def test_conductor_resistance_from_resistivity():
    assert conductor_resistance(58.0, 1.0) == pytest.approx(1.0)  # IEC 60028: 1/58 ohm*mm2/m


@pytest.mark.parametrize(("k", "expected"), [(K_IEC, 71.0), (K_ASTM, 70.9)])
def test_resistance_method(k, expected):
    # IEC 60034-1 uses 235 for copper (71.0 degC); ASTM B193/IEEE 234.5 (70.9 degC)
    assert winding_temperature(24.0, 20.0, 20.0, k) == pytest.approx(expected, abs=0.05)


def test_resistance_method_conventions_agree_within_0_2_k():
    # IEC 60034-1 (235) against ASTM B193 / IEEE (234.5): less than 0.2 K apart
    iec, astm = (winding_temperature(24, 20, 20, k) for k in (K_IEC, K_ASTM))
    assert abs(iec - astm) < 0.2


# --- coil -------------------------------------------------------------------------------------

def test_coil_ok_at_40_degc():
    v = evaluate("coil", {**NAMEPLATE, "ohms": "31.1ohm", "temperature": "40degC"})
    assert v.verdict == "ok"
    assert v.figures["expected_20"].value == pytest.approx(28.8)  # V**2/P = 576/20 (Ohm's law)
    assert v.figures["expected"].value == pytest.approx(31.06, abs=0.01)  # 28.8*(1+0.00393*20)
    assert v.figures["expected_current"].value == pytest.approx(24 / 31.0637, rel=1e-4)
    assert "31.06 ohm at 40 °C" in v.summary


@pytest.mark.parametrize(
    ("ohms", "verdict"),
    [
        ("0.4 ohm", "short"),
        ("2.8 ohm", "short"),  # below 10 % of 28.8
        ("3.2 ohm", "low"),
        ("25.8 ohm", "low"),  # below 0.9 * 28.8 = 25.92
        ("26 ohm", "ok"),
        ("31.6 ohm", "ok"),  # 1.1 * 28.8 = 31.68
        ("31.7 ohm", "high"),
        ("287 ohm", "high"),
        ("289 ohm", "open"),  # above 10 x expected
        ("OL", "open"),
        ("inf", "open"),
        ("12 Mohm", "open"),
    ],
)
def test_coil_bands_at_20_degc(ohms, verdict):
    assert evaluate("coil", {**NAMEPLATE, "ohms": ohms}).verdict == verdict


def test_coil_open_has_no_infinite_figures():
    v = evaluate("coil", {**NAMEPLATE, "ohms": "OL"})
    assert all(math.isfinite(f.value) for f in v.figures.values())
    assert "measured" not in v.figures and "open (OL)" in v.summary


def test_coil_rated_resistance_instead_of_power():
    v = evaluate("coil", {"rated_voltage": 24, "rated_resistance": "28.8 ohm", "ohms": 28.8})
    assert v.verdict == "ok" and v.figures["expected_20"].value == 28.8


def test_coil_winding_temperature_by_resistance_method():
    v = evaluate("coil", {**NAMEPLATE, "ohms": 24.0, "reference_ohms": 20.0,
                          "reference_temperature": "20 degC", "rated_resistance": 20.0})
    # IEC 60034-1: 24/20 * (235 + 20) - 235 = 71.0 degC
    assert v.figures["winding_temperature"].value == pytest.approx(71.0)


@pytest.mark.parametrize(
    ("values", "field"),
    [
        ({"rated_voltage": 24, "ohms": 30}, "rated_power"),
        ({**NAMEPLATE, "ohms": 30, "tolerance": 1.5}, "tolerance"),
        ({**NAMEPLATE, "ohms": "-3 ohm"}, "ohms"),
        ({**NAMEPLATE, "ohms": 30, "rated_power": 0}, "rated_power"),
        ({**NAMEPLATE}, "ohms"),
        ({**NAMEPLATE, "ohms": 30, "colour": "red"}, "colour"),
    ],
)
def test_coil_bad_input(values, field):
    with pytest.raises(InputError) as info:
        evaluate("coil", values)
    assert info.value.field == field


# --- supply -----------------------------------------------------------------------------------

@pytest.mark.parametrize(
    ("volts", "source", "extra", "verdict"),
    [
        ("24 V", "converter", {}, "ok"),
        ("21.6 V", "converter", {}, "ok"),  # 0.9 x 24, IEC 60204-1 4.3.3 (from memory)
        ("21.5 V", "converter", {}, "low"),
        ("26.5 V", "converter", {}, "high"),  # above 1.1 x 24
        ("20.5 V", "battery", {}, "ok"),  # 0.85 x 24 = 20.4, IEC 60204-1 4.3.3 (from memory)
        ("27.5 V", "battery", {}, "ok"),  # 1.15 x 24 = 27.6
        ("20.3 V", "battery", {}, "low"),
        ("21.6 V", "rectified", {}, "ok"),
        ("2 V", "converter", {}, "absent"),  # below 10 % of rated
        ("0 V", "converter", {}, "absent"),
        ("-24 V", "converter", {"polarity_known": True}, "reversed"),
        ("-24 V", "converter", {"polarity_known": "yes"}, "reversed"),
        ("-24 V", "converter", {}, "ok"),  # polarity unknown: judged by magnitude
        ("-1 V", "converter", {"polarity_known": True}, "absent"),
        ("25 V", "converter", {"window_low": 0.95, "window_high": 1.05}, "ok"),
        ("25 V", "converter", {"window_low": "95 %", "window_high": "105 %"}, "ok"),
        ("26 V", "converter", {"window_low": 0.95, "window_high": 1.05}, "high"),
        ("22.5 V", "converter", {"window_low": 0.95, "window_high": 1.05}, "low"),
    ],
)
def test_supply(volts, source, extra, verdict):
    v = evaluate("supply", {"rated_voltage": "24 V", "volts": volts, "source": source, **extra})
    assert v.verdict == verdict


def test_supply_bad_window():
    with pytest.raises(InputError, match="not below its high end"):
        evaluate("supply", {"rated_voltage": 24, "volts": 24, "window_low": 1.05,
                            "window_high": 0.95})
    with pytest.raises(InputError, match="fraction of rated"):
        evaluate("supply", {"rated_voltage": 24, "volts": 24, "window_low": 90})


# --- rectifier --------------------------------------------------------------------------------

def test_rectifier_means():
    # textbook, ideal diodes, resistive load: sqrt(2)/pi = 0.4502, 2*sqrt(2)/pi = 0.9003
    assert expected_dc(1, "half-wave") == pytest.approx(0.4502, abs=1e-4)
    assert expected_dc(1, "bridge") == pytest.approx(0.9003, abs=1e-4)
    assert expected_dc(230, "half-wave") == pytest.approx(103.54, abs=0.005)
    assert expected_dc(230, "bridge") == pytest.approx(207.07, abs=0.005)


@pytest.mark.parametrize(
    ("ac", "kind", "dc", "verdict"),
    [
        ("230V", "bridge", "103V", "half_wave"),
        ("230V", "bridge", "207V", "matches"),
        ("230V", "bridge", "200V", "matches"),
        ("230V", "bridge", "150V", "failed_diode"),
        ("230V", "bridge", "50V", "failed_diode"),
        ("230V", "bridge", "5V", "no_output"),  # below 5 % of 207 V
        ("230V", "bridge", "-207V", "matches"),  # leads either way
        ("230V", "half-wave", "103V", "matches"),
        ("200V", "half-wave", "90V", "matches"),  # common practice: 90 V DC from 200 V AC
        ("230V", "half-wave", "207V", "full_wave"),
        ("230V", "half-wave", "60V", "failed_diode"),
        ("230V", "half-wave", "0V", "no_output"),
    ],
)
def test_rectifier_patterns(ac, kind, dc, verdict):
    v = evaluate("rectifier", {"ac_volts": ac, "type": kind, "measured_dc": dc})
    assert v.verdict == verdict


def test_rectifier_trade_rule_90_from_200():
    assert 0.45 * 200 == pytest.approx(expected_dc(200, "half-wave"), abs=0.1)  # common practice


# --- cable ------------------------------------------------------------------------------------

@pytest.mark.parametrize(
    ("area", "ohm_per_km"),
    [(0.5, 39.0), (0.75, 26.0), (1.0, 19.5), (1.5, 13.3), (2.5, 7.98)],  # IEC 60228 class 5
)
def test_iec_60228_class_5(area, ohm_per_km):
    assert CLASS5_OHM_PER_KM[area] == ohm_per_km
    assert loop_resistance(500, area)[0] == pytest.approx(ohm_per_km)  # 2 x 500 m = 1 km


def test_iec_60228_temperature_correction_uses_0_004():
    r, basis = loop_resistance(500, 1.0, 45)
    assert basis == "IEC 60228 class 5"
    assert r == pytest.approx(19.5 * (1 + 0.004 * 25))  # IEC 60228 annex B: 0.004 /K


def test_non_standard_size_uses_annealed_copper():
    r, basis = loop_resistance(29, 0.8)
    assert basis == "annealed copper"
    assert r == pytest.approx(58 / 58 / 0.8)  # IEC 60028: 1/58 ohm*mm2/m over 58 m


def test_cable_worked_example_fixed_current():
    # IEC 60228: 0.75 mm2 is 26.0 ohm/km; 40 m of loop is 1.04 ohm; 1.0 A drops 1.040 V
    v = evaluate("cable", {"current": "1 A", "rated_voltage": "24 V", "length": "20 m",
                           "area": "0.75 mm2"})
    assert v.figures["drop"].value == pytest.approx(1.040)
    assert v.verdict == "ok"


def test_cable_coil_as_resistor():
    v = evaluate("cable", {**NAMEPLATE, "length": "50m", "area": "0.5mm2"})
    assert v.figures["coil_resistance"].value == pytest.approx(28.8)  # 24**2/20
    assert v.figures["loop_resistance"].value == pytest.approx(3.9)  # 100 m x 39.0 ohm/km
    assert v.figures["drop"].value == pytest.approx(2.862, abs=0.001)  # 24*3.9/32.7
    assert v.figures["coil_volts"].value == pytest.approx(21.14, abs=0.01)
    assert v.figures["coil_supply"].value == pytest.approx(88.07, abs=0.01)
    assert "low" in v.figures["coil_supply"].label and "supply low at the coil" in v.summary
    assert v.verdict == "too_much_drop"


def test_cable_low_supply_end_is_not_the_cables_fault():
    v = evaluate("cable", {"current": 0.01, "rated_voltage": 24, "supply_volts": 20,
                           "length": 1, "area": 1.5})
    assert v.verdict == "ok" and "supply end itself is low" in v.summary


def test_cable_needs_a_current_or_a_coil():
    with pytest.raises(InputError) as info:
        evaluate("cable", {"rated_voltage": 24, "length": 50, "area": 0.5})
    assert info.value.field == "current"


# --- gap --------------------------------------------------------------------------------------

@pytest.mark.parametrize(
    ("readings", "extra", "verdict"),
    [
        (["0.62mm", "0.65mm", "0.60mm"], {}, "worn"),
        (["0.25mm", "0.27mm", "0.24mm"], {}, "ok"),
        (["0.10mm", "0.11mm", "0.10mm"], {}, "too_small"),  # below half the nominal
        (["0.10mm", "0.11mm", "0.10mm"], {"min": "0.05 mm"}, "ok"),
        (["0.20mm", "0.22mm", "0.21mm"], {"min": "0.22 mm"}, "too_small"),
        (["0.0mm", "0.45mm", "0.30mm"], {"spread": "0.3 mm"}, "uneven"),
        (["0.10mm", "0.45mm", "0.30mm"], {"spread": "0.2 mm"}, "uneven"),
        (["0.49mm", "0.50mm", "0.51mm"], {}, "ok"),  # an even gap at its limit: judged by the mean
        (["0.25", "0.26", "0.24", "0.25"], {}, "ok"),
    ],
)
def test_gap(readings, extra, verdict):
    v = evaluate("gap", {"readings": readings, "nominal": "0.25mm", "max": "0.5mm", **extra})
    assert v.verdict == verdict


def test_gap_spread_default_is_half_a_millimetre():
    # common practice: readings at the three points agree within 0.5 mm
    v = evaluate("gap", {"readings": [1.0, 1.4, 1.5], "nominal": 1.0, "max": 2.0})
    assert v.verdict == "ok"
    v = evaluate("gap", {"readings": [1.0, 1.4, 1.55], "nominal": 1.0, "max": 2.0})
    assert v.verdict == "uneven"


def test_gap_figures_and_wear_reserve():
    v = evaluate("gap", {"readings": "0.35 0.40 0.45 mm", "nominal": 0.25, "max": 0.5})
    assert v.figures["mean"].value == pytest.approx(0.4)
    assert v.figures["spread"].value == pytest.approx(0.1)
    assert v.figures["wear_used"].value == pytest.approx(60.0)  # (0.4-0.25)/(0.5-0.25)


def test_gap_in_inches_shows_inches():
    v = evaluate("gap", {"readings": ["0.010 in", "0.011 in", "0.012 in"], "nominal": "0.010 in",
                         "max": "0.020 in"})
    assert v.figures["mean"].unit == "in" and v.figures["mean"].value == pytest.approx(0.011)


@pytest.mark.parametrize(
    ("values", "needle"),
    [
        ({"readings": ["0.6mm", "0.6mm"]}, "at least 3 readings"),
        ({"readings": ["0.6mm", "0.6kg", "0.6mm"]}, "which is a mass"),
        ({"readings": ["0.6mm", "-0.6mm", "0.6mm"]}, "must not be negative"),
        ({"readings": [0.3, 0.3, 0.3], "max": 0.2}, "above the nominal"),
        ({"readings": [0.3, 0.3, 0.3], "min": 0.3}, "below the nominal"),
    ],
)
def test_gap_bad_input(values, needle):
    with pytest.raises(InputError, match=needle):
        evaluate("gap", {"nominal": 0.25, "max": 0.5, **values})


# --- runout -----------------------------------------------------------------------------------

def test_tir_is_largest_minus_smallest():
    assert total_indicator_runout([0.000, 0.004, 0.007, 0.002]) == pytest.approx(0.007)  # TIR


@pytest.mark.parametrize("e", [0.01, 0.05, 0.2])
def test_eccentric_round_part_shows_twice_its_eccentricity(e):
    # a round part turning with eccentricity e: the indicator reads e*cos(theta); TIR = 2e
    readings = [e * math.cos(2 * math.pi * k / 36) for k in range(36)]
    v = evaluate("runout", {"readings": readings, "limit": 1.0})
    assert v.figures["tir"].value == pytest.approx(2 * e)


def test_runout_in_inches():
    v = evaluate("runout", {"readings": ["0.000in", "0.004in", "0.007in", "0.002in"],
                            "limit": "0.004in"})
    assert v.verdict == "out_of_tolerance"
    assert (v.figures["tir"].value, v.figures["tir"].unit) == (0.007, "in")
    assert v.figures["tir_mm"].value == pytest.approx(0.1778)  # 0.007 x 25.4 (NIST SP 811)


@pytest.mark.parametrize(
    ("readings", "limit", "verdict"),
    [
        # mounting-face perpendicularity 0.002-0.004 in TIR (common practice)
        (["0.000 in", "0.002 in"], "0.004 in", "ok"),
        (["0.000 in", "0.004 in"], "0.004 in", "ok"),  # at the limit is within
        (["0.000 in", "0.005 in"], "0.004 in", "out_of_tolerance"),
        # pilot concentricity 0.006 in TIR (common practice)
        (["-0.003 in", "0.003 in"], "0.006 in", "ok"),
        (["-0.003 in", "0.0035 in"], "0.006 in", "out_of_tolerance"),
        (["0 in", "0.011 in"], "0.012 in", "ok"),  # larger units 0.008/0.012 in, common practice
    ],
)
def test_runout_trade_limits(readings, limit, verdict):
    assert evaluate("runout", {"readings": readings, "limit": limit}).verdict == verdict


# --- insulation -------------------------------------------------------------------------------

def test_insulation_correction_to_40_degc():
    assert corrected_to_40(200, 20) == pytest.approx(50)  # IEEE Std 43: halves per 10 K


@pytest.mark.parametrize(
    ("megohms", "temperature", "verdict"),
    [
        ("0.9 Mohm", "40 degC", "failed"),  # IEC 60204-1 18.3: at least 1 Mohm at 500 V DC
        ("1 Mohm", "40 degC", "low"),
        ("4 Mohm", "40 degC", "low"),  # IEEE 43 (from memory): 5 Mohm below 1 kV
        ("5 Mohm", "40 degC", "ok"),
        ("15 Mohm", "20 degC", "low"),  # 3.75 Mohm at 40 degC
        ("200 Mohm", "20 degC", "ok"),
        ("OL", "20 degC", "ok"),
    ],
)
def test_insulation(megohms, temperature, verdict):
    v = evaluate("insulation", {"megohms": megohms, "temperature": temperature})
    assert v.verdict == verdict


def test_insulation_test_voltage_is_noted():
    v = evaluate("insulation", {"megohms": 100, "test_volts": "250 V"})
    assert "IEC 60204-1 asks 500 V" in v.summary


# --- temperature ------------------------------------------------------------------------------

@pytest.mark.parametrize(
    ("temperature", "verdict"),
    [("60 degC", "ok"), ("84 degC", "ok"), ("85 degC", "hot"), ("100 degC", "hot"),
     ("101 degC", "over_limit")],
)
def test_temperature(temperature, verdict):
    # 80 % of the 80 K rise from 20 degC to 100 degC is 64 K: hot above 84 degC
    assert evaluate("temperature", {"temperature": temperature}).verdict == verdict


def test_temperature_limit_below_ambient():
    with pytest.raises(InputError, match="above the ambient"):
        evaluate("temperature", {"temperature": 30, "ambient": 40, "limit": 35})


# --- release ----------------------------------------------------------------------------------

@pytest.mark.parametrize(
    ("volts", "temperature", "gap", "verdict"),
    [
        ("24 V", "20 degC", "0.25 mm", "releases"),
        ("16.8 V", "20 degC", "0.25 mm", "marginal"),  # exactly the pull-in voltage 0.7 x 24
        ("16 V", "20 degC", "0.25 mm", "will_not_release"),
        ("24 V", "20 degC", "0.5 mm", "will_not_release"),  # twice the gap: a quarter of the pull
        ("21.1 V", "60 degC", "0.35 mm", "will_not_release"),  # small losses add up
        ("0 V", "20 degC", "0.25 mm", "will_not_release"),
    ],
)
def test_release(volts, temperature, gap, verdict):
    v = evaluate("release", {"rated_voltage": "24 V", "volts": volts, "temperature": temperature,
                             "nominal_gap": "0.25 mm", "gap": gap})
    assert v.verdict == verdict


def test_release_margin_goes_with_the_square():
    v = evaluate("release", {"rated_voltage": 24, "volts": 24, "nominal_gap": 0.25, "gap": 0.25,
                             "pull_in": 0.5})
    assert v.figures["margin"].value == pytest.approx(4.0)  # (24 / 12) ** 2, F ~ (NI/g)**2


def test_release_zero_gap_is_refused():
    with pytest.raises(InputError, match="above zero"):
        evaluate("release", {"rated_voltage": 24, "volts": 24, "nominal_gap": 0.25, "gap": 0})


# --- stop -------------------------------------------------------------------------------------

def test_stop_shigley_example():
    time, angle, heat = stop_figures(0.01, 3000, 10)
    # Shigley (from memory): E = J*omega**2/2, t = J*omega/T
    assert heat == pytest.approx(493.48, abs=0.005)
    assert time == pytest.approx(0.314, abs=0.0005)


def test_stop_temperature_rise_and_rating():
    v = evaluate("stop", {"inertia": "0.01 kg*m2", "speed": "3000 rpm", "torque": "10 N*m",
                          "mass": "1 kg", "specific_heat": "460 J/(kg*K)",
                          "rated_energy": "400 J"})
    assert v.figures["temperature_rise"].value == pytest.approx(493.48 / 460, rel=1e-4)  # E/(m*c)
    assert v.verdict == "over"
    v = evaluate("stop", {"inertia": 0.01, "speed": 3000, "torque": 10, "rated_energy": 600})
    assert v.verdict == "within_rating"


def test_stop_load_torque_opposes_or_helps():
    base = {"inertia": 0.01, "speed": 3000, "torque": 10, "load_torque": 5}
    opposing = evaluate("stop", {**base, "load": "opposes"})
    helping = evaluate("stop", {**base, "load": "helps"})
    # the brake takes T/(T +/- T_L) of the kinetic energy
    assert opposing.figures["heat"].value == pytest.approx(493.48 * 10 / 15, abs=0.01)
    assert helping.figures["heat"].value == pytest.approx(493.48 * 10 / 5, abs=0.01)
    assert evaluate("stop", {**base, "load_torque": 12, "load": "helps"}).verdict == "over"


# --- holding ----------------------------------------------------------------------------------

@pytest.mark.parametrize(
    ("load", "rated", "verdict"),
    [(5, 10, "ok"), (5.1, 10, "insufficient"), (0, 10, "ok")],
)
def test_holding(load, rated, verdict):
    # common practice: rated holding torque at least twice the static load torque
    assert evaluate("holding", {"load_torque": load, "rated_torque": rated}).verdict == verdict


# --- every evaluator --------------------------------------------------------------------------

SAMPLES = {
    "coil": {**NAMEPLATE, "ohms": 28.8},
    "supply": {"rated_voltage": 24, "volts": 24},
    "off_voltage": {"rated_voltage": 24, "volts": 0.3},
    "rectifier": {"ac_volts": 230, "type": "bridge", "measured_dc": 207},
    "cable": {**NAMEPLATE, "length": 10, "area": 1.5},
    "gap": {"readings": [0.25, 0.25, 0.25], "nominal": 0.25, "max": 0.5},
    "runout": {"readings": [0, 0.01], "limit": 0.05},
    "insulation": {"megohms": 100},
    "temperature": {"temperature": 40},
    "release": {"rated_voltage": 24, "volts": 24, "nominal_gap": 0.25, "gap": 0.25},
    "pull_in": {"rated_voltage": 24, "volts": 24, "nominal_gap": 0.25, "gap": 0.25},
    "stop": {"inertia": 0.01, "speed": 3000, "torque": 10},
    "holding": {"load_torque": 1, "rated_torque": 10},
}


@pytest.mark.parametrize("name", sorted(EVALUATORS))
def test_every_evaluator_returns_a_registered_verdict(name):
    v = evaluate(name, SAMPLES[name])
    assert v.evaluator == name
    assert v.verdict in EVALUATORS[name].verdicts
    assert v.figures and v.summary and "\n" not in v.summary
    assert all(math.isfinite(f.value) for f in v.figures.values())
    assert set(v.to_dict()) >= {"verdict", "figures"}


def test_unknown_evaluator():
    with pytest.raises(InputError, match="unknown evaluator 'coils'"):
        evaluate("coils", {})
