"""The posterior against brute-force enumeration and against pgmpy's VariableElimination."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from synthetic import brute_posterior, pgmpy_posterior, random_evidence, random_model

from diagnose.errors import InputError
from diagnose.kb.model import UNKNOWN_CAUSE
from diagnose.reasoning.evidence import Evidence
from diagnose.reasoning.posterior import posterior
from diagnose.reasoning.synthetic import synthetic_model, tiny_model
from diagnose.reasoning.tables import tables_for


def as_dict(model, evidence, max_faults=1):
    # the exact Bayesian posterior (the open-world rule is tested on its own)
    post = posterior(model, evidence, max_faults=max_faults, open_world=False)
    t = post.tables
    return {t.label(h): float(post.p[h]) for h in range(t.n_hyp)}


@settings(max_examples=60, deadline=None)
@given(seed=st.integers(0, 10_000), n=st.integers(2, 6), max_faults=st.sampled_from([1, 2]),
       zeros=st.booleans())
def test_posterior_equals_enumeration_of_the_joint(seed, n, max_faults, zeros):
    # Bayes' rule over the enumerated hypotheses (brute force) is the reference.
    model = random_model(seed, n_causes=n, zeros=zeros)
    evidence = random_evidence(model, seed)
    ref = brute_posterior(model, evidence, max_faults)
    if not all(math.isfinite(v) for v in ref.values()):  # every hypothesis ruled out
        assert posterior(model, evidence, max_faults=max_faults).contradiction
        return
    got = as_dict(model, evidence, max_faults)
    assert got.keys() == ref.keys()
    for k in ref:
        assert got[k] == pytest.approx(ref[k], abs=1e-12)


@pytest.mark.parametrize("seed", [1, 2, 3])
@pytest.mark.parametrize("max_faults", [1, 2])
def test_posterior_equals_pgmpy_variable_elimination(seed, max_faults):
    # Reference: variable elimination (Koller and Friedman, Probabilistic Graphical Models,
    # 2009, ch. 9) as implemented by pgmpy, on the same network.
    pytest.importorskip("pgmpy")
    model = random_model(seed, n_causes=5, n_checks=5)
    for k in range(3):  # several evidence sets, soft findings as virtual evidence
        evidence = random_evidence(model, seed * 10 + k)
        ref = pgmpy_posterior(model, evidence, max_faults)
        got = as_dict(model, evidence, max_faults)
        for h in ref:
            assert got[h] == pytest.approx(ref[h], abs=1e-9)


def test_tiny_model_against_pgmpy_with_complaint_finding_and_failed_repair():
    pytest.importorskip("pgmpy")
    m = tiny_model()
    ev = (Evidence(complaints=("will_not_release",)).with_outcome("listen_click", "silent")
          .with_finding("coil_ohms", {"ok": 0.7, "low": 0.3}).with_repair("replace_fuse", False))
    for mf in (1, 2):
        ref = pgmpy_posterior(m, ev, mf)
        got = as_dict(m, ev, mf)
        assert max(abs(got[h] - ref[h]) for h in ref) < 1e-9


def test_single_fault_prior_is_the_ratio_of_priors():
    m = tiny_model()
    p = as_dict(m, Evidence())
    total = sum(c.prior for c in m.causes.values()) + m.unknown_prior
    # prior 20 of 87 + 5 (pack values in tiny_model)
    assert p["fuse_blown"] == pytest.approx(20 / total)
    assert p[UNKNOWN_CAUSE] == pytest.approx(5 / total)


def test_pair_prior_is_the_product_of_odds():
    m = tiny_model()
    t = tables_for(m, 2)
    # independent basic events (Fault Tree Handbook, NUREG-0492, ch. XI): odds q / (1 - q)
    odds = {c: m.causes[c].q / (1 - m.causes[c].q) for c in m.causes}
    p = np.exp(t.log_prior)
    labels = [t.label(h) for h in range(t.n_hyp)]
    i, j = labels.index("fuse_blown"), labels.index("fuse_blown+coil_open")
    assert p[j] / p[i] == pytest.approx(odds["coil_open"])


def test_and_gate_complaint_needs_a_pair():
    m = tiny_model()
    ev = Evidence(complaints=("noise_and_slip",))
    one = posterior(m, ev, max_faults=1).ranking()
    two = posterior(m, ev, max_faults=2).ranking()
    # with one fault only the leak explains an AND of two causes: "unknown" leads
    assert one.top.cause == UNKNOWN_CAUSE
    # with pairs the AND holds under {lining_worn, lining_oily}: the first known hypothesis
    known = [h for h in two.hypotheses if h.cause != UNKNOWN_CAUSE]
    assert known[0].cause == "lining_worn+lining_oily"
    assert two.entries[0].p < one.entries[0].p


def test_soft_evidence_is_the_weighted_likelihood():
    m = tiny_model()
    e = Evidence(complaints=("will_not_release",))
    soft = as_dict(m, e.with_finding("coil_ohms", {"ok": 0.5, "open": 0.5}))
    hard_ok = as_dict(m, e.with_outcome("coil_ohms", "ok"))
    assert hard_ok["coil_open"] < soft["coil_open"]
    # virtual evidence (Pearl 1988, 2.2.2): sum_o w_o P(o|h); rows of tiny_model's coil_ohms:
    # 0.5 * 0.03/2 + 0.5 * 0.97 for coil_open against 0.5 * 0.96 + 0.5 * 0.02 otherwise
    lr = (0.5 * 0.015 + 0.5 * 0.97) / (0.5 * 0.96 + 0.5 * 0.02)
    base = as_dict(m, e)
    assert soft["coil_open"] / soft["fuse_blown"] == pytest.approx(
        lr * base["coil_open"] / base["fuse_blown"])


def test_unsure_and_skip_carry_no_evidence():
    m = tiny_model()
    e = Evidence(complaints=("will_not_release",))
    assert as_dict(m, e.with_unsure("fuse").with_skip("gap")) == as_dict(m, e)


def test_long_sessions_do_not_underflow():
    m = synthetic_model(50, seed=3)
    ev = Evidence(complaints=(next(iter(m.complaints)),))
    for _ in range(400):  # the same answer many times: likelihoods of 1e-300 and less
        for cid, chk in list(m.checks.items())[:5]:
            ev = ev.with_finding(cid + "", {chk.outcomes[-1]: 1.0})
    post = posterior(m, ev)
    assert np.isfinite(post.p).all() and post.p.sum() == pytest.approx(1.0)


def test_evidence_that_rules_out_everything_puts_all_mass_on_unknown():
    t = tiny_model()
    ev = Evidence().with_repair("replace_fuse", True).with_repair("replace_cable", True)
    post = posterior(t, ev)  # two different cures cannot both happen under one cause
    assert post.contradiction and post.top() == (UNKNOWN_CAUSE, 1.0)


def test_unknown_ids_are_input_errors():
    with pytest.raises(InputError):
        posterior(tiny_model(), Evidence().with_outcome("nope", "x"))
    with pytest.raises(InputError):
        posterior(tiny_model(), Evidence().with_outcome("fuse", "melted"))
    with pytest.raises(InputError):
        tables_for(tiny_model(), 3)


def test_ranking_lists_every_cause_and_unknown_most_likely_first():
    m = tiny_model()
    r = posterior(m, Evidence(complaints=("will_not_release",))).ranking()
    ids = [e.cause for e in r.entries]
    assert sorted(ids) == sorted([*m.causes, UNKNOWN_CAUSE])
    ps = [e.p for e in r.entries]
    assert ps == sorted(ps, reverse=True)
    assert r.to_list()[0].keys() == {"cause", "p"}
    limited = posterior(m, Evidence(complaints=("will_not_release",))).ranking(limit=3)
    assert [e.cause for e in limited.entries] == ids[:3]


def test_tables_are_cached_per_model_and_released_with_it():
    import gc

    from diagnose.reasoning import tables as tmod

    m = tiny_model()
    assert tables_for(m) is tables_for(m)
    key = (id(m), 1)
    assert key in tmod._CACHE
    del m
    gc.collect()
    assert key not in tmod._CACHE


def test_vectorised_fault_tree_agrees_with_model_holds():
    for seed in range(20):
        m = random_model(seed, n_causes=5)
        for mf in (1, 2):
            t = tables_for(m, mf)
            for k in m.complaints:
                vec = t.complaint(k)
                for h in range(t.n_hyp - 1):
                    faults = frozenset(t.label(h).split("+"))
                    assert (vec[h] == 1.0) == m.holds(k, faults)
