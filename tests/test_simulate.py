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
from diagnose.kb.model import UNKNOWN_CAUSE
from diagnose.reasoning.simulate import ALL_POLICIES as POLICIES_KNOWN
from diagnose.reasoning.simulate import (
    POLICIES,
    RunResult,
    _Run,
    chart_order,
    draw_cases,
    entropy_bound,
    policy_report,
    simulate,
)
from diagnose.reasoning.synthetic import synthetic_model, tiny_model
from diagnose.views_reasoning import SimulationView

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
    Console(file=out, width=80, color_system=None).print(SimulationView(r))
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


def test_simulate_command_runs_the_reference_planner_side_by_side(capsys):
    code = main(["simulate", MINI, "--runs", "25", "--seed", "2", "--noise", "0.05",
                 "--policy", "planner", "--policy", "reference", "--json"])
    data = json.loads(capsys.readouterr()[0])
    assert code == 0 and set(data["policies"]) == {"planner", "reference"}
    fast, ref = data["policies"]["planner"], data["policies"]["reference"]
    assert {**fast, "policy": ""} == {**ref, "policy": ""}  # the same runs, only slower
    assert "reference" in POLICIES_KNOWN and "reference" not in POLICIES


def test_simulate_command_table(capsys):
    assert main(["simulate", MINI, "--runs", "20", "--seed", "3"]) == 0
    assert "planner minutes / chart minutes" in capsys.readouterr()[0]


# --- calls whose cause is outside the pack ---------------------------------------------------
UNKNOWN_KEYS = ("unknown_runs", "escalated_when_unknown", "wrong_repairs_when_unknown")


def _certain_normal(model):
    """``model`` with every check's ``normal`` row certain: its first outcome, probability 1."""
    from dataclasses import replace

    checks = {cid: replace(c, normal={o: float(j == 0) for j, o in enumerate(c.outcomes)})
              for cid, c in model.checks.items()}
    return replace(model, checks=checks)


@pytest.mark.parametrize("kwargs", [dict(runs=60, seed=3, noise=0.1),
                                    dict(runs=40, seed=4, noise=0.05, max_faults=2)])
def test_unknown_rate_zero_changes_nothing(kwargs):
    before = simulate(tiny_model(), **kwargs).to_dict()
    after = simulate(tiny_model(), unknown_rate=0.0, **kwargs).to_dict()
    assert after == before
    assert "unknown_rate" not in after and not any(k in after for k in UNKNOWN_KEYS)


def test_unknown_runs_are_drawn_apart_and_known_runs_keep_their_draws():
    m = tiny_model()
    base, mixed = draw_cases(m, 2000, 3), draw_cases(m, 2000, 3, unknown_rate=0.3)
    n = sum(mixed.unknown)
    # binomial(2000, 0.3): mean 600, sd 20.5; four sd either side
    assert 600 - 82 <= n <= 600 + 82
    assert np.array_equal(base.answer, mixed.answer) and np.array_equal(base.cure, mixed.cure)
    for i, u in enumerate(mixed.unknown):
        if u:
            assert mixed.causes[i] == UNKNOWN_CAUSE and mixed.complaints[i] in m.complaints
        else:
            assert (mixed.causes[i], mixed.complaints[i]) == (base.causes[i], base.complaints[i])
    # uniform over the three complaints, whatever their causes
    assert {mixed.complaints[i] for i in range(2000) if mixed.unknown[i]} == set(m.complaints)
    assert not any(draw_cases(m, 200, 3).unknown)


def test_unknown_share_in_the_report():
    r = simulate(tiny_model(), runs=150, seed=2, unknown_rate=0.3, policies=("chart",))
    chart = r.policies["chart"]
    # binomial(150, 0.3): mean 45, sd 5.6; four sd either side
    assert 45 - 23 <= chart.unknown_runs <= 45 + 23
    d = r.to_dict()
    assert d["unknown_rate"] == 0.3 and all(k in d for k in UNKNOWN_KEYS)


