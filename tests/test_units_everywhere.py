"""The technician's preferred units beyond the screen: the repair log and the calculators.

Under the inch preference the Markdown and HTML logs of ``diagnose report``
show each length of a reading in inches with millimetres beside it, and
``diagnose calc`` (and the shell's ``calc``) reads a bare length in inches
and shows its figures the same way. Metric output is what it always was;
JSON output is data and carries no preference. Every conversion is checked
against pint.
"""

from __future__ import annotations

import io
import json
import re

import html5lib
import pint
import pytest
from rich.console import Console

from diagnose.cli import main
from diagnose.errors import InputError
from diagnose.journal.record import session_record
from diagnose.journal.report import render_report
from diagnose.journal.store import Journal
from diagnose.physics.verdict import format_number

UREG = pint.UnitRegistry()

# The shipped pack's air gap: nominal 0.3 mm, smallest 0.15 mm, wear limit 0.6 mm (its
# defaults, invented for the demo pack). The readings are invented too.
NAMEPLATE = "nameplate: {nominal_gap: 0.3 mm, min_gap: 0.15 mm, max_gap: 0.6 mm}\n" \
            "complaints: [will_not_release]\n"
IN_INCHES = "0.028 0.027 0.029 in"  # a technician who measured in inches, unit typed
IN_MM = "0.46 0.48 0.43"  # bare, recorded under the metric preference: millimetres
#: " (0.71 mm)" beside an inch figure, in a table cell.
BESIDE = re.compile(r" \((\d+(?:\.\d+)?) mm\)")


def mm(inches: float) -> float:
    """Inches in millimetres by pint (1 in = 25.4 mm exactly, by definition: the
    international yard and pound agreement, 1959)."""
    return float(UREG.Quantity(inches, "inch").to("millimeter").magnitude)


def inches(millimetres: float) -> float:
    return float(UREG.Quantity(millimetres, "millimeter").to("inch").magnitude)


def mm_beside(millimetres: float) -> str:
    """The millimetres beside an inch figure: to a hundredth from 0.1 mm, else 2 digits."""
    if millimetres >= 0.1:
        return f"{millimetres:.2f}".rstrip("0").rstrip(".")
    return f"{float(f'{millimetres:.2g}'):g}"


def cli(capsys, *argv: str) -> str:
    code = main(list(argv))
    out, err = capsys.readouterr()
    assert code == 0, err
    return out


def record_gap(capsys, tmp_path, answer: str) -> str:
    """A session of the shipped pack with one air-gap reading, recorded by `run`: its id."""
    answers = tmp_path / "gap.yaml"
    answers.write_text(NAMEPLATE + f"steps:\n  - {{check: air_gap, answer: {answer}}}\n",
                       encoding="utf-8")
    out = cli(capsys, "run", "spring-applied-brake", "--answers", str(answers), "--json")
    return json.loads(out)["session"]


def record_of(session_id: str):
    import os

    from diagnose.kb.loader import load_model

    with Journal(os.environ["DIAGNOSE_JOURNAL"], readonly=True) as j:
        return session_record(j, session_id, load_model("spring-applied-brake"))


def rows(text: str, label: str) -> list[str]:
    """The Markdown table rows of the figure ``label`` (key readings, then the appendix)."""
    return [line for line in text.splitlines() if line.startswith(f"| {label} |")]


# --- the repair log ----------------------------------------------------------------------------


@pytest.fixture
def inch_session(capsys, tmp_path) -> str:
    return record_gap(capsys, tmp_path, IN_INCHES)


def test_the_markdown_log_shows_inches_with_millimetres_beside(capsys, inch_session):
    text = cli(capsys, "--units", "inch", "report", inch_session)
    # mean of 0.028, 0.027, 0.029 in is 0.028 in; the figures were worked out in inches
    assert rows(text, "mean gap") == [f"| mean gap | 0.028 | in ({mm_beside(mm(0.028))} mm) |"] * 2
    assert mm_beside(mm(0.028)) == "0.71"  # 0.7112 mm
    assert rows(text, "spread (largest minus smallest)") == \
        [f"| spread (largest minus smallest) | 0.002 | in ({mm_beside(mm(0.002))} mm) |"] * 2
    assert mm_beside(mm(0.002)) == "0.051"  # 0.0508 mm: two digits below 0.1 mm
    # the nameplate's 0.6 mm wear limit, which the evaluator showed in inches: 0.6 mm beside it
    assert rows(text, "largest allowed (wear limit)") == \
        [f"| largest allowed (wear limit) | {format_number(inches(0.6))} | in (0.6 mm) |"] * 2
    assert rows(text, "share of the wear reserve used")[0].endswith(" | % |")  # no length


