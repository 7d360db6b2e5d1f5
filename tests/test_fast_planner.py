"""The fast planner against its reference: every choice and every expected cost.

``plan(..., reference=True)`` is the planner's first, straightforward version
(padded look-ahead, nothing memoised, every ECO computed at once). The fast
planner (memos per model, the look-ahead over real (check, outcome) pairs,
dense or merged, the ECO only of checks that can be chosen) must choose the
same action in every state and give the same expected costs to 1e-9
relative. The states come from random sessions on the shipped packs and on
synthetic packs: the planner's own proposals and other checks answered at
random (hard and soft), skips, "unsure", failed repairs, nameplate values,
phone and site, one and two faults.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from synthetic import random_model

from diagnose.kb.model import Check
from diagnose.reasoning.evidence import Evidence
from diagnose.reasoning.lookahead import Lookahead, lookahead
from diagnose.reasoning.lookahead_reference import lookahead_reference
from diagnose.reasoning.openworld import any_support
from diagnose.reasoning.plancache import plan_cache
from diagnose.reasoning.planner import checks_table, plan, top_entry
from diagnose.reasoning.posterior import posterior
from diagnose.reasoning.repair_cost import assign_repairs
from diagnose.reasoning.simulate import draw_cases, run_policy, simulate
from diagnose.reasoning.synthetic import synthetic_model, tiny_model
from diagnose.reasoning.tables import tables_for
from diagnose.reasoning.ties import BITS_ATOL, TIE_RTOL, best_check, by_preference, cheaper

ROOT = Path(__file__).parent.parent / "knowledge"
PACKS = [p.name for p in sorted(ROOT.iterdir()) if (p / "pack.yaml").is_file()] \
    if ROOT.is_dir() else []
RTOL = 1e-9


@pytest.fixture(scope="module", params=PACKS)
def pack(request):
    from diagnose.kb.loader import load_model

    return load_model(str(ROOT / request.param))


# --- comparing two plans ---------------------------------------------------------------------

def _close(a, b, what):
    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    assert np.array_equal(np.isnan(a), np.isnan(b)), what
    ok = ~np.isnan(b)
    assert np.all(np.abs(a[ok] - b[ok]) <= RTOL * np.maximum(np.abs(b[ok]), 1e-300)), \
        (what, a[ok], b[ok])


def _same_plan(fast, ref, label=""):
    """Everything the planner decides and reports, fast against reference."""
    af, ar = fast.action, ref.action
    bare = {"eco": None, "ecr": None, "bits": 0.0}
    assert dataclasses.replace(af, **bare) == dataclasses.replace(ar, **bare), label
    for x, y in ((af.eco, ar.eco), (af.ecr, ar.ecr)):
        assert (x is None) == (y is None), label
        if x is not None:
            _close(x, y, label)
    assert af.bits == pytest.approx(ar.bits, abs=1e-9), label
    assert fast.top == ref.top and fast.supported == ref.supported, label
    _close(fast.ecr, ref.ecr, label)
    for name in ("check_code", "repair_code", "check_minutes", "repair_minutes", "p_fix",
                 "p_cure"):
        assert np.array_equal(getattr(fast, name), getattr(ref, name)), (label, name)
    for name in ("check_needs", "check_blocked", "repair_needs", "repair_blocked"):
        assert dict(getattr(fast, name)) == dict(getattr(ref, name)), (label, name)
    assert np.allclose(fast.check_bits, ref.check_bits, rtol=0, atol=1e-9), label
    _close(fast.ecos(), ref.ecos(), label)
    assert [r.id for r in fast.checks()] == [r.id for r in ref.checks()], label
    for k in (0, 1, 3):  # rows made only for those asked for: the first of the whole order
        assert fast.checks(k) == fast.checks()[:k] and fast.repairs(k) == fast.repairs()[:k], \
            label
    rows = fast.checks()
    assert all(fast.check_score(r.id) == r for r in rows[:2] + rows[-2:]), label


def _compare(model, evidence, max_faults, label=""):
    """The fast and the reference plan of one state; returns the fast one."""
    fast = plan(model, evidence, max_faults=max_faults)
    ref = plan(model, evidence, max_faults=max_faults, reference=True)
    _same_plan(fast, ref, label)
    a = plan_cache(tables_for(model, max_faults)).posterior(model, evidence)
    b = posterior(model, evidence, max_faults=max_faults)
    assert np.array_equal(a.p, b.p) and a.excluded == b.excluded, label
    assert a.contradiction == b.contradiction, label
    assert top_entry(b) == b.ranking(limit=1).top, label
    assert plan_cache(tables_for(model, max_faults)).any_support(model, evidence, b.excluded) \
        == any_support(model, evidence, b.excluded), label
    return fast


# --- random sessions ---------------------------------------------------------------------------

def _step(model, ev, proposed, rng):
    """One more piece of evidence: mostly the planner's proposal, sometimes something else."""
    u = rng.random()
    checks = [c for c in model.checks if c not in ev.done and c not in ev.skipped]
    if proposed.kind == "check" and proposed.id and u < 0.55:
        chk = model.checks[proposed.id]
        return ev.with_outcome(chk.id, str(rng.choice(chk.outcomes)))
    if proposed.kind == "repair" and proposed.id and u < 0.55:
        return ev.with_repair(proposed.id, bool(rng.random() < 0.1))
    if u < 0.7 and checks:
        chk = model.checks[str(rng.choice(checks))]
        if len(chk.outcomes) > 1 and rng.random() < 0.25:
            a, b = rng.choice(chk.outcomes, size=2, replace=False)
            w = float(rng.uniform(0.1, 0.9))
            return ev.with_finding(chk.id, {str(a): w, str(b): 1.0 - w})
        return ev.with_outcome(chk.id, str(rng.choice(chk.outcomes)))
    if u < 0.76 and checks:
        return ev.with_skip(str(rng.choice(checks)))
    if u < 0.8 and checks:
        return ev.with_unsure(str(rng.choice(checks)))
    if u < 0.86 and model.repairs:
        rid = str(rng.choice(list(model.repairs)))
        return ev.with_repair(rid, False) if rng.random() < 0.8 else ev.with_skipped_repair(rid)
    if u < 0.92:
        return _nameplate(model, ev, rng)
    if u < 0.96 and model.states:
        var = str(rng.choice(list(model.states)))
        return ev.with_state(var, str(rng.choice(list(model.states[var].values))))
    return ev.with_mode("phone" if ev.mode == "site" else "site")


