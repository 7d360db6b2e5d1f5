"""The planner: p/c ordering, value of information, look-ahead, the decision rule."""

from __future__ import annotations

import itertools
import math
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from synthetic import random_model

from diagnose.errors import InputError
from diagnose.kb.model import UNKNOWN_CAUSE, Check
from diagnose.reasoning.evidence import Evidence
from diagnose.reasoning.planner import (
    DEFAULT,
    Settings,
    assign_repairs,
    checks_table,
    expected_cost_of_repair,
    lookahead,
    lookahead_reference,
    next_action,
    plan,
    repair_order,
    sequence_cost,
)
from diagnose.reasoning.posterior import posterior
from diagnose.reasoning.synthetic import synthetic_model, tiny_model
from diagnose.reasoning.tables import tables_for

WNR = Evidence(complaints=("will_not_release",))


@pytest.mark.parametrize("seed", range(8))
def test_p_over_c_order_has_the_least_expected_cost_of_all_orders(seed):
    # Kadane and Simon (1977); Heckerman, Breese and Rommelse (1995), eq. 2: sorting by
    # p/c minimises sum_i c_i (1 - sum_{j<i} p_j) for disjoint single-fault repairs.
    rng = np.random.default_rng(seed)
    n = 6
    p = rng.dirichlet(np.ones(n + 1))[:n]  # the rest: no repair cures
    c = rng.uniform(1, 60, n)
    best = min(sequence_cost(p, c, order, 50.0) for order in itertools.permutations(range(n)))
    assert sequence_cost(p, c, repair_order(p, c), 50.0) == pytest.approx(best, abs=1e-9)
    assert expected_cost_of_repair(p, c) + 50.0 * (1 - p.sum()) == pytest.approx(best, abs=1e-9)
    assert list(repair_order(p, c)) == sorted(range(n), key=lambda i: -p[i] / c[i])


def test_repairs_not_worth_an_escalation_are_left_out_of_the_sequence():
    # p·E < c: the repair costs more than the escalation it is expected to save
    p, c = np.array([0.6, 0.01]), np.array([10.0, 30.0])
    # 10 + 0.4 * 100 = 50 (the second repair, 0.01 * 100 < 30, is not tried)
    assert expected_cost_of_repair(p, c, 100.0) == pytest.approx(50.0)
    assert expected_cost_of_repair(p, c) == pytest.approx(10 + 0.4 * 30)


def test_sequence_cost_by_hand():
    # 10 min at p 0.5, then 20 min reached with 0.5, then escalation 100 with 0.2 left:
    # 10 + 0.5 * 20 + 0.2 * 100 = 40 (Heckerman et al. 1995, eq. 2 with a service call)
    assert sequence_cost(np.array([0.5, 0.3]), np.array([10.0, 20.0]), [0, 1], 100.0) == 40.0


def _model_with(check: Check, base=None):
    m = base or tiny_model()
    return replace(m, checks={**m.checks, check.id: check})


def test_information_of_a_check_that_reveals_the_hypothesis_is_the_prior_entropy():
    # Cover and Thomas (2006), 2.4: I(H; O) = H(H) when O determines H.
    m = tiny_model()
    hyps = [*m.causes, UNKNOWN_CAUSE]
    outs = tuple(f"o_{h}" for h in hyps)
    effects = {c: {o: (1.0 if o == f"o_{c}" else 0.0) for o in outs} for c in m.causes}
    unknown = {o: (1.0 if o == f"o_{UNKNOWN_CAUSE}" else 0.0) for o in outs}
    oracle = Check("oracle", "Oracle", 1.0, outs, effects, unknown, unknown)
    m2 = _model_with(oracle, m)
    p = posterior(m2, WNR).p
    entropy = float(-(p[p > 0] * np.log2(p[p > 0])).sum())
    row = next(r for r in plan(m2, WNR).checks() if r.id == "oracle")
    assert row.bits == pytest.approx(entropy, abs=1e-12)


