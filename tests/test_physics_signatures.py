"""Physical signatures: sharper supply verdicts (half_wave, coil_mismatch); off_voltage."""

from __future__ import annotations

import io
import json
import math
import subprocess
import sys

import pytest

from diagnose.cli import main
from diagnose.errors import InputError
from diagnose.physics import EVALUATORS, evaluate
from diagnose.physics.offvoltage import judge_off_voltage
from diagnose.physics.rectifier import MEAN_PER_VRMS, PATTERN_TOLERANCE
from diagnose.physics.registry import EvaluatorSpec, InputSpec, Signature
from diagnose.physics.soft import soft_verdict
from diagnose.physics.supply import judge_supply, judge_supply_signature
from diagnose.physics.verdict import GOOD_VERDICTS, Verdict

SUPPLY = EVALUATORS["supply"]
# a 205 V coil behind a bridge rectifier on 230 V AC: 0.9003 x 230 V = 207.1 V (textbook)
BRIDGE = {"rated_voltage": 205, "source": "rectified", "ac_volts": 230, "rectifier_type": "bridge"}
UNKNOWN = "unknown"


# --- the rectifier constants, checked independently ------------------------------------------

def test_rectifier_means_textbook_and_numeric():
    import numpy as np

    # Rashid, Power Electronics, diode rectifiers (textbook): half-wave mean
    # sqrt(2)/pi x Vrms = 0.4502 Vrms, full-wave (bridge) 2 sqrt(2)/pi x Vrms = 0.9003 Vrms
    assert MEAN_PER_VRMS["half-wave"] == pytest.approx(0.4502, abs=1e-4)
    assert MEAN_PER_VRMS["bridge"] == pytest.approx(0.9003, abs=1e-4)
    # independent reference: average the rectified sine of peak sqrt(2) (1 V rms) over a period
    t = np.linspace(0.0, 2 * np.pi, 200_000, endpoint=False)
    wave = math.sqrt(2) * np.sin(t)
    assert float(np.mean(np.maximum(wave, 0.0))) == pytest.approx(MEAN_PER_VRMS["half-wave"],
                                                                   rel=1e-6)
    assert float(np.mean(np.abs(wave))) == pytest.approx(MEAN_PER_VRMS["bridge"], rel=1e-6)
    assert PATTERN_TOLERANCE == 0.15  # the rectifier module's pattern tolerance, reused here


# --- supply: signatures ----------------------------------------------------------------------

SUPPLY_CASES = [
    # (values, verdict, fallback)
    # textbook: half-wave mean 0.4502 x 230 V = 103.5 V; 103 V is within 15 % of it
    ({**BRIDGE, "volts": 103}, "half_wave", "low"),
    ({**BRIDGE, "volts": "-103 V"}, "half_wave", "low"),  # leads either way, polarity unknown
    # 90 V is 13 % under 103.5 V (within 15 %); 87 V is 16 % under (outside)
    ({**BRIDGE, "volts": 90}, "half_wave", "low"),
    ({**BRIDGE, "volts": 87}, "low", ""),
    # a half-wave unit fitted: 103 V is its normal output, no open-diode signature
    ({**BRIDGE, "rectifier_type": "half-wave", "volts": 103}, "low", ""),
    # the AC volts not known: only the plain verdict
    ({**BRIDGE, "ac_volts": UNKNOWN, "volts": 103}, "low", ""),
    ({**{k: v for k, v in BRIDGE.items() if k != "ac_volts"}, "volts": 103}, "low", ""),
    ({**BRIDGE, "rectifier_type": UNKNOWN, "volts": 103}, "low", ""),
    # not a rectified supply: a bridge and AC volts alone do not make the signature
    ({**BRIDGE, "source": "converter", "volts": 103}, "low", ""),
    # in band: IEC 60204-1 4.3.3 (from memory) 0.9..1.1 x 205 V = 184.5..225.5 V
    ({**BRIDGE, "volts": 207}, "ok", ""),
    # absent first: below 10 % of rated (this tool's threshold)
    ({**BRIDGE, "volts": 10}, "absent", ""),
    # a 96 V coil read at 23.8 V on the machine's 24 V supply: 23.8 / 24 = 99 % (in band)
    ({"rated_voltage": 96, "volts": 23.8, "supply_voltage": 24}, "coil_mismatch", "low"),
    # a 24 V coil read at 205 V on a 205 V supply: the other way round
    ({"rated_voltage": 24, "volts": 205, "supply_voltage": 205}, "coil_mismatch", "high"),
    # the supply is the coil's voltage: a plain low, no mismatch
    ({"rated_voltage": 24, "volts": 21, "supply_voltage": 24}, "low", ""),
    # the supply is within the coil's band (96 V x 0.95): no mismatch either
    ({"rated_voltage": 96, "volts": 23.8, "supply_voltage": 91}, "low", ""),
    # 12 V fits neither the 96 V coil nor the 24 V supply (50 % of it)
    ({"rated_voltage": 96, "volts": 12, "supply_voltage": 24}, "low", ""),
    ({"rated_voltage": 96, "volts": 23.8, "supply_voltage": UNKNOWN}, "low", ""),
    # reversed before any signature, when polarity is known
    ({"rated_voltage": 96, "volts": -23.8, "supply_voltage": 24, "polarity_known": True},
     "reversed", ""),
    # in band of the coil although the supply differs: ok
    ({"rated_voltage": 24, "volts": 24, "supply_voltage": 96}, "ok", ""),
]


