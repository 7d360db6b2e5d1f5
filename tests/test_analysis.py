"""The pack analysis as values, on screen, as JSON and as Markdown / HTML reports."""

from __future__ import annotations

import io
import json
from html.parser import HTMLParser
from pathlib import Path

import pytest
from ftmodels import check, gate, make_model
from rich.console import Console

from diagnose.cli import main
from diagnose.errors import InputError
from diagnose.reasoning import analysis as analysis_module
from diagnose.reasoning.analysis import NO_SIMULATOR, Effort, analyze, entropy_bound
from diagnose.report_analysis import render_analysis, write_analysis
from diagnose.views_reasoning import PackAnalysisView

SILENT = {"ok": 0.05, "bad": 0.95}


def _model(title_z: str = "z"):
    model = make_model(
        causes={"x": 30, "y": 10, "z": 20},
        complaints={"stuck": gate("stuck", "or", ("x", "yz")),
                    "two": gate("two", "k_of_n", ("x", "y", "z"), k=2)},
        events=[gate("yz", "or", ("y", "z"))],
        checks=[check("listen", {"x": SILENT, "y": SILENT}, where="phone"),
                check("measure", {"z": SILENT}, minutes=10)],
    )
    causes = dict(model.causes)
    from dataclasses import replace

    causes["z"] = replace(causes["z"], title=title_z)
    return replace(model, causes=causes)


@pytest.fixture
def no_simulator(monkeypatch):
    monkeypatch.setattr(analysis_module, "_simulator", lambda: None)


def test_per_complaint_figures(no_simulator):
    result = analyze(_model())
    stuck, two = result.complaints
    assert stuck.cut_sets == (("x",), ("y",), ("z",))
    assert two.cut_sets == (("x", "y"), ("x", "z"), ("y", "z"))
    # OR of independent causes: 1 - 0.97 * 0.99 * 0.98
    assert stuck.probability == pytest.approx(1 - 0.97 * 0.99 * 0.98)
    assert stuck.rare_event == pytest.approx(0.06)  # NUREG-0492: sum of q = 0.03 + 0.01 + 0.02
    assert [i.cause for i in stuck.importances] == ["x", "y", "z"]
    site = stuck.testability["site"]
    assert [g.causes for g in site.groups] == [("x", "y")]
    assert stuck.testability["phone"].undetected == ("z",)
    assert result.undetected == {"site": (), "phone": ("z",)}
    assert result.detection["phone"] == pytest.approx(40 / 60)


def test_json_is_plain_and_strict(no_simulator):
    data = json.loads(json.dumps(analyze(_model()).to_dict(), allow_nan=False))
    one = data["complaints"][0]
    assert set(one) >= {"complaint", "fault_tree", "testability", "effort", "dependency_matrix"}
    assert set(one["fault_tree"]["probability"]) == {"exact", "rare_event", "min_cut_upper_bound"}
    assert one["testability"]["site"]["ambiguity_groups"][0]["causes"] == ["x", "y"]
    assert one["effort"]["expected_minutes"] is None
    assert one["effort"]["note"] == NO_SIMULATOR
    assert one["effort"]["bound_minutes"] > 0


def test_entropy_bound():
    # priors 30, 10, 20 -> H = 1.459 bits; two-outcome checks: 1 bit each at best;
    # best rate: listen, 1 bit in 5 min; quickest repairs 30 min each
    b = entropy_bound(_model(), "stuck")
    h = -sum(p * __import__("math").log2(p) for p in (0.5, 1 / 6, 1 / 3))
    assert b["entropy_bits"] == pytest.approx(h)
    assert b["bound_checks"] == pytest.approx(h)
    assert b["bound_minutes"] == pytest.approx(5 * h + 30)


def test_effort_from_a_simulator(monkeypatch):
    def fake(model, complaint, bound, runs, unknown_rate):
        return Effort(True, expected_minutes=42.0, expected_checks=2.5, chart_minutes=60.0,
                      chart_checks=3.0, runs=runs, unknown_rate=unknown_rate,
                      escalated_when_unknown=0.75, wrong_repairs_when_unknown=0.5,
                      chart_escalated_when_unknown=0.0, chart_wrong_repairs_when_unknown=2.0,
                      **bound)

    monkeypatch.setattr(analysis_module, "_simulator", lambda: fake)
    result = analyze(_model(), complaint="stuck", runs=7)
    assert [c.complaint for c in result.complaints] == ["stuck"]
    e = result.complaints[0].effort
    assert (e.expected_minutes, e.chart_minutes, e.runs) == (42.0, 60.0, 7)
    assert e.unknown_rate == analysis_module.UNKNOWN_RATE
    md = render_analysis(result, "md")
    assert "42.0" in md
    assert '| planner (simulated) | 75% | 0.5 |' in md  # the fake's figures
    assert '| chart (simulated) | 0% | 2.0 |' in md
    html = render_analysis(result, "html")
    assert '<td class="n">75%</td><td class="n">0.5</td>' in html
    con = Console(file=io.StringIO(), width=80, color_system=None)
    con.print(PackAnalysisView(result))
    text = " ".join(con.file.getvalue().split())
    assert "escalated or 'unknown' first: planner 75%, chart 0%" in text
    assert "repairs in vain: planner 0.5, chart 2.0" in text
    rate = analyze(_model(), complaint="stuck", unknown_rate=0.0).complaints[0].effort
    assert rate.unknown_rate == 0.0