def test_information_of_a_check_no_cause_affects_is_zero():
    m = tiny_model()
    idle = Check("idle", "Idle", 1.0, ("a", "b"), {}, {"a": 0.7, "b": 0.3}, {"a": 0.7, "b": 0.3})
    m2 = _model_with(idle, m)
    row = next(r for r in plan(m2, WNR).checks() if r.id == "idle")
    assert row.bits == pytest.approx(0.0, abs=1e-12)
    # no answer points at a cause yet, so after any answer of "idle" the cost is an escalation
    assert row.eco == pytest.approx(row.minutes + DEFAULT.escalation_minutes)
    seen = WNR.with_outcome("listen_click", "silent")  # an answer that points at causes
    row = next(r for r in plan(m2, seen).checks() if r.id == "idle")
    assert row.eco == pytest.approx(row.minutes + plan(m2, seen).ecr)  # ECO = c + ECR


def _brute_lookahead(tables, p, cand, ccost, assign, rcost, esc):
    s = tables.success
    R = len(s)
    bits, eco = [], []
    h0 = -(p[p > 0] * np.log2(p[p > 0])).sum()
    for k, cc in zip(cand, ccost):
        dense = tables.checks[tables.check_ids[k]].dense(tables.n_hyp)
        total = eh = 0.0
        for row in dense:
            joint = p * row
            z = joint.sum()
            if z <= 0:
                continue
            post = joint / z
            mass = np.bincount(assign[assign >= 0], weights=post[assign >= 0], minlength=R)
            total += z * expected_cost_of_repair(s * mass, rcost, esc)
            q = post[post > 0]
            eh += z * -(q * np.log2(q)).sum()
        bits.append(h0 - eh)
        eco.append(cc + total)
    return np.array(bits), np.array(eco)


@pytest.mark.parametrize("model,max_faults", [
    (tiny_model(), 1), (tiny_model(), 2), (synthetic_model(120, seed=3), 1),
    (synthetic_model(25, seed=4), 2), (synthetic_model(40, seed=5, causes_per_check=12), 1),
    (random_model(9, n_causes=6), 2),
])
@pytest.mark.parametrize("method", ["dense", "merge", "reference"])
def test_vectorised_look_ahead_equals_re_sorting_after_each_outcome(model, max_faults, method):
    t = tables_for(model, max_faults)
    rng = np.random.default_rng(0)
    for trial in range(3):
        p = rng.dirichlet(np.ones(t.n_hyp) * 0.3)
        if trial == 2:
            p[rng.random(t.n_hyp) < 0.3] = 0.0
            p /= p.sum()
        cand = np.arange(len(t.check_ids))
        ccost = rng.uniform(1, 10, len(cand))
        usable = rng.random(len(t.repair_ids)) < 0.8
        rcost = rng.uniform(5, 100, len(t.repair_ids))
        assign = assign_repairs(t, usable, rcost)
        if method == "reference":
            bits, eco, _ = lookahead_reference(t, p, cand, ccost, assign, rcost,
                                               escalation=120.0)
        else:
            bits, eco, _ = lookahead(t, p, cand, ccost, assign, rcost, escalation=120.0,
                                     method=method)
        b2, e2 = _brute_lookahead(t, p, cand, ccost, assign, rcost, 120.0)
        assert np.allclose(bits, b2, atol=1e-9) and np.allclose(eco, e2, atol=1e-8)


def test_first_action_is_a_check_and_a_clear_finding_leads_to_its_repair():
    m = tiny_model()
    assert next_action(m, WNR).kind == "check"
    a = next_action(m, WNR.with_outcome("listen_click", "silent").with_outcome("fuse", "blown"))
    assert (a.kind, a.id) == ("repair", "replace_fuse")
    assert a.p >= 0.9