@pytest.mark.parametrize(("values", "verdict", "fallback"), SUPPLY_CASES)
def test_supply_signatures(values, verdict, fallback):
    v = evaluate("supply", values)
    assert (v.verdict, v.fallback) == (verdict, fallback)
    given = [k for k, raw in values.items() if raw != UNKNOWN]
    assert v.verdict in SUPPLY.verdicts_for(given)
    sig = SUPPLY.signature(v.verdict)
    if sig is None:
        assert v.verdict in SUPPLY.verdicts and "fallback" not in v.to_dict()
    else:
        assert v.fallback in SUPPLY.verdicts  # a signature always names its plain verdict
        assert sig.fallback in (None, v.fallback)  # None: whichever plain verdict it got
        assert v.to_dict()["fallback"] == v.fallback


def test_half_wave_figures_and_summary():
    v = evaluate("supply", {**BRIDGE, "volts": "103 V"})
    assert v.figures["half_wave_mean"].value == pytest.approx(103.54, abs=0.01)  # 0.4502 x 230
    assert v.figures["bridge_mean"].value == pytest.approx(207.07, abs=0.01)  # 0.9003 x 230
    assert v.figures["ac_volts"].value == 230
    assert "looks like half-wave output behind a bridge rectifier: an open diode" in v.summary
    assert v.summary.startswith("103 V is 50% of rated 205 V: low;")  # 103 / 205 = 50.2 %
    assert "\n" not in v.summary


def test_coil_mismatch_figures_and_summary():
    v = evaluate("supply", {"rated_voltage": "96 V", "volts": "23.8 V", "supply_voltage": "24 V"})
    assert v.figures["supply_nominal"].value == 24
    assert v.figures["supply_ratio"].value == pytest.approx(99.17, abs=0.01)  # 23.8 / 24
    assert ("matches the machine's 24 V supply, but the coil is labelled 96 V: "
            "a coil for another voltage") in v.summary


PLAIN = [
    {"rated_voltage": 24, "volts": 21.1},
    {"rated_voltage": 24, "volts": 24},
    {"rated_voltage": 24, "volts": 27},
    {"rated_voltage": 24, "volts": 1},
    {"rated_voltage": 24, "volts": -24, "polarity_known": True},
    {"rated_voltage": 205, "volts": 103, "source": "rectified"},
    {"rated_voltage": 24, "volts": 22, "source": "battery", "window_low": 0.95},
]


@pytest.mark.parametrize("values", PLAIN)
def test_without_signature_inputs_nothing_changes(values):
    plain = evaluate("supply", values)
    unknown = evaluate("supply", {**values, "supply_voltage": UNKNOWN, "ac_volts": " Unknown ",
                                  "rectifier_type": UNKNOWN})
    assert unknown == plain
    assert plain.fallback == "" and "fallback" not in plain.to_dict()
    assert list(plain.figures) == ["measured", "rated", "ratio", "band_low", "band_high"]
    ratio = abs(values["volts"]) / values["rated_voltage"]
    band = (0.95, 1.15) if "window_low" in values else (0.9, 1.1)
    assert plain.verdict == judge_supply(values["rated_voltage"], values["volts"], band,
                                         values.get("polarity_known", False))
    assert plain.summary.startswith(f"{values['volts']:g} V is {ratio:.0%} of rated")


