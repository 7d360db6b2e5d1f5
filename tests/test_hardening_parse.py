"""Hostile packs, answers files and readings end fast, in one line, without a traceback.

Each hostile input runs the installed program in a subprocess under resource
limits (tests/hostile.py: 200 MB of address space, 5 s of CPU) and must end
within 2 s of wall time and use less than 2 s of CPU, leaving the journal it
was given byte for byte as it was. On a machine busier than one task per core
the wall-time bound grows with the load average, so that other work on the
machine cannot fail the test; the CPU bound does not. In-process tests pin
the limits of the YAML reader and of the unit grammar; two bounded fuzz tests
check that nothing but the project's own errors comes out of the unit parser
and the answers-file reader.
"""

from __future__ import annotations

import math
import re
import shutil
import subprocess
import time
from pathlib import Path

import pytest
import yaml
from hostile import WALL_SECONDS, diagnose, one_line_error
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from packdata import units_in_use

from diagnose.commands.run import read_answers
from diagnose.errors import DiagnoseError, InputError
from diagnose.kb.locate import scan
from diagnose.kb.yamlpos import read_text, read_yaml
from diagnose.physics import units
from diagnose.physics.inputs import MAX_READINGS, split_readings

ROOT = Path(__file__).parent.parent
MINI = ROOT / "tests" / "fixtures" / "mini"
SHIPPED = ROOT / "knowledge"

# Nine levels of nine aliases: 9**9 (387 million) strings once expanded, in 435 bytes.
ALIAS_BOMB = "".join(
    f"{name}: &{name} [{', '.join([f'*{prev}'] * 9 if prev else ['lol'] * 9)}]\n"
    for prev, name in zip([""] + list("abcdefgh"), "abcdefghi")
)
TOWER = "1 ohm**(9**9**9)"


@pytest.fixture
def pack(tmp_path: Path) -> Path:
    """A fresh copy of the mini pack to spoil."""
    folder = tmp_path / "spoilt"
    shutil.copytree(MINI, folder)
    return folder


def _answers(tmp_path: Path, text: str) -> str:
    path = tmp_path / "answers.yaml"
    path.write_text(text, encoding="utf-8")
    return str(path)


def _lint_problem(proc: subprocess.CompletedProcess[str], needle: str) -> str:
    """Lint ran, failed, and printed the refused construct in one short line."""
    assert proc.returncode == 1, (proc.returncode, proc.stdout[-500:], proc.stderr[-500:])
    assert "Traceback" not in proc.stderr and "Traceback" not in proc.stdout
    lines = [line for line in proc.stdout.splitlines() if ": error: " in line and needle in line]
    assert len(lines) == 1, proc.stdout[:1000]
    assert len(proc.stdout) < 1000, f"lint printed {len(proc.stdout)} characters"
    return lines[0]


# --- hostile inputs, each in a limited subprocess ------------------------------------------------


def test_alias_bomb_in_an_answers_file(tmp_path):
    assert len(ALIAS_BOMB.encode()) < 500
    path = _answers(tmp_path, ALIAS_BOMB)
    err = one_line_error(diagnose("run", str(MINI), "--answers", path, "--no-journal"), "anchor")
    assert f"{path}:1:4:" in err  # file:line:col of the first anchor


def test_alias_levels_in_a_pack(pack):
    with open(pack / "pack.yaml", "a", encoding="utf-8") as fh:
        fh.write("\nx_notes: &n [a, b, c, d, e, f, g, h]\n"
                 "y_notes: &m [*n, *n, *n, *n, *n, *n, *n, *n]\n"
                 "z_notes: [*m, *m, *m, *m, *m, *m, *m, *m]\n")
    line = _lint_problem(diagnose("kb", "lint", str(pack)), "anchor")
    assert "pack.yaml:" in line and "[yaml]" in line


def test_unit_tower_in_calc():
    proc = diagnose("calc", "coil", "--rated-voltage", "24", "--rated-power", "20",
                     "--ohms", TOWER)
    err = one_line_error(proc, "power is a whole number")
    assert "ohms" in err