def test_the_metric_log_is_unchanged(capsys, inch_session):
    metric = cli(capsys, "report", inch_session)
    assert rows(metric, "mean gap") == ["| mean gap | 0.028 | in |"] * 2  # as recorded
    assert not BESIDE.search(metric)
    for fmt in ("md", "html"):
        shown = cli(capsys, "report", inch_session, "--format", fmt)
        assert shown == cli(capsys, "--units", "metric", "report", inch_session, "--format", fmt)
        assert shown == render_report(record_of(inch_session), fmt)  # as before the preference
        inch = cli(capsys, "report", inch_session, "--format", fmt, "--units", "inch")
        assert inch != shown
        # the inch log is the metric one with the millimetres beside each inch figure
        assert BESIDE.sub("", inch) == shown


def test_the_html_log_shows_inches_and_stays_valid(capsys, inch_session):
    text = cli(capsys, "--units", "inch", "report", inch_session, "--format", "html")
    cell = '<td>mean gap</td><td class="num">0.028</td><td>in (0.71 mm)</td>'
    assert text.count(cell) == 2  # key readings and appendix
    parser = html5lib.HTMLParser(strict=True)
    parser.parse(text)  # raises on the first parse error
    assert not parser.errors


def test_a_reading_in_millimetres_is_shown_in_inches(capsys, tmp_path):
    sid = record_gap(capsys, tmp_path, IN_MM)
    metric = cli(capsys, "report", sid)
    mean = (0.46 + 0.48 + 0.43) / 3  # mm
    assert rows(metric, "mean gap") == [f"| mean gap | {format_number(mean)} | mm |"] * 2
    text = cli(capsys, "report", sid, "--units", "inch")
    expected = f"| mean gap | {format_number(inches(mean))} | in ({mm_beside(mean)} mm) |"
    assert expected == "| mean gap | 0.01798 | in (0.46 mm) |"  # 0.45667 mm = 0.017979 in
    assert rows(text, "mean gap") == [expected] * 2
    assert rows(text, "nominal gap") == [f"| nominal gap | {format_number(inches(0.3))} | "
                                         f"in (0.3 mm) |"] * 2
    assert "- reading: 0.46 0.48 0.43\n" in text  # what was typed stays as typed


def test_the_settings_file_applies_to_the_log(capsys, inch_session, tmp_path, monkeypatch):
    settings = tmp_path / "settings.toml"
    settings.write_text('units = "inch"\n', encoding="utf-8")
    monkeypatch.setenv("DIAGNOSE_SETTINGS", str(settings))
    assert "| mean gap | 0.028 | in (0.71 mm) |" in cli(capsys, "report", inch_session)
    assert "| mean gap | 0.028 | in |" in cli(capsys, "report", inch_session, "--units", "metric")


def test_the_json_log_is_data_under_either_preference(capsys, inch_session):
    metric = cli(capsys, "report", inch_session, "--format", "json")
    assert cli(capsys, "--units", "inch", "report", inch_session, "--format", "json") == metric
    step = json.loads(metric)["steps"][0]
    assert step["figures"][0] == {"key": "mean", "label": "mean gap", "value": 0.028,
                                  "unit": "in"}
    assert "beside" not in metric


def test_an_unknown_preference_is_refused():
    with pytest.raises(InputError, match="unknown units 'imperial'"):
        render_report(None, "md", units="imperial")  # type: ignore[arg-type]


# --- diagnose calc -----------------------------------------------------------------------------