def test_plain_summary_text_unchanged():
    v = evaluate("supply", {"rated_voltage": 24, "volts": 21})
    assert v.summary == ("21 V is 88% of rated 24 V: low "
                         "(allowed 90% to 110% for a converter supply)")


def test_judge_supply_signature_is_pure_and_judge_supply_unchanged():
    assert judge_supply(205, 103, (0.9, 1.1)) == "low"
    assert judge_supply_signature(205, 103, (0.9, 1.1), source="rectified", ac_volts=230,
                                  rectifier_type="bridge") == ("half_wave", "low")
    assert judge_supply_signature(205, 103, (0.9, 1.1)) == ("low", "")


def test_every_supply_verdict_is_declared_for_its_inputs():
    given_sets = [BRIDGE, {**BRIDGE, "supply_voltage": 24}, {"rated_voltage": 96,
                                                                "supply_voltage": 24}]
    for values in given_sets:
        allowed = SUPPLY.verdicts_for([*values, "volts"])
        for tenth in range(-2600, 2600, 7):
            v = evaluate("supply", {**values, "volts": tenth / 10})
            assert v.verdict in allowed
            assert not v.fallback or v.fallback in SUPPLY.verdicts


# --- off_voltage -----------------------------------------------------------------------------

OFF_CASES = [
    # common practice thresholds: off below 5 % of rated, present at 50 % of rated and above
    (0.3, "off"),  # 1.25 % of 24 V
    (4, "residual"),  # 16.7 %
    (23.6, "present"),  # 98 %
    (-0.3, "off"),
    (-4, "residual"),
    ("-23.6 V", "present"),
    (0, "off"),
    (1.2, "residual"),  # exactly 5 %: no longer "below" the off limit
    (11.9, "residual"),
    (12, "present"),  # exactly 50 %: "at or above"
    ("3.1V", "residual"),
    ("3100 mV", "residual"),
]


@pytest.mark.parametrize(("volts", "verdict"), OFF_CASES)
def test_off_voltage_verdicts(volts, verdict):
    v = evaluate("off_voltage", {"rated_voltage": "24 V", "volts": volts})
    assert v.verdict == verdict and v.fallback == ""
    assert v.verdict in EVALUATORS["off_voltage"].verdicts


def test_off_voltage_figures_and_summaries():
    present = evaluate("off_voltage", {"rated_voltage": 24, "volts": 23.6})
    assert present.summary == ("with the coil commanded off 23.6 V is 98% of rated 24 V: the "
                               "supply is still on the coil (a welded contact or wiring past "
                               "the switch)")
    assert present.figures["ratio"].value == pytest.approx(98.33, abs=0.01)  # 23.6 / 24
    assert present.figures["off_limit"].value == pytest.approx(1.2)  # 0.05 x 24 V
    assert present.figures["present_limit"].value == pytest.approx(12)  # 0.5 x 24 V
    assert list(present.figures) == ["measured", "rated", "ratio", "off_limit", "present_limit"]
    residual = evaluate("off_voltage", {"rated_voltage": 24, "volts": 4})
    assert "leakage or induced voltage that can keep the armature pulled in" in residual.summary
    off = evaluate("off_voltage", {"rated_voltage": 24, "volts": 0.3})
    assert off.summary.endswith("off, as it should be")
    assert "off" in GOOD_VERDICTS and "residual" not in GOOD_VERDICTS


def test_off_voltage_shares_set_by_a_pack():
    values = {"rated_voltage": 24, "volts": 4, "off_share": 0.2, "present_share": "90 %"}
    assert evaluate("off_voltage", values).verdict == "off"  # 16.7 % < 20 %
    assert judge_off_voltage(24, 21, 0.2, 0.9) == "residual"  # 87.5 % < 90 %


# --- bad inputs ------------------------------------------------------------------------------