def test_unit_tower_in_an_answers_file_reading(tmp_path):
    path = _answers(tmp_path, "nameplate: {rated_voltage: 24 V, rated_power: 20 W}\n"
                              "complaints: [will_not_release]\n"
                              f"steps:\n  - {{check: coil_resistance, answer: '{TOWER}'}}\n")
    err = one_line_error(diagnose("run", str(MINI), "--answers", path, "--no-journal"),
                          "power is a whole number")
    assert "step 1" in err


def test_long_integer_in_an_answers_file(tmp_path):
    path = _answers(tmp_path, f"nameplate:\n  rated_voltage: {'9' * 5000}\n")
    err = one_line_error(diagnose("run", str(MINI), "--answers", path, "--no-journal"),
                          "5,000 digits")
    assert f"{path}:2:18:" in err


def test_long_integer_in_a_pack(pack):
    with open(pack / "pack.yaml", "a", encoding="utf-8") as fh:
        fh.write(f"\nleak: {'9' * 5000}\n")
    line = _lint_problem(diagnose("kb", "lint", str(pack)), "5,000 digits")
    assert "pack.yaml:" in line


def test_deeply_nested_manifest(pack):
    (pack / "pack.yaml").write_text("pack: deep\nx: " + "[" * 10000 + "\n", encoding="utf-8")
    line = _lint_problem(diagnose("kb", "lint", str(pack)), "nest")
    assert "pack.yaml:2:" in line
    one_line_error(diagnose("kb", "show", str(pack)), "nest", code=1)


def test_five_megabyte_reading_in_an_answers_file(tmp_path):
    path = _answers(tmp_path, "steps:\n  - check: coil_resistance\n    answer: '"
                              + "9" * 5_000_000 + " ohm'\n")
    err = one_line_error(diagnose("run", str(MINI), "--answers", path, "--no-journal"),
                          "file too large")
    assert "1,000,000 bytes" in err


def test_long_reading_on_the_command_line_is_cut_in_the_message():
    proc = diagnose("calc", "coil", "--rated-voltage", "24", "--rated-power", "20",
                     "--ohms", "9" * 100_000 + " ohm")
    err = one_line_error(proc, "(100004 characters)")
    assert "too long" in err


def test_kb_list_with_a_broken_manifest_beside_good_packs(tmp_path):
    shutil.copytree(MINI, tmp_path / "good")
    (tmp_path / "deep").mkdir()
    (tmp_path / "deep" / "pack.yaml").write_text("pack: deep\nx: " + "[" * 10000 + "\n")
    (tmp_path / "digits").mkdir()
    (tmp_path / "digits" / "pack.yaml").write_text(f"pack: {'9' * 5000}\n")
    proc = diagnose("--packs", str(tmp_path), "kb", "list")
    assert proc.returncode == 0 and "Traceback" not in proc.stderr, proc.stderr[-500:]
    listed = dict(line.split("\t") for line in proc.stdout.splitlines())
    assert Path(listed["mini-brake"]).name == "good"
    assert {"electrical-supply", "spring-applied-brake", "permanent-magnet-brake"} <= set(listed)
    # the library says which manifests are broken, one line each, with the place
    found, problems = scan([str(tmp_path)])
    assert "mini-brake" in found
    shown = sorted(str(p) for p in problems)
    assert len(shown) == 2 and all("\n" not in s for s in shown)
    assert "deep/pack.yaml:" in shown[0] and "nest" in shown[0]
    assert "digits/pack.yaml:1:7:" in shown[1] and "5,000 digits" in shown[1]


# --- the YAML reader's limits, in process --------------------------------------------------------


@pytest.mark.parametrize(("text", "needle"), [
    ("a: &x 1\n", "anchor &x"),
    ("a: 1\nb: *x\n", "alias *x"),  # an alias to nothing is refused as an alias
    ("base: &b {k: 1}\nother:\n  <<: *b\n", "anchor &b"),
    ("n: " + "1" * 31 + "\n", "31 digits"),
    ("n: -0x" + "f" * 40 + "\n", "digits"),
    ("n: !!int abc\n", "not a valid int"),
    ("n: !!int ''\n", "not a valid int"),
    ("n: !!float abc\n", "not a valid float"),
    ("n: !!bool maybe\n", "not a valid bool"),
    ("when: 2001-13-45\n", "not a valid timestamp"),
    ("x:\n" + "".join("  " * i + "- \n" for i in range(1, 80)), "nested too deeply"),
    ("[" + "1, " * 200_001 + "]\n", "too many values"),
])
def test_read_yaml_refuses_before_building(text, needle):
    doc, problems = read_yaml(text, "f.yaml")
    assert doc is None and len(problems) == 1
    message = str(problems[0])
    assert needle in message and message.startswith("f.yaml:") and "\n" not in message