#: Three bare readings against the pack's gap, given with their unit: in inches they are
#: 0.018 in = 0.4572 mm and so on (within limits); taken as millimetres, far too small.
GAP = ["calc", "gap", "--readings", "0.018", "0.019", "0.017", "--nominal", "0.3mm",
       "--max", "0.6mm"]


def test_calc_reads_bare_numbers_as_inches_and_prints_inch_figures(capsys):
    out = cli(capsys, "--units", "inch", *GAP)
    assert "verdict: ok" in out
    mean = (0.018 + 0.019 + 0.017) / 3  # in
    assert re.search(rf"mean gap +{format_number(mean)} +in \({mm_beside(mm(mean))} mm\)", out)
    assert re.search(r"mean gap +0\.018 +in \(0\.46 mm\)", out)  # 0.4572 mm
    assert re.search(rf"largest allowed \(wear limit\) +{format_number(inches(0.6))} "
                     rf"+in \(0\.6 mm\)", out)
    assert "(0.46 mm)" not in cli(capsys, *GAP)
    assert "verdict: too small" in cli(capsys, *GAP)  # metric: 0.018 mm


def test_calc_json_is_the_verdict_as_worked_out(capsys):
    inch = json.loads(cli(capsys, "--units", "inch", *GAP, "--json"))
    typed = [v + "in" if v[0].isdigit() and not v.endswith("mm") else v for v in GAP]
    assert typed[2:6] == ["--readings", "0.018in", "0.019in", "0.017in"]
    # bare numbers under the inch preference are the same readings typed in inches
    assert inch == json.loads(cli(capsys, *typed, "--json"))
    assert inch["verdict"] == "ok"
    assert inch["figures"]["mean"] == {"label": "mean gap", "value": 0.018, "unit": "in"}
    assert inch["figures"]["max"]["value"] == pytest.approx(inches(0.6), rel=1e-5)
    metric = json.loads(cli(capsys, *GAP, "--json"))
    assert metric["verdict"] == "too_small" and metric["figures"]["mean"]["unit"] == "mm"


def test_calc_takes_a_unit_as_typed_and_leaves_other_quantities(capsys):
    out = cli(capsys, "--units", "inch", "calc", "gap", "--readings", "0.46", "0.48", "0.43",
              "mm", "--nominal", "0.3", "mm", "--max", "0.6mm")
    mean = (0.46 + 0.48 + 0.43) / 3  # mm, as typed
    assert re.search(rf"mean gap +{format_number(inches(mean))} +in \(0\.46 mm\)", out)
    out = cli(capsys, "--units", "inch", "calc", "coil", "--rated-voltage", "24",
              "--rated-power", "20", "--ohms", "28.8")
    assert "verdict: ok" in out and " in " not in out  # volts and ohms: no inches about them


def test_calc_runout_shows_millimetres_once(capsys):
    out = cli(capsys, "--units", "inch", "calc", "runout", "--readings", "0", "0.004", "0.007",
              "0.002", "--limit", "0.004")
    # TIR 0.007 in = 0.1778 mm; its repeat in mm (tir_mm) is the figure beside it now
    assert re.search(rf"total indicator runout +0\.007 +in \({mm_beside(mm(0.007))} mm\)", out)
    assert "in mm" not in out
    assert "verdict: out of tolerance" in out


def test_the_shells_calc_uses_the_preference(tmp_path, monkeypatch):
    from diagnose.shell.calc import run_calc

    def shown(*args) -> str:
        con = Console(file=io.StringIO(), width=80, color_system=None)
        con.print(run_calc(*args))
        return con.file.getvalue()

    line = " ".join(GAP[1:])
    assert re.search(r"mean gap +0\.018 +in \(0\.46 mm\)", shown(line, "inch"))
    assert "verdict: too small" in shown(line, "metric")
    assert "verdict: too small" in shown(line)  # no settings file: metric
    settings = tmp_path / "settings.toml"
    settings.write_text('units = "inch"\n', encoding="utf-8")
    monkeypatch.setenv("DIAGNOSE_SETTINGS", str(settings))
    assert "verdict: ok" in shown(line)
    assert "verdict: too small" in shown(line, "metric")  # the session's own preference wins
