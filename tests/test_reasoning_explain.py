"""Explanations: likelihood ratios per finding, and what each outcome of a check would do."""

from __future__ import annotations

import io
import math

import pytest
from rich.console import Console

from diagnose.errors import InputError
from diagnose.reasoning.evidence import Evidence
from diagnose.reasoning.explain import explain_check, explain_ranking
from diagnose.reasoning.posterior import posterior
from diagnose.reasoning.synthetic import tiny_model
from diagnose.views_reasoning import CheckExplanationView, RankingExplanationView

WNR = Evidence(complaints=("will_not_release",))


def render(obj) -> str:
    out = io.StringIO()
    Console(file=out, width=80, color_system=None).print(obj)
    return out.getvalue()


def test_one_finding_moves_the_odds_by_its_likelihood_ratio():
    # Good (1950): posterior odds = prior odds x likelihood ratio for a single finding.
    m = tiny_model()
    ev = Evidence().with_outcome("fuse", "blown")
    x = explain_ranking(m, ev).leading[0]
    assert x.cause == "fuse_blown"
    post = posterior(m, ev).p[0]
    odds_after = post / (1 - post)
    odds_before = x.prior / (1 - x.prior)
    assert odds_after == pytest.approx(odds_before * x.factors[0].ratio)


def test_factors_say_for_and_against():
    m = tiny_model()
    ev = WNR.with_outcome("listen_click", "silent").with_outcome("fuse", "intact")
    lead = {x.cause: x for x in explain_ranking(m, ev, leading=6).leading}
    coil = {f.label: f.ratio for f in lead["coil_open"].factors}
    assert coil["listen_click = silent"] > 1 and coil["fuse = intact"] >= 1
    fuse = {f.label: f.ratio for f in lead["fuse_blown"].factors}
    assert fuse["fuse = intact"] < 0.1  # 0.03 under fuse_blown against ~0.98 (tiny_model rows)


def test_a_failed_repair_counts_against_its_causes():
    m = tiny_model()
    ev = WNR.with_repair("replace_disc", False)
    lead = {x.cause: x for x in explain_ranking(m, ev, leading=6).leading}
    f = {f.label: f.ratio for f in lead["lining_worn"].factors}
    assert f["replace_disc = not cured"] < 0.2  # 1 - success 0.9, against about 1


def test_explain_check_gives_each_outcome_its_probability_and_top_cause():
    m = tiny_model()
    x = explain_check(m, WNR, "fuse")
    assert [o.outcome for o in x.outcomes] == ["intact", "blown"]
    assert sum(o.p for o in x.outcomes) == pytest.approx(1.0)
    blown = x.outcomes[1]
    assert blown.top == "fuse_blown" and blown.top_p > 0.5
    assert x.minutes == 3 and x.bits > 0 and math.isfinite(x.eco)
    d = x.to_dict()
    assert d["check"] == "fuse" and len(d["outcomes"]) == 2


def test_explain_check_of_a_done_check_still_says_what_it_tells():
    m = tiny_model()
    x = explain_check(m, WNR.with_outcome("fuse", "intact"), "fuse")
    assert x.status == "done" and x.eco is None


def test_explain_unknown_check():
    with pytest.raises(InputError):
        explain_check(tiny_model(), WNR, "nope")


def test_explanations_render_in_80_columns():
    m = tiny_model()
    ev = WNR.with_outcome("listen_click", "silent")
    text = (render(RankingExplanationView(explain_ranking(m, ev)))
            + render(CheckExplanationView(explain_check(m, ev, "coil_ohms"))))
    assert all(len(line) <= 80 for line in text.splitlines())
    assert "listen_click = silent" in text and "if the answer is" in text