def test_unknown_runs_answer_from_the_normal_row():
    m = _certain_normal(tiny_model())
    draws = draw_cases(m, 80, 5, unknown_rate=0.5)
    check_pos = {c: i for i, c in enumerate(m.checks)}
    repair_pos = {r: i for i, r in enumerate(m.repairs)}
    unknown = [i for i in range(80) if draws.unknown[i]]
    assert unknown
    for i in unknown:
        run = _Run(m, draws, i, 0.0, check_pos, repair_pos)
        assert all(run.answer(cid) == m.checks[cid].outcomes[0] for cid in m.checks)
        assert not any(run.repair(rid) for rid in m.repairs)  # no repair cures
        res = run.result(0.0)
        assert res.unknown and res.repairs == len(m.repairs) and not res.cured


def test_the_chart_repairs_in_vain_and_the_planner_figures_are_shares():
    m = _certain_normal(tiny_model())
    r = simulate(m, runs=80, seed=1, noise=0.0, unknown_rate=0.3,
                 policies=("planner", "chart", "random"))
    for name in ("chart", "random"):  # every check normal: the chart ends up trying repairs
        assert r.policies[name].wrong_repairs_when_unknown >= 1
    planner = r.policies["planner"]
    assert planner.unknown_runs > 0
    assert 0.0 <= planner.escalated_when_unknown <= 1.0
    assert planner.wrong_repairs_when_unknown >= 0.0
    for p in r.policies.values():
        assert 0.0 <= p.cured <= 1.0 and 0.0 <= p.first_repair_success <= 1.0
    out = io.StringIO()
    Console(file=out, width=80, color_system=None).print(SimulationView(r))
    text = out.getvalue()
    assert "unknown: escalated" in text and "unknown: repairs" in text
    assert all(len(line) <= 80 for line in text.splitlines())


def _result(cause="a", *, unknown=False, escalated=False, repairs=0, top=False, cured=False,
            minutes=10.0):
    return RunResult(cause, "k", 2, minutes, cured, repairs > 0, cured, True, True,
                     unknown=unknown, escalated=escalated, repairs=repairs,
                     unknown_top_before_repair=top)


def test_policy_report_formulas():
    known = [_result(cured=True, minutes=10.0), _result(minutes=30.0, repairs=1)]
    unknown = [_result(UNKNOWN_CAUSE, unknown=True, escalated=True, repairs=2),
               _result(UNKNOWN_CAUSE, unknown=True, top=True),
               _result(UNKNOWN_CAUSE, unknown=True, repairs=3),
               _result(UNKNOWN_CAUSE, unknown=True, repairs=1, minutes=500.0)]
    r = policy_report("x", known + unknown, 0.5)
    assert (r.runs, r.unknown_runs) == (6, 4)
    assert r.mean_minutes == pytest.approx(20.0)  # known runs only: (10 + 30) / 2
    assert r.cured == pytest.approx(0.5)
    # ended before any repair, escalated or with "unknown" on top: only the second run
    # (the first escalated only after two repairs)
    assert r.escalated_when_unknown == pytest.approx(1 / 4)
    assert r.wrong_repairs_when_unknown == pytest.approx((2 + 0 + 3 + 1) / 4)
    none = policy_report("x", known, 0.5)
    assert none.unknown_runs == 0
    assert none.escalated_when_unknown is None and none.wrong_repairs_when_unknown is None
    assert none.to_dict()["escalated_when_unknown"] is None
    assert "unknown_runs" not in policy_report("x", known).to_dict()


@pytest.mark.parametrize("rate", [-0.1, 1.0, 1.5, float("nan")])
def test_bad_unknown_rate(rate):
    with pytest.raises(InputError):
        simulate(tiny_model(), runs=10, seed=1, unknown_rate=rate)


def test_simulate_command_unknown_rate(capsys):
    code = main(["simulate", MINI, "--runs", "30", "--seed", "1", "--unknown-rate", "0.1",
                 "--json"])
    data = json.loads(capsys.readouterr()[0])
    assert code == 0 and data["unknown_rate"] == 0.1
    assert all(k in data for k in UNKNOWN_KEYS)
    assert all(k in p for p in data["policies"].values() for k in UNKNOWN_KEYS)
    assert main(["simulate", MINI, "--runs", "10", "--unknown-rate", "1"]) == 2
    assert "unknown_rate" in capsys.readouterr()[1]