def test_done_checks_and_skipped_checks_are_not_offered():
    m = tiny_model()
    ev = WNR.with_outcome("listen_click", "silent").with_skip("fuse")
    rows = {r.id: r for r in plan(m, ev).checks()}
    assert rows["listen_click"].status == "done" and rows["fuse"].status == "skipped"
    assert next_action(m, ev).id not in ("listen_click", "fuse")


def test_prerequisite_is_proposed_first_and_counted_in_minutes():
    m = tiny_model()
    ev = Evidence(complaints=("slips",))
    a = next_action(m, ev)
    assert (a.kind, a.id, a.target) == ("check", "secure_load", "oil_traces") or a.target == "gap"
    row = {r.id: r for r in plan(m, ev).checks()}["gap"]
    assert row.minutes == 12 + 6 and row.needs == ("secure_load",)
    done = ev.with_outcome("secure_load", "done")
    assert {r.id: r for r in plan(m, done).checks()}["gap"].minutes == 12


def test_preparation_not_for_this_unit_counts_as_done():
    m = tiny_model()
    ev = Evidence(complaints=("slips",)).with_nameplate("gravity_load", "no")
    rows = {r.id: r for r in plan(m, ev).checks()}
    assert rows["gap"].needs == () and rows["secure_load"].status == "not for this unit"
    assert next_action(m, ev).id != "secure_load"


def test_skipped_prerequisite_blocks_the_check():
    m = tiny_model()
    ev = Evidence(complaints=("slips",)).with_skip("secure_load")
    rows = {r.id: r for r in plan(m, ev).checks()}
    assert rows["gap"].status.startswith("needs secure_load")


def test_phone_mode_offers_phone_checks_only_and_ends_with_a_visit():
    m = tiny_model()
    ev = replace(WNR, mode="phone")
    a = next_action(m, ev)
    assert (a.kind, a.id) == ("check", "listen_click")
    after = ev.with_outcome("listen_click", "silent")
    b = next_action(m, after)
    assert b.kind == "visit" and b.parts  # the parts to bring
    table = {r.id: r.status for r in checks_table(m, after).rows}
    assert table["fuse"] == "site only"


#: Words of work on site that a help-desk agent must not read out to a caller.
SITE_WORDS = ("not yet sure enough to repair", "saves minutes", "repairing now",
              "likely enough to act", "worth its minutes")


def test_phone_reasons_say_what_the_question_is_for():
    m = tiny_model()
    ev = replace(WNR, mode="phone")
    a = next_action(m, ev)
    assert a.kind == "check" and a.reason.startswith(
        "to find out by phone whether a site visit is needed")
    assert "site visit" in a.reason and "tells more about" in a.reason
    assert not any(w in a.reason for w in SITE_WORDS)
    assert next_action(m, WNR).reason in ("observing first saves minutes",
                                          "not yet sure enough to repair",
                                          "no answer points at a cause yet, so look first")


@pytest.mark.parametrize("seed", range(6))
def test_no_phone_action_speaks_of_work_on_site(seed):
    m = synthetic_model(30, seed=seed)
    rng = np.random.default_rng(seed)
    ev = Evidence(complaints=(next(iter(m.complaints)),), mode="phone")
    for _ in range(12):
        a = next_action(m, ev)
        assert not any(w in a.reason for w in SITE_WORDS), a
        if a.kind != "check":
            break
        chk = m.checks[a.id]
        ev = ev.with_outcome(a.id, chk.outcomes[int(rng.integers(len(chk.outcomes)))])
    assert a.kind in ("check", "visit", "escalate", "repair")


def test_phone_escalation_recommends_a_site_visit():
    m = tiny_model(unknown_prior=5000)  # "none of the known causes" above the threshold
    a = next_action(m, replace(WNR, mode="phone"))
    assert a.kind == "escalate" and "site visit" in a.reason