@pytest.mark.parametrize("rate", [-0.1, 1.0])
def test_bad_unknown_rate_is_an_input_error(rate):
    with pytest.raises(InputError):
        analyze(_model(), unknown_rate=rate)


def test_unknown_complaint_is_an_input_error():
    with pytest.raises(InputError):
        analyze(_model(), complaint="nothing")


def test_screen_rendering(no_simulator):
    con = Console(file=io.StringIO(), width=80, color_system=None)
    con.print(PackAnalysisView(analyze(_model())))
    text = con.file.getvalue()
    assert "Knowledge analysis: test-pack" in text
    assert "P(top) exact 0.0589" in text
    assert "ambiguity group: x (x), y (y)" in text
    assert "simulator not available" in text


def test_markdown_report(no_simulator):
    text = render_analysis(analyze(_model()), "md")
    assert text.startswith("# Knowledge analysis: test-pack")
    assert "## stuck (`stuck`)" in text
    assert "| exact | 0.05891 |" in text
    assert "**Ambiguity group (site):** x (`x`), y (`y`)." in text
    assert "Simulator not available" in text


class _Checker(HTMLParser):
    """Collects tags and checks that every opened block tag is closed."""

    VOID = frozenset({"meta", "br", "hr", "img", "link", "input", "wbr"})

    def __init__(self):
        super().__init__()
        self.stack, self.scripts = [], 0

    def handle_starttag(self, tag, attrs):
        self.scripts += tag == "script"
        if tag not in self.VOID:
            self.stack.append(tag)

    def handle_endtag(self, tag):
        assert self.stack and self.stack[-1] == tag, (self.stack[-5:], tag)
        self.stack.pop()


def test_html_report_is_escaped_and_well_formed(no_simulator, tmp_path):
    result = analyze(_model(title_z="Lining <script>alert(1)</script> & worn"))
    path = write_analysis(result, tmp_path / "report.html")
    html = path.read_text()
    assert "&lt;script&gt;alert(1)&lt;/script&gt; &amp; worn" in html
    checker = _Checker()
    checker.feed(html)
    assert checker.scripts == 0 and checker.stack == []
    assert '<h2 id="c-stuck">' in html


def test_report_format_must_be_known():
    with pytest.raises(InputError):
        render_analysis({}, "pdf")


# --- an invented pack in YAML, through the loader and the command line -----------------
PACK = """\
pack: twins
title: Two causes that look alike
version: 1.0.0
notice: This tool is an aid.
complaints:
  - id: will_not_release
    title: Brake will not release
    caller: The axis will not move
    inputs: [coil_open, cable_break, lining_worn]
causes:
  - {id: coil_open, title: Coil winding open, prior: 12}
  - {id: cable_break, title: Cable broken, prior: 10}
  - {id: lining_worn, title: Lining worn, prior: 30}
checks:
  - id: listen_click
    title: Listen for the click
    minutes: 2
    where: phone
    ask: Switch on and off and listen.
    caller: Please switch the machine on and off; does the brake click?
    outcomes: [click, silent]
    normal: {click: 0.97}
    effects:
      coil_open: {silent: 0.95}
      cable_break: {silent: 0.95}
      lining_worn: {click: 0.3}
repairs:
  - {id: replace_coil, title: Replace the magnet body, minutes: 60, fixes: [coil_open]}
  - {id: replace_cable, title: Replace the cable, minutes: 45, fixes: [cable_break]}
  - {id: replace_disc, title: Replace the disc, minutes: 90, fixes: [lining_worn]}
"""

SPLIT = """\
checks:
  - id: coil_resistance
    title: Coil resistance at the brake
    minutes: 10
    ask: Disconnect the coil and measure across it.
    outcomes: [normal, open]
    normal: {normal: 0.97}
    effects:
      coil_open: {open: 0.97}
"""


@pytest.fixture
def twins(tmp_path: Path) -> Path:
    (tmp_path / "pack.yaml").write_text(PACK)
    return tmp_path


def _groups(capsys, pack: Path) -> list[list[str]]:
    assert main(["kb", "analyze", str(pack), "--json", "--no-effort"]) == 0
    data = json.loads(capsys.readouterr().out)
    return [g["causes"] for g in data["complaints"][0]["testability"]["site"]["ambiguity_groups"]]