BAD = [
    ("off_voltage", {"rated_voltage": 0, "volts": 1}, "rated_voltage", "above zero"),
    ("off_voltage", {"rated_voltage": 24, "volts": "abc"}, "volts", "voltage"),
    ("off_voltage", {"rated_voltage": 24}, "volts", "missing"),
    ("off_voltage", {"rated_voltage": 24, "volts": 1, "off_share": 0.6}, "off_share", "below"),
    ("off_voltage", {"rated_voltage": 24, "volts": 1, "present_share": 1.5}, "present_share",
     "between 0 and 1"),
    ("off_voltage", {"rated_voltage": 24, "volts": 1, "off_share": 0}, "off_share",
     "above zero"),
    ("supply", {**BRIDGE, "volts": 103, "ac_volts": 0}, "ac_volts", "above zero"),
    ("supply", {**BRIDGE, "volts": 103, "ac_volts": "12 kg"}, "ac_volts", "mass"),
    ("supply", {**BRIDGE, "volts": 103, "rectifier_type": "full"}, "rectifier_type",
     "unknown choice"),
    ("supply", {"rated_voltage": 96, "volts": 23.8, "supply_voltage": "-24 V"}, "supply_voltage",
     "negative"),
    ("supply", {"rated_voltage": 96, "volts": 23.8, "supply_voltage": "maybe"}, "supply_voltage",
     "voltage"),
]


@pytest.mark.parametrize(("name", "values", "field", "needle"), BAD)
def test_bad_inputs_one_line(name, values, field, needle):
    with pytest.raises(InputError) as info:
        evaluate(name, values)
    assert info.value.field == field
    assert needle in str(info.value) and "\n" not in str(info.value)


def test_bad_input_on_the_command_line_is_one_line(capsys):
    status = main(["calc", "off_voltage", "--rated-voltage", "24V", "--volts", "1V",
                   "--off-share", "0.6"])
    captured = capsys.readouterr()
    assert status == 2 and captured.out == ""
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1 and "off_share" in lines[0] and "Traceback" not in captured.err


# --- the registry ----------------------------------------------------------------------------

@pytest.mark.parametrize(("given", "expected"), [
    (["rated_voltage", "volts"], ()),
    (["rated_voltage", "volts", "ac_volts"], ()),
    (["rated_voltage", "volts", "rectifier_type", "ac_volts"], ("half_wave",)),
    (["rated_voltage", "volts", "supply_voltage"], ("coil_mismatch",)),
    # declaration order, whatever order the inputs are given in
    (["supply_voltage", "rectifier_type", "ac_volts"], ("half_wave", "coil_mismatch")),
    ((n for n in ("ac_volts", "rectifier_type")), ("half_wave",)),  # any iterable
])
def test_verdicts_for(given, expected):
    assert SUPPLY.verdicts_for(given) == ("absent", "low", "ok", "high", "reversed") + expected


def test_registry_signatures_declared_consistently():
    assert SUPPLY.verdicts == ("absent", "low", "ok", "high", "reversed")  # unchanged
    assert SUPPLY.all_verdicts == SUPPLY.verdicts + ("half_wave", "coil_mismatch")
    assert SUPPLY.signature("half_wave") == Signature(
        "half_wave", ("ac_volts", "rectifier_type"), "low", SUPPLY.signature("half_wave").help)
    assert SUPPLY.signature("coil_mismatch").fallback is None
    assert SUPPLY.signature("low") is None
    rectifier_type = SUPPLY.input("rectifier_type")
    assert rectifier_type.kind == "choice" and rectifier_type.choices == ("half-wave", "bridge")
    assert not rectifier_type.required and rectifier_type.default is None
    off = EVALUATORS["off_voltage"]
    assert off.verdicts == ("off", "residual", "present") and off.reading == "volts"
    assert off.input("off_share").default == 0.05 and off.input("present_share").default == 0.5
    for spec in EVALUATORS.values():
        names = {i.name for i in spec.inputs}
        assert spec.verdicts_for(names) == spec.all_verdicts
        for sig in spec.signatures:
            assert sig.name not in spec.verdicts and sig.help
            assert sig.fallback is None or sig.fallback in spec.verdicts
            for need in sig.needs:
                assert need in names and not spec.input(need).required
        if not spec.signatures:
            assert spec.verdicts_for(names) == spec.verdicts


def test_positional_spec_construction_still_works():
    spec = EvaluatorSpec("x", "X", (InputSpec("a", "a"),), ("ok",), "a", "m:f")
    assert spec.signatures == () and spec.all_verdicts == ("ok",)
    assert spec.verdicts_for(["a"]) == ("ok",)


# --- verdict and soft evidence ---------------------------------------------------------------