def test_a_skipped_repair_is_not_proposed_and_shows_why():
    m = tiny_model()
    ev = WNR.with_outcome("listen_click", "silent").with_outcome("fuse", "blown")
    assert next_action(m, ev).id == "replace_fuse"
    skipped = ev.with_skipped_repair("replace_fuse")
    assert next_action(m, skipped).id != "replace_fuse"
    scores = {r.id: r for r in plan(m, skipped).repairs()}
    assert scores["replace_fuse"].status == "skipped"
    assert skipped.with_repair("replace_fuse", False).repairs_skipped == frozenset()


def test_phone_wording_reaches_diagnose_run(capsys, tmp_path):
    from diagnose.cli import main

    path = tmp_path / "answers.yaml"
    path.write_text("complaints: [will_not_release]\n"
                    "steps:\n  - {check: listen_click, answer: click}\n")
    mini = str(Path(__file__).parent / "fixtures" / "mini")
    assert main(["run", mini, "--answers", str(path), "--mode", "phone"]) == 0
    out = " ".join(capsys.readouterr().out.split())  # the text wraps at 80 columns
    assert "Next: Check listen_click" in out and "to find out by phone" in out
    assert not any(w in out for w in SITE_WORDS), out


def test_a_repair_that_fixes_nothing_still_possible_is_not_proposed():
    m = tiny_model()
    sure = replace(m.checks["oil_traces"], effects={"lining_oily": {"dry": 0.0, "oily": 1.0}})
    m = _model_with(sure, m)
    ev = Evidence(complaints=("slips",)).with_outcome("oil_traces", "dry")
    scores = {r.id: r for r in plan(m, ev).repairs()}
    assert scores["clean_lining"].status == "fixes nothing still possible"
    assert scores["replace_disc"].status == ""  # it fixes lining_worn too


def test_repairs_done_are_not_proposed_again():
    m = tiny_model()
    ev = WNR.with_outcome("fuse", "blown").with_repair("replace_fuse", False)
    assert next_action(m, ev).id != "replace_fuse"


def test_cured_unit_is_done():
    assert next_action(tiny_model(), WNR.with_repair("replace_fuse", True)).kind == "done"


def test_answers_that_contradict_every_known_cause_end_in_escalation():
    # A pack where "none of the known causes" reads like `normal` on every check: when
    # every check is normal yet the complaint stands, nothing known fits.
    base = tiny_model()
    m = replace(base, checks={k: replace(c, unknown=c.normal) for k, c in base.checks.items()})
    ev = (WNR.with_outcome("listen_click", "click").with_outcome("fuse", "intact")
          .with_outcome("coil_ohms", "ok").with_outcome("continuity", "ok")
          .with_outcome("secure_load", "done").with_outcome("gap", "ok")
          .with_outcome("oil_traces", "dry"))
    assert posterior(m, ev).top()[0] == UNKNOWN_CAUSE
    assert next_action(m, ev).kind == "escalate"


def test_when_every_repair_failed_the_planner_escalates():
    m = tiny_model()
    ev = WNR
    for _ in range(30):
        a = next_action(m, ev)
        if a.kind == "check":
            ev = ev.with_outcome(a.id, m.checks[a.id].outcomes[0])
        elif a.kind == "repair":
            ev = ev.with_repair(a.id, False)
        else:
            break
    assert a.kind == "escalate"


def test_threshold_and_act_floor_change_the_decision():
    m = tiny_model()
    ev = WNR.with_outcome("listen_click", "silent")
    eager = next_action(m, ev, settings=Settings(threshold=0.3))
    assert eager.kind == "repair"
    assert next_action(m, ev, settings=Settings(threshold=0.99)).kind == "check"


def test_unknown_mode_is_an_input_error():
    with pytest.raises(InputError):
        plan(tiny_model(), replace(WNR, mode="moon"))


def test_large_pack_plans_without_materialising_every_row():
    m = synthetic_model(3000, seed=2)
    ev = Evidence(complaints=(next(iter(m.complaints)),))
    pl = plan(m, ev)
    assert pl.action.kind == "check"
    assert len(pl.checks(5)) == 5 and math.isfinite(pl.ecr)
    assert pl.to_dict(limit=3)["next"]["action"] == "check"