def test_invented_pack_two_causes_sharing_every_effect_then_split(twins, capsys):
    assert _groups(capsys, twins) == [["coil_open", "cable_break"]]
    (twins / "tests.yaml").write_text(SPLIT)
    assert _groups(capsys, twins) == []


def test_lint_with_analysis_warns_about_the_group(twins, capsys):
    from diagnose.kb.lint import lint_paths
    from diagnose.reasoning.testability import analysis_problems

    (res,) = lint_paths([str(twins)], extra=analysis_problems)
    (warning,) = [p for p in res.warnings if p.code == "ambiguity-group"]
    assert "coil_open, cable_break" in warning.message
    line = PACK.splitlines().index("  - {id: coil_open, title: Coil winding open, prior: 12}") + 1
    assert warning.source.file.endswith("pack.yaml") and warning.source.line == line


def test_command_line_reports(twins, tmp_path, capsys):
    assert main(["kb", "analyze", str(twins), "--format", "md", "--no-effort"]) == 0
    assert "# Knowledge analysis: Two causes that look alike" in capsys.readouterr().out
    out = tmp_path / "a.html"
    assert main(["kb", "analyze", str(twins), "-o", str(out), "--no-effort"]) == 0
    assert out.read_text().startswith("<!DOCTYPE html>")
    assert main(["kb", "analyze", str(twins), "--complaint", "nope"]) == 2
    assert "unknown complaint" in capsys.readouterr().err
    assert main(["kb", "analyze", str(twins), "--no-effort"]) == 0
    assert "Brake will not release" in capsys.readouterr().out
    assert main(["kb", "analyze", str(twins), "--no-effort", "--unknown-rate", "1.5"]) == 2
    assert "--unknown-rate" in capsys.readouterr().err


def test_command_line_unknown_rate_in_json(twins, capsys):
    pytest.importorskip("diagnose.reasoning.simulate")
    assert main(["kb", "analyze", str(twins), "--json", "--runs", "10",
                 "--unknown-rate", "0.3"]) == 0
    effort = json.loads(capsys.readouterr().out)["complaints"][0]["effort"]
    assert effort["unknown_rate"] == 0.3
    assert 0.0 <= effort["escalated_when_unknown"] <= 1.0
    assert effort["wrong_repairs_when_unknown"] >= 0.0
    assert effort["chart_wrong_repairs_when_unknown"] >= 0.0


# --- the real simulator -------------------------------------------------------------------
def test_effort_from_the_simulator_on_the_complaints_own_causes():
    from diagnose.reasoning.analysis import complaint_model
    from diagnose.reasoning.synthetic import tiny_model

    model = tiny_model()
    sub = complaint_model(model, "slips")
    assert list(sub.complaints) == ["slips"] and list(sub.causes) == ["lining_worn", "lining_oily"]
    e = analyze(model, complaint="slips", runs=10).complaints[0].effort
    assert e.available and e.runs == 10
    assert e.expected_minutes > 0 and e.chart_minutes > 0 and e.expected_checks >= 0
    assert e.bound_minutes is not None and e.cured is not None


def test_simulated_effort_on_calls_with_a_cause_outside_the_pack():
    pytest.importorskip("diagnose.reasoning.simulate")
    from diagnose.reasoning.synthetic import tiny_model

    e = analyze(tiny_model(), complaint="slips", runs=20, unknown_rate=0.4).complaints[0].effort
    assert e.unknown_rate == 0.4 and "outside the pack" in e.note
    for share in (e.escalated_when_unknown, e.chart_escalated_when_unknown):
        assert 0.0 <= share <= 1.0
    assert e.wrong_repairs_when_unknown >= 0.0 and e.chart_wrong_repairs_when_unknown >= 0.0
    none = analyze(tiny_model(), complaint="slips", runs=10, unknown_rate=0.0)
    e0 = none.complaints[0].effort
    assert e0.escalated_when_unknown is None and e0.wrong_repairs_when_unknown is None


# --- the shipped packs: the analysis runs on each (its findings are the trainers' to fix) ----
def _shipped() -> list[str]:
    from diagnose.kb.locate import shipped_dir

    return sorted(p.parent.name for p in shipped_dir().glob("*/pack.yaml"))


@pytest.mark.parametrize("pack", _shipped())
def test_every_shipped_pack_analyses_to_strict_json(pack):
    from diagnose.errors import KnowledgeError
    from diagnose.kb.loader import load_model
    from diagnose.kb.locate import shipped_dir

    try:
        model = load_model(str(shipped_dir() / pack))
    except KnowledgeError:
        pytest.skip(f"{pack} does not load yet; lint speaks of it")
    data = analyze(model, effort=False).to_dict()
    json.dumps(data, allow_nan=False)
    for c in data["complaints"]:
        p = c["fault_tree"]["probability"]
        # NUREG-0492: exact <= min-cut upper bound <= rare-event approximation
        assert p["exact"] <= p["min_cut_upper_bound"] + 1e-12 <= p["rare_event"] + 2e-12