def test_verdict_fallback_in_dict_and_on_screen():
    from rich.console import Console

    v = evaluate("supply", {**BRIDGE, "volts": 103})
    assert v.to_dict()["fallback"] == "low"
    assert "fallback" not in Verdict("supply", "low").to_dict()
    from diagnose.views import VerdictView

    console = Console(file=io.StringIO(), width=80, color_system=None)
    console.print(VerdictView(v))
    out = console.file.getvalue()
    assert "verdict: half wave" in out and "plain verdict: low" in out


def test_soft_signature_at_the_reading_is_hard():
    v = soft_verdict("supply", {**BRIDGE, "volts": 103}, 0.05)
    assert (v.verdict, v.fallback, v.weights) == ("half_wave", "low", {})


@pytest.mark.parametrize("volts", [85, 87, 88, 89, 91, 119, 121])
def test_soft_never_mixes_a_signature_with_its_fallback(volts):
    # the half-wave pattern ends at 0.85 x 103.5 V = 88.0 V (15 %, rectifier module)
    v = soft_verdict("supply", {**BRIDGE, "volts": volts}, 0.05)
    assert not (set(v.weights) & {"half_wave", "coil_mismatch"})
    assert v.weights == {} or set(v.weights) <= set(SUPPLY.verdicts)


def test_soft_off_voltage_near_its_edges():
    # off ends at 5 % of 24 V = 1.2 V; present starts at 50 % = 12 V (common practice)
    assert set(soft_verdict("off_voltage", {"rated_voltage": 24, "volts": 1.2}, 0.05).weights) \
        == {"off", "residual"}
    assert set(soft_verdict("off_voltage", {"rated_voltage": 24, "volts": -12}, 0.05).weights) \
        == {"residual", "present"}
    assert soft_verdict("off_voltage", {"rated_voltage": 24, "volts": 23.6}, 0.05).weights == {}


# --- the calc command and the shell's inline calc --------------------------------------------

OFF_LINE = ["off_voltage", "--rated-voltage", "24", "--volts", "3.1"]
HALF_WAVE_LINE = ["supply", "--rated-voltage", "205", "--volts", "103", "--source", "rectified",
                  "--ac-volts", "230", "--rectifier-type", "bridge"]
MISMATCH_LINE = ["supply", "--rated-voltage", "96V", "--volts", "23.8", "V",
                 "--supply-voltage", "24V"]


@pytest.mark.parametrize(("argv", "verdict", "fallback"), [
    (OFF_LINE, "residual", None),  # 3.1 / 24 = 12.9 %, between 5 % and 50 % (common practice)
    (HALF_WAVE_LINE, "half_wave", "low"),  # 103 V vs 0.4502 x 230 V = 103.5 V (textbook)
    (MISMATCH_LINE, "coil_mismatch", "low"),  # 23.8 / 24 = 99 % of the supply
])
def test_calc_json(capsys, argv, verdict, fallback):
    assert main(["calc", *argv, "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["verdict"] == verdict and data.get("fallback") == fallback


@pytest.mark.parametrize(("argv", "needle"), [
    (OFF_LINE, "verdict: residual"),
    (HALF_WAVE_LINE, "verdict: half wave"),
])
def test_calc_readable(capsys, argv, needle):
    assert main(["calc", *argv]) == 0
    assert needle in capsys.readouterr().out


def test_calc_installed_command():
    out = subprocess.run([sys.executable, "-m", "diagnose", "calc", *HALF_WAVE_LINE],
                         capture_output=True, text=True, timeout=60, check=False)
    assert out.returncode == 0 and out.stderr == ""
    assert "verdict: half wave" in out.stdout and "open diode" in out.stdout


def test_calc_help_lists_signatures(capsys):
    with pytest.raises(SystemExit):
        main(["calc", "supply", "--help"])
    out = capsys.readouterr().out
    assert "--supply-voltage, also coil_mismatch" in " ".join(out.split())
    assert "--rectifier-type {half-wave,bridge}" in out


def test_shell_inline_calc():
    from rich.console import Console

    from diagnose.shell.calc import run_calc

    console = Console(file=io.StringIO(), width=80, color_system=None)
    console.print(run_calc(" ".join(OFF_LINE)))
    console.print(run_calc(" ".join(HALF_WAVE_LINE)))
    out = console.file.getvalue()
    assert "verdict: residual" in out and "verdict: half wave" in out
