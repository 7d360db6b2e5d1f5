"""The simulator: same draws for every policy, the reported figures, the command."""

from __future__ import annotations

import io
import json
from pathlib import Path

import numpy as np
import pytest
from rich.console import Console

from diagnose.cli import main
from diagnose.errors import InputError
from diagnose.reasoning.simulate import POLICIES, chart_order, draw_cases, entropy_bound, simulate
from diagnose.reasoning.synthetic import synthetic_model, tiny_model

MINI = str(Path(__file__).parent / "fixtures" / "mini")


def test_the_same_seed_draws_the_same_cases():
    m = tiny_model()
    a, b = draw_cases(m, 50, 7), draw_cases(m, 50, 7)
    assert a.causes == b.causes and a.complaints == b.complaints
    assert np.array_equal(a.answer, b.answer)
    assert draw_cases(m, 50, 8).causes != a.causes


def test_each_drawn_complaint_is_produced_by_its_cause():
    m = tiny_model()
    d = draw_cases(m, 200, 3)
    for c, k in zip(d.causes, d.complaints):
        assert m.holds(k, frozenset({c}))


def test_true_causes_follow_the_priors():
    m = tiny_model()
    d = draw_cases(m, 4000, 1)
    share = d.causes.count("lining_worn") / 4000
    assert share == pytest.approx(30 / 87, abs=0.03)  # prior 30 of 87 (tiny_model)


def test_report_has_every_policy_and_the_planner_keys_on_top():
    r = simulate(tiny_model(), runs=60, seed=1, noise=0.05)
    d = r.to_dict()
    assert set(d["policies"]) == set(POLICIES)
    for key in ("mean_checks", "mean_minutes", "first_repair_success", "top1_accuracy",
                "entropy_bound"):
        assert key in d
    assert d["mean_minutes"] == d["policies"]["planner"]["mean_minutes"]
    out = io.StringIO()
    Console(file=out, width=80, color_system=None).print(r)
    assert "planner" in out.getvalue() and "chart" in out.getvalue()
    assert all(len(line) <= 80 for line in out.getvalue().splitlines())


def test_policies_meet_the_same_cases():
    one = simulate(tiny_model(), runs=40, seed=5, policies=("chart",))
    both = simulate(tiny_model(), runs=40, seed=5, policies=("planner", "chart"))
    assert one.policies["chart"] == both.policies["chart"]


def test_without_noise_the_planner_cures_at_least_as_often_at_first_try():
    r = simulate(tiny_model(), runs=200, seed=2, noise=0.0, policies=("planner", "chart"))
    assert r.policies["planner"].first_repair_success >= r.policies["chart"].first_repair_success


def test_chart_order_is_static_p_over_c():
    m = tiny_model()
    order = chart_order(m, "will_not_release")
    assert set(order) >= {"listen_click", "fuse", "coil_ohms"}
    # listen_click reveals coil, fuse and cable (42 of 1,000) in 2 min: first
    assert order[0] == "listen_click"
    assert chart_order(m, "will_not_release", listing=True)[0] == "listen_click"


def test_entropy_bound():
    m = synthetic_model(30, seed=1)
    bound, bits = entropy_bound(m)
    most = max(len(c.outcomes) for c in m.checks.values())
    # Shannon (1948): at least H / log2(outcomes) questions
    assert bound == pytest.approx(bits / np.log2(most))


def test_bad_arguments():
    with pytest.raises(InputError):
        simulate(tiny_model(), runs=10, seed=1, policies=("oracle",))
    with pytest.raises(InputError):
        simulate(tiny_model(), runs=10, seed=1, noise=1.5)
    with pytest.raises(InputError):
        simulate(tiny_model(), runs=0, seed=1)


def test_simulate_command_json(capsys):
    code = main(["simulate", MINI, "--runs", "30", "--seed", "1", "--noise", "0.05", "--json"])
    out, _ = capsys.readouterr()
    data = json.loads(out)
    assert code == 0 and data["runs"] == 30 and "policies" in data
    code = main(["simulate", MINI, "--runs", "20", "--policy", "chart", "--json"])
    data = json.loads(capsys.readouterr()[0])
    assert code == 0 and data["policy"] == "chart" and "policies" not in data


def test_simulate_command_table(capsys):
    assert main(["simulate", MINI, "--runs", "20", "--seed", "3"]) == 0
    assert "planner minutes / chart minutes" in capsys.readouterr()[0]