def test_read_yaml_keeps_what_packs_use():
    text = ("n: " + "9" * 30 + "\nf: 1.5e3\nb: true\ns: yes\nd: 2024-01-31\nq: !!str 12\n"
            "deep:" + "".join("\n" + "  " * i + "- " for i in range(1, 40)) + "end\n")
    doc, problems = read_yaml(text, "f.yaml")
    assert doc is not None and not problems
    assert doc.data["n"] == int("9" * 30) and doc.data["s"] == "yes" and doc.data["q"] == "12"


@pytest.mark.parametrize(("text", "needle"), [
    ("1: a\nb: c\n", "unknown key 1"),  # keys of two types cannot be sorted
    ("x" * 100 + ": 1\n", "characters)"),
    ("end: " + "y" * 100 + "\n", "characters)"),
])
def test_answers_file_messages_stay_short(tmp_path, text, needle):
    with pytest.raises(InputError, match=re.escape(needle)) as info:
        read_answers(_answers(tmp_path, text))
    assert len(str(info.value)) < 300


def test_read_text_refuses_a_file_over_its_limit(tmp_path):
    path = tmp_path / "big.yaml"
    path.write_text("x" * 101)
    with pytest.raises(OSError, match=r"file too large \(101 bytes; at most 100 bytes"):
        read_text(path, 100)
    assert read_text(path, 101) == "x" * 101


# --- the unit grammar, in process ----------------------------------------------------------------


def _units_in_use() -> set[str]:
    """Every unit the registry and the shipped and test packs name, and their default values."""
    return units_in_use([*SHIPPED.glob("*/*.yaml"), *MINI.glob("*.yaml")])


@pytest.mark.parametrize("unit", sorted(_units_in_use()))
def test_every_unit_in_use_parses_as_pint_reads_it(unit):
    # pint itself is the reference: the grammar must not change what a unit means
    reference = units.registry().parse_units(units.normalize_unit(unit))
    assert units._units(unit) == reference


@pytest.mark.parametrize(("text", "expected"), [
    ("J/(kg*K)", "J / (kg * K)"),
    ("kg*m**2", "kg * m**2"),
    ("kg m2", "kg * m**2"),
    ("N·m", "N * m"),
    ("mm²", "mm**2"),
    ("s⁻¹", "s**-1"),
    ("ohm^-1", "ohm**-1"),
    ("ohm**(-1)", "ohm**-1"),
    ("1/s", "1 / s"),
    ("°C", "degC"),
    ("%", "percent"),
    ("MΩ", "MΩ"),
    ("µm", "µm"),
    ("", ""),
])
def test_the_grammar_rebuilds_what_it_reads(text, expected):
    assert units.parse_unit(text) == expected


@pytest.mark.parametrize(("text", "needle"), [
    ("ohm**(9**9**9)", "power is a whole number"),
    ("ohm**5", "power is a whole number"),
    ("ohm**-99", "power is a whole number"),
    ("ohm^x", "power is a whole number"),
    ("((((((m))))))", "nested more than 4"),
    ("ohm)", "')' without its '('"),
    ("(ohm", "'(' without its ')'"),
    ("ohm*", "missing at the end"),
    ("2 m", "expected a unit name"),
    ("m; import os", "';' is not part of a unit"),
    ("m" * 201, "longer than 200"),
])
def test_the_grammar_refuses_in_a_few_words(text, needle):
    with pytest.raises(ValueError, match=re.escape(needle)):
        units.parse_unit(text)


@pytest.mark.parametrize("text", ["OL", "ol", "O.L.", "inf", "+inf", "open", "∞", "infinity"])
def test_open_readings_still_read(text):
    assert units.parse_quantity(text, "ohm", "ohms", open_ok=True) == math.inf