def _nameplate(model, ev, rng):
    params = [p for p in model.parameters.values() if p.choices or p.unknown_allowed]
    if not params:
        return ev
    p = params[int(rng.integers(len(params)))]
    values = list(p.choices) + (["unknown"] if p.unknown_allowed else [])
    return ev.with_nameplate(p.id, str(rng.choice(values)))


def _session(model, seed, *, max_faults=1, mode="site", steps=16):
    """Compare fast and reference along one random session; returns the states seen."""
    rng = np.random.default_rng(seed)
    complaints = list(model.complaints)
    ev = Evidence(complaints=(complaints[int(rng.integers(len(complaints)))],), mode=mode)
    if rng.random() < 0.3:
        ev = _nameplate(model, ev, rng)
    seen = 0
    for n in range(steps):
        pl = _compare(model, ev, max_faults, f"{model.id} seed {seed} step {n}")
        seen += 1
        if ev.cured:
            break
        ev = _step(model, ev, pl.action, rng)
    return seen


@pytest.mark.parametrize("mode", ["site", "phone"])
def test_fast_planner_equals_reference_on_the_packs(pack, mode):
    states = sum(_session(pack, seed, mode=mode) for seed in range(25))
    assert states >= 150


def test_fast_planner_equals_reference_on_the_packs_with_pairs(pack):
    for seed, mode in enumerate(("site", "phone") * 3):
        _session(pack, 100 + seed, max_faults=2, mode=mode, steps=10)


@pytest.mark.parametrize("model,max_faults", [
    (tiny_model(), 1), (tiny_model(), 2),
    (synthetic_model(30, seed=2), 1), (synthetic_model(120, seed=3), 1),
    (synthetic_model(300, seed=4), 1),  # beyond DENSE_HYPOTHESES: the merge
    (synthetic_model(18, seed=5), 2), (synthetic_model(40, seed=6, causes_per_check=12), 1),
    (random_model(3, n_causes=7, n_checks=6), 1), (random_model(4, n_causes=6), 2),
    (random_model(5, n_causes=8, n_checks=6, zeros=True), 1),
])
@pytest.mark.parametrize("mode", ["site", "phone"])
def test_fast_planner_equals_reference_on_synthetic_packs(model, max_faults, mode):
    for seed in range(6):
        _session(model, seed, max_faults=max_faults, mode=mode, steps=14)


@settings(max_examples=80, deadline=None, database=None,
          suppress_health_check=[HealthCheck.too_slow])
@given(model_seed=st.integers(0, 10_000), seed=st.integers(0, 10_000),
       n_causes=st.integers(2, 9), max_faults=st.sampled_from([1, 2]),
       zeros=st.booleans(), mode=st.sampled_from(["site", "phone"]))
def test_fast_planner_equals_reference_on_random_models(model_seed, seed, n_causes, max_faults,
                                                         zeros, mode):
    model = random_model(model_seed, n_causes=n_causes, n_checks=5, zeros=zeros)
    _session(model, seed, max_faults=max_faults, mode=mode, steps=8)


