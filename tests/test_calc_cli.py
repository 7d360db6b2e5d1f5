"""`diagnose calc NAME`: the done-when lines of the issue, JSON shape, bad input."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

from diagnose.cli import main
from diagnose.physics import EVALUATORS


def calc_json(capsys, *args: str) -> dict:
    assert main(["calc", *args, "--json"]) == 0
    out = capsys.readouterr().out
    return json.loads(out)


def test_coil_ok_at_40_degc(capsys):
    data = calc_json(capsys, "coil", "--rated-voltage", "24V", "--rated-power", "20W",
                     "--ohms", "31.1ohm", "--temp", "40degC")
    assert data["verdict"] == "ok"
    assert data["figures"]["expected_20"]["value"] == pytest.approx(28.8)  # V**2/P
    # annealed copper, IEC 60028: 28.8 * (1 + 0.00393 * 20)
    assert data["figures"]["expected"]["value"] == pytest.approx(31.06, abs=0.01)


@pytest.mark.parametrize(("ohms", "verdict"), [("0.4ohm", "short"), ("inf", "open"),
                                               ("OL", "open")])
def test_coil_short_and_open(capsys, ohms, verdict):
    data = calc_json(capsys, "coil", "--rated-voltage", "24V", "--rated-power", "20W",
                     "--ohms", ohms, "--temperature", "40degC")
    assert data["verdict"] == verdict


def test_rectifier_bridge_reading_half_wave(capsys):
    data = calc_json(capsys, "rectifier", "--ac-volts", "230V", "--type", "bridge",
                     "--measured-dc", "103V")
    # textbook: bridge mean 2*sqrt(2)/pi * 230 V = 207.07 V
    assert data["figures"]["expected"]["value"] == pytest.approx(207.07, abs=0.01)
    assert data["verdict"] == "half_wave"
    assert "half-wave" in data["summary"]


def test_cable_coil_as_resistor(capsys):
    data = calc_json(capsys, "cable", "--rated-voltage", "24V", "--rated-power", "20W",
                     "--length", "50m", "--area", "0.5mm2")
    figures = data["figures"]
    assert figures["coil_resistance"]["value"] == pytest.approx(28.8)  # 24**2/20
    assert figures["loop_resistance"]["value"] == pytest.approx(3.9)  # IEC 60228: 39.0 ohm/km
    # Ohm's law on the series circuit: 24 V * 3.9 / (28.8 + 3.9) = 2.862 V lost
    assert figures["drop"]["value"] == pytest.approx(2.86, abs=0.01)
    assert figures["coil_volts"]["value"] == pytest.approx(21.1, abs=0.05)  # 24 - 2.862
    assert figures["coil_supply"]["value"] == pytest.approx(88, abs=0.5)  # 21.14 / 24
    assert data["verdict"] == "too_much_drop"
    assert "low" in figures["coil_supply"]["label"] and "low at the coil" in data["summary"]


def test_cable_with_a_fixed_current(capsys):
    data = calc_json(capsys, "cable", "--current", "1A", "--rated-voltage", "24V",
                     "--length", "20", "m", "--area", "0.75", "mm2")
    assert data["figures"]["drop"]["value"] == pytest.approx(1.040)  # IEC 60228: 40 m x 26.0 ohm/km
    assert "fixed" in data["figures"]["current"]["label"]


def test_gap_worn(capsys):
    data = calc_json(capsys, "gap", "--readings", "0.62mm", "0.65mm", "0.60mm",
                     "--nominal", "0.25mm", "--max", "0.5mm")
    assert data["verdict"] == "worn"


def test_runout_in_inches(capsys):
    data = calc_json(capsys, "runout", "--readings", "0.000in", "0.004in", "0.007in", "0.002in",
                     "--limit", "0.004in")
    assert data["verdict"] == "out_of_tolerance"
    assert data["figures"]["tir"] == {"label": "total indicator runout", "value": 0.007,
                                      "unit": "in"}


def test_negative_value_with_its_unit(capsys):
    data = calc_json(capsys, "supply", "--rated-voltage", "24V", "--volts", "-24V",
                     "--polarity-known")
    assert data["verdict"] == "reversed"


def test_accuracy_gives_weights(capsys):
    data = calc_json(capsys, "coil", "--rated-voltage", "24V", "--rated-power", "20W",
                     "--ohms", "26", "--accuracy", "2%")
    assert set(data["weights"]) == {"low", "ok"}


def test_readable_output(capsys):
    assert main(["calc", "coil", "--rated-voltage", "24V", "--rated-power", "20W",
                 "--ohms", "3.2ohm"]) == 0
    out = capsys.readouterr().out
    assert "verdict: low" in out and "shorted turns" in out


SAMPLE_ARGS = {
    "coil": ["--rated-voltage", "24V", "--rated-power", "20W", "--ohms", "28.8"],
    "supply": ["--rated-voltage", "24V", "--volts", "23.5V"],
    "off_voltage": ["--rated-voltage", "24V", "--volts", "0.3V"],
    "rectifier": ["--ac-volts", "200V", "--type", "half-wave", "--measured-dc", "90V"],
    "cable": ["--current", "0.8A", "--rated-voltage", "24V", "--length", "10m", "--area", "1mm2"],
    "gap": ["--readings", "0.3", "0.3", "0.3", "--nominal", "0.25", "--max", "0.5"],
    "runout": ["--readings", "0", "0.05", "--limit", "0.1"],
    "insulation": ["--megohms", "200", "--temp", "20degC"],
    "temperature": ["--temp", "60degC"],
    "release": ["--rated-voltage", "24V", "--volts", "24V", "--nominal-gap", "0.25mm",
                "--gap", "0.3mm"],
    "pull_in": ["--rated-voltage", "24V", "--volts", "24V", "--nominal-gap", "0.25mm",
                "--gap", "0.3mm"],
    "stop": ["--inertia", "0.01", "--speed", "3000rpm", "--torque", "10"],
    "holding": ["--load-torque", "4", "--rated-torque", "10"],
}


@pytest.mark.parametrize("name", sorted(EVALUATORS))
def test_every_evaluator_has_json_verdict_and_figures(capsys, name):
    data = calc_json(capsys, name, *SAMPLE_ARGS[name])
    assert {"verdict", "figures"} <= set(data)
    assert data["verdict"] in EVALUATORS[name].verdicts


BAD = [
    (["coil", "--rated-voltage", "abc", "--rated-power", "20W", "--ohms", "3"], "rated_voltage"),
    (["coil", "--rated-voltage", "24V", "--rated-power", "20W", "--ohms", "-3ohm"], "negative"),
    (["coil", "--rated-voltage", "24V", "--rated-power", "20W", "--ohms", "nan"], "ohms"),
    (["coil", "--rated-voltage", "inf", "--rated-power", "20W", "--ohms", "3"], "infinite"),
    (["coil", "--rated-voltage", "24V", "--ohms", "3"], "rated power"),
    (["coil", "--rated-voltage", "24V", "--rated-power", "20W"], "missing"),
    (["gap", "--readings", "0.6kg", "0.6", "0.6", "--nominal", "0.25", "--max", "0.5"], "mass"),
    (["gap", "--readings", "0.6", "0.6", "--nominal", "0.25", "--max", "0.5"], "at least 3"),
    (["rectifier", "--ac-volts", "230V", "--type", "fullwave", "--measured-dc", "100V"],
     "unknown choice"),
    (["cable", "--length", "3", "bananas", "--area", "1", "--current", "1",
      "--rated-voltage", "24"], "unknown unit"),
    (["supply", "--rated-voltage", "24V", "--volts", "24V", "--bogus", "1"], "unrecognized"),
    (["calc-nothing"], "invalid choice"),
]


@pytest.mark.parametrize(("argv", "needle"), BAD)
def test_bad_input_exit_2_one_line(capsys, argv, needle):
    args = argv if argv[0] != "calc-nothing" else ["nothing"]
    try:
        status = main(["calc", *args])
    except SystemExit as exc:  # argparse's own usage errors
        status = exc.code
    captured = capsys.readouterr()
    assert status == 2
    assert captured.out == ""
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1 and needle in lines[0]


def test_installed_command_bad_input_no_traceback():
    out = subprocess.run(
        [sys.executable, "-m", "diagnose", "calc", "gap", "--readings", "0.6mm", "0.6mm",
         "--nominal", "0.25mm", "--max", "0.5mm"],
        capture_output=True, text=True, timeout=60,
    )
    assert out.returncode == 2
    lines = out.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in out.stderr
    assert lines[0].startswith("diagnose: readings: expected at least 3 readings")