@pytest.mark.parametrize(("value", "needle"), [
    (TOWER, "power is a whole number"),
    ("1e1234 ohm", "exponent has at most 3 digits"),
    ("1e999 ohm", "finite number"),
    ("9" * 5_000_000, "(5000000 characters)"),
    (10 ** 400, "finite number"),
    ("1 ohm" + " " * 150 + "x", "unknown unit"),
])
def test_hostile_readings_are_short_input_errors(value, needle):
    start = time.perf_counter()
    with pytest.raises(InputError) as info:
        units.parse_quantity(value, "ohm", "ohms")
    message = str(info.value)
    assert needle in message and info.value.field == "ohms"
    assert len(message) < 250 and "\n" not in message
    assert time.perf_counter() - start < WALL_SECONDS


def test_excerpt_cuts_long_values():
    assert units.excerpt("24 V") == "'24 V'"
    cut = units.excerpt("x" * 5_000_000)
    assert cut.endswith("... (5000000 characters)") and len(cut) < 100


def test_many_readings_are_bounded():
    with pytest.raises(InputError, match="at most 100 are read"):
        split_readings(" ".join(["0.5"] * (MAX_READINGS + 1)) + " mm", "gaps")
    with pytest.raises(InputError, match="too long"):
        split_readings("0.5 " * 1000, "gaps")
    assert len(split_readings(" ".join(["0.5"] * MAX_READINGS) + " mm")) == MAX_READINGS


# --- bounded fuzzing ----------------------------------------------------------------------------

UNIT_ALPHABET = st.sampled_from(list("0123456789.eE+-*/^() °µΩ%²³⁻¹\"'") +
                                ["ohm", "mm", "V", "degC", "kg", "m", "**", "OL", "inf", "nan",
                                 "megaohm", "J/(kg*K)", "N*m", "e999", "9**9", "\n", "\x00"])


@settings(max_examples=300, deadline=2000)
@given(st.lists(UNIT_ALPHABET, max_size=40).map("".join),
       st.sampled_from(["ohm", "mm", "degC", "", "mm**2", "J/(kg*K)", "V"]))
def test_fuzz_the_unit_parser(text, default_unit):
    for call in (lambda: units.parse_quantity(text, default_unit, "x", open_ok=True),
                 lambda: units.parse_quantity(text, default_unit, "x", negative=True),
                 lambda: split_readings(text, "x")):
        try:
            call()
        except DiagnoseError:
            pass
    assert isinstance(units.fits(text, default_unit), bool)
    assert isinstance(units.is_unit(text), bool)
    assert units.unit_of(text) is None or isinstance(units.unit_of(text), str)


YAML_ALPHABET = st.sampled_from(list("abc019 :-[]{},&*!|>'\"#%@`?\n\t") +
                                ["!!int ", "!!float ", "!!bool ", "!!timestamp ", "!!binary ",
                                 "!!set ", "!!omap ", "<<: ", "2001-13-45", "nameplate: ",
                                 "steps:\n  - ", "check: ", "answer: ", "end: ", "0x", "1e9",
                                 "9" * 40, "\n  "])
ANSWER_VALUES = st.recursive(
    st.none() | st.booleans() | st.integers() | st.floats() | st.text(max_size=20),
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=8), inner,
                                                                max_size=4),
    max_leaves=12,
)


@settings(max_examples=300, deadline=2000, suppress_health_check=[HealthCheck.too_slow])
@given(st.one_of(
    st.lists(YAML_ALPHABET, max_size=60).map("".join),
    st.text(max_size=80),
    st.dictionaries(st.sampled_from(["nameplate", "complaints", "steps", "end", "mode", "x"]),
                    ANSWER_VALUES, max_size=4).map(lambda d: yaml.safe_dump(d)),
))
def test_fuzz_the_answers_file_reader(tmp_path_factory, text):
    path = tmp_path_factory.getbasetemp() / "fuzz-answers.yaml"
    path.write_text(text, encoding="utf-8")
    try:
        data = read_answers(str(path))
    except DiagnoseError as exc:
        assert "\n" not in str(exc)
    else:
        assert isinstance(data, dict)