# --- the look-ahead alone ------------------------------------------------------------------------

@pytest.mark.parametrize("model,max_faults", [
    (tiny_model(), 1), (tiny_model(), 2), (synthetic_model(120, seed=3), 1),
    (synthetic_model(25, seed=4), 2), (synthetic_model(40, seed=5, causes_per_check=12), 1),
    (random_model(9, n_causes=6), 2), (random_model(11, n_causes=5, zeros=True), 1),
])
@pytest.mark.parametrize("method", ["dense", "merge"])
def test_look_ahead_equals_the_reference_for_any_posterior(model, max_faults, method):
    t = tables_for(model, max_faults)
    rng = np.random.default_rng(0)
    for trial in range(8):
        p = rng.dirichlet(np.ones(t.n_hyp) * 0.3)
        if trial % 3 == 2:
            p[rng.random(t.n_hyp) < 0.3] = 0.0
            p /= p.sum()
        cand = np.flatnonzero(rng.random(len(t.check_ids)) < 0.7)
        ccost = rng.uniform(1, 10, len(cand))
        rcost = rng.uniform(5, 100, len(t.repair_ids))
        assign = assign_repairs(t, rng.random(len(t.repair_ids)) < 0.8, rcost)
        b1, e1, r1 = lookahead(t, p, cand, ccost, assign, rcost, escalation=120.0, method=method)
        b2, e2, r2 = lookahead_reference(t, p, cand, ccost, assign, rcost, escalation=120.0)
        _close(e1, e2, "eco")
        _close(r1, r2, "ecr")
        assert np.allclose(b1, b2, rtol=0, atol=1e-9)
        # a subset asked for alone gives the same figures as all at once
        la = Lookahead(t, p, cand, assign, rcost, escalation=120.0, method=method)
        half = cand[::2]
        _close(la.eco(half, ccost[::2]), e1[::2], "subset")


@pytest.mark.parametrize("method", ["dense", "merge"])
def test_look_ahead_with_neutral_outcomes_counts_an_escalation_after_them(method):
    m = synthetic_model(40, seed=7)
    t = tables_for(m)
    rng = np.random.default_rng(3)
    p = rng.dirichlet(np.ones(t.n_hyp))
    cand = np.arange(len(t.check_ids))
    ccost = t.check_minutes
    assign = assign_repairs(t, np.ones(len(t.repair_ids), dtype=bool), t.minutes)
    detail: list[np.ndarray] = []
    lookahead_reference(t, p, cand, ccost, assign, t.minutes, escalation=480.0, detail=detail)
    z, after = detail
    neutral = rng.random(int(t.check_outcomes.sum())) < 0.4
    la = Lookahead(t, p, cand, assign, t.minutes, escalation=480.0, neutral=neutral,
                   method=method)
    padded = np.zeros_like(after, dtype=bool)
    start = np.cumsum(t.check_outcomes) - t.check_outcomes
    for k, n in enumerate(t.check_outcomes):
        padded[k, :n] = neutral[start[k]:start[k] + n]
    want = ccost + (z * np.where(padded, 480.0, after)).sum(axis=1)
    _close(la.eco(cand, ccost), want, "neutral")


# --- lazy ECO, memos, the simulator --------------------------------------------------------------

def test_the_eco_of_a_check_that_cannot_be_chosen_is_computed_when_asked():
    m = synthetic_model(60, seed=8)
    ev = Evidence(complaints=(next(iter(m.complaints)),))
    fast = plan(m, ev)
    cand = fast.check_code == 0
    low = cand & (fast.check_bits < 0.035)
    assert low.any() and np.isnan(fast.check_eco[low]).all()  # not computed yet
    assert not np.isnan(fast.check_eco[cand & ~low]).any()
    ref = plan(m, ev, reference=True)
    _close(fast.ecos(), ref.check_eco, "lazy")
    assert not np.isnan(fast.check_eco[cand]).any()  # filled in place
    a, b = checks_table(m, ev).rows, checks_table(m, ev, reference=True).rows
    assert [r.id for r in a] == [r.id for r in b]
    _close([np.nan if r.eco is None else r.eco for r in a],
           [np.nan if r.eco is None else r.eco for r in b], "table")


def test_memoised_posterior_sees_a_check_answered_though_not_for_this_unit():
    base = tiny_model()  # oil_traces is the one check that lists lining_oily
    oil = dataclasses.replace(base.checks["oil_traces"], only_if={"gravity_load": ("yes",)})
    m = dataclasses.replace(base, checks={**base.checks, "oil_traces": oil})
    cache = plan_cache(tables_for(m))
    ev = Evidence(complaints=("slips",), nameplate={"gravity_load": "no"})
    assert np.array_equal(cache.posterior(m, ev).p, posterior(m, ev).p)  # lining_oily capped
    for later in (ev.with_outcome("oil_traces", "oily"), ev.with_skip("gap"),
                  ev.with_nameplate("gravity_load", "yes").with_unsure("oil_traces")):
        assert np.array_equal(cache.posterior(m, later).p, posterior(m, later).p)
        _compare(m, later, 1)


def test_cached_standing_cannot_be_changed_by_its_users():
    m = tiny_model()
    pl = plan(m, Evidence(complaints=("will_not_release",)))
    with pytest.raises(ValueError):
        pl.check_minutes[0] = 99.0


@pytest.mark.parametrize("model", [tiny_model(), synthetic_model(40, seed=9)])
def test_simulated_runs_are_identical_with_the_reference_planner(model):
    draws = draw_cases(model, 25, 3, unknown_rate=0.2)
    fast = run_policy(model, draws, "planner", noise=0.05)
    ref = run_policy(model, draws, "reference", noise=0.05)
    assert fast == ref
    assert any(r.steps for r in fast)


def test_simulate_runs_the_reference_policy_only_when_asked():
    r = simulate(tiny_model(), runs=30, seed=4, noise=0.05, policies=("planner", "reference"))
    assert r.policies["planner"].to_dict() | {"policy": ""} == \
        r.policies["reference"].to_dict() | {"policy": ""}
    assert "reference" not in simulate(tiny_model(), runs=5, seed=4).policies


# --- ties --------------------------------------------------------------------------------------

def test_cost_ties_go_to_more_information_then_fewer_minutes_then_the_id():
    ids = ("d", "c", "b", "a", "e")
    # d, c, b, a tie on cost (within TIE_RTOL of the least); e costs more than that above it
    eco = np.array([50.0, 50.0 * (1 + 0.5 * TIE_RTOL), 50.0, 50.0, 50.0 * (1 + 2 * TIE_RTOL)])
    # c, b, a tie on bits (most, within the tolerance); d has fewer; e has most but costs more
    bits = np.array([0.5, 0.9, 0.9, 0.9 + 0.1 * TIE_RTOL, 2.0])
    minutes = np.array([5.0, 10.0, 5.0, 7.0, 1.0])
    idx = np.arange(5)
    assert best_check(idx, eco, bits, minutes, ids) == 2  # b: fewest minutes among c, b, a
    minutes[:] = 5.0
    assert best_check(idx, eco, bits, minutes, ids) == 3  # c, b, a tie on all: "a" by id
    bits[3] = 0.8
    assert best_check(idx, eco, bits, minutes, ids) == 2  # a has fewer bits now: "b" by id
    assert by_preference(idx, eco, bits, minutes, ids) == [2, 1, 3, 0, 4]
    assert not cheaper(50.0, 50.0 * (1 + 0.5 * TIE_RTOL)) and cheaper(50.0, 50.1)
    assert best_check(np.array([4, 0]), eco, bits, minutes, ids) == 0  # cost comes first
    assert best_check(np.array([1, 2]), eco, np.array([0, 1e-13, 0, 0, 0.0]), minutes,
                      ids) == 2  # bits within BITS_ATOL of each other tie; "b" by id
    assert BITS_ATOL > 1e-13


def test_twin_checks_go_by_id_in_the_fast_planner_and_the_reference():
    base = tiny_model()
    fuse = base.checks["fuse"]
    twins = {cid: dataclasses.replace(fuse, id=cid, title=cid) for cid in ("z_fuse", "a_fuse")}
    # the twins are listed z_fuse first; after "silent" they are the checks left to do
    checks = {k: v for k, v in base.checks.items() if k in ("listen_click", "secure_load")}
    m = dataclasses.replace(base, checks=checks | twins)
    ev = Evidence(complaints=("will_not_release",)).with_outcome("listen_click", "silent")
    for reference in (False, True):
        pl = plan(m, ev, reference=reference)
        assert pl.action.id == "a_fuse"  # listed after its twin, first by id
        rows = {r.id: r for r in pl.checks()}
        assert rows["a_fuse"].eco == pytest.approx(rows["z_fuse"].eco, rel=1e-12)
        order = [r.id for r in pl.checks()]
        assert order[:2] == ["a_fuse", "z_fuse"]


def test_an_idle_check_keeps_an_exact_zero_of_information():
    m = tiny_model()
    idle = Check("idle", "Idle", 1.0, ("a", "b"), {}, {"a": 0.7, "b": 0.3}, {"a": 0.7, "b": 0.3})
    m2 = dataclasses.replace(m, checks={**m.checks, "idle": idle})
    ev = Evidence(complaints=("will_not_release",))
    row = next(r for r in plan(m2, ev).checks() if r.id == "idle")
    assert row.bits == pytest.approx(0.0, abs=1e-12)
    _same_plan(plan(m2, ev), plan(m2, ev, reference=True))
