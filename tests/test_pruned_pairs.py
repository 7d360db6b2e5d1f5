"""Two faults with pruned pairs (``diagnose.reasoning.tables``, "Pruned pairs") against every pair.

The reference is the same posterior over every pair of causes (the tables as
they are below ``PRUNE_ABOVE``): on small packs and random evidence, every
cause's probability, "unknown", every single and every pair kept, and each
lump against the sum of its pairs agree to 1e-9.
"""

from __future__ import annotations

import numpy as np
import pytest

from diagnose.kb.loader import load_model
from diagnose.reasoning.evidence import Evidence
from diagnose.reasoning.posterior import posterior
from diagnose.reasoning.synthetic import synthetic_model, tiny_model
from diagnose.reasoning.tables import pruned_tables, tables_for

TOL = 1e-9


def _evidence(model, rng, steps: int) -> list[Evidence]:
    """A complaint, then answers (some soft), a repair that did not cure, a finding before."""
    complaint = list(model.complaints)[int(rng.integers(len(model.complaints)))]
    ev = Evidence(complaints=(complaint,))
    out = [ev]
    checks = [c for c in model.checks.values() if len(c.outcomes) >= 2]
    for i in range(steps):
        chk = checks[int(rng.integers(len(checks)))]
        if chk.id in ev.findings:
            continue
        if i % 3 == 2:  # soft: two outcomes weighed
            a, b = chk.outcomes[:2]
            ev = ev.with_finding(chk.id, {a: 0.7, b: 0.3})
        else:
            ev = ev.with_outcome(chk.id, chk.outcomes[int(rng.integers(len(chk.outcomes)))])
        out.append(ev)
        if i == 2 and model.repairs:
            rid = list(model.repairs)[int(rng.integers(len(model.repairs)))]
            ev = ev.with_repair(rid, False)
            out.append(ev)
    cause = list(model.causes)[int(rng.integers(len(model.causes)))]
    out.append(ev.with_history(cause, 3.0))  # found on this unit before
    return out


def _compare(model, ev, open_world: bool) -> None:
    full = posterior(model, ev, max_faults=2, open_world=open_world, prune=False)
    mine = posterior(model, ev, max_faults=2, open_world=open_world, prune=True)
    assert mine.tables is not full.tables and mine.tables.plan is not None
    assert mine.contradiction == full.contradiction
    assert mine.unknown == pytest.approx(full.unknown, abs=TOL)
    np.testing.assert_allclose(mine.causes(), full.causes(), rtol=0, atol=TOL)
    t = mine.tables
    for h in range(t.lump_start):  # singles and pairs of touched causes
        a, b = (int(x) for x in t.members[h])
        assert mine.p[h] == pytest.approx(full.p[t._full_index(a, b)], abs=TOL)
    members = full.tables.members
    for h in range(t.lump_start, t.unknown):  # each lump: the sum of its pairs
        a = int(t.members[h, 0])
        groups = [set(t.plan.classes[k].tolist()) for k in t.lump[h] if k >= 0]
        if a >= 0:
            inside = (((members[:, 0] == a) & np.isin(members[:, 1], list(groups[0])))
                      | ((members[:, 1] == a) & np.isin(members[:, 0], list(groups[0]))))
        else:
            one, two = groups[0], groups[-1]
            x, y = members[:, 0], members[:, 1]
            inside = (np.isin(x, list(one)) & np.isin(y, list(two))) | (
                np.isin(x, list(two)) & np.isin(y, list(one)))
        assert mine.p[h] == pytest.approx(full.p[inside].sum(), abs=TOL)
    top_full = full.ranking(limit=10).hypotheses
    top_mine = mine.ranking(limit=10).hypotheses
    assert [e.p for e in top_mine] == pytest.approx([e.p for e in top_full], abs=TOL)
    for x, y in zip(top_mine, top_full):
        assert x.cause == y.cause or abs(x.p - y.p) < TOL


@pytest.mark.parametrize("seed", range(6))
@pytest.mark.parametrize("open_world", [True, False])
def test_pruned_pairs_give_the_posterior_of_every_pair(seed, open_world):
    model = synthetic_model(40 + 5 * seed, seed=seed)
    rng = np.random.default_rng(seed)
    for ev in _evidence(model, rng, steps=6):
        _compare(model, ev, open_world)


def test_pruned_pairs_on_the_tiny_brake():
    model = tiny_model()
    ev = Evidence(complaints=("noise_and_slip",))  # an AND gate: only pairs produce it
    for step in (lambda e: e, lambda e: e.with_outcome("oil_traces", "oily"),
                 lambda e: e.with_outcome("gap", "ok"), lambda e: e.with_repair("clean_lining",
                                                                                 False)):
        ev = step(ev)
        _compare(model, ev, True)


def test_pruned_pairs_on_the_shipped_pack():
    model = load_model("spring-applied-brake")
    rng = np.random.default_rng(7)
    for ev in _evidence(model, rng, steps=5):
        for open_world in (True, False):
            _compare(model, ev, open_world)


def test_unobservable_causes_form_their_own_class():
    """A cause no available check lists is capped by the open-world rule; so is its lump."""
    model = synthetic_model(80, seed=3)
    ev = Evidence(complaints=(list(model.complaints)[0],))
    for cid in [c for c in model.checks if c not in ev.findings][: len(model.checks) // 2]:
        ev = ev.with_skip(cid)
    t = pruned_tables(model, ev)
    assert len(t.plan.classes) == 2  # some untouched causes are unobservable now
    _compare(model, ev, True)


def test_a_pruned_table_is_small_and_refuses_a_complaint_it_was_not_made_for():
    model = synthetic_model(400, seed=1)
    ev = Evidence(complaints=(list(model.complaints)[0],))
    t = pruned_tables(model, ev)
    n = len(model.causes)
    assert t.n_hyp < n + len(t.plan.touched) ** 2 + 10 < n * (n - 1) // 2
    other = list(model.complaints)[1]
    if not set(model.tree_causes(other)) <= t.plan.explicit:
        with pytest.raises(Exception, match="not reported"):
            t.complaint(other)
    assert tables_for(model, 2, ev) is not t  # 400 causes: every pair, as before
    assert tables_for(model, 2, ev, prune=True) is t


@pytest.mark.parametrize("seed", range(3))
def test_a_lump_predicts_an_answer_as_the_mean_of_its_pairs(seed):
    """For a check not answered yet, a lump's row is the prior-weighted mean of its pairs' rows;
    a single's and a kept pair's rows are theirs."""
    model = synthetic_model(36, seed=seed)
    rng = np.random.default_rng(seed)
    ev = _evidence(model, rng, steps=3)[-2]
    full = tables_for(model, 2)
    t = pruned_tables(model, ev)
    weight = np.exp(full.log_prior)
    members = full.members
    for cid, table in t.checks.items():
        mine = table.dense(t.n_hyp)
        theirs = full.checks[cid].dense(full.n_hyp)
        for h in range(t.lump_start):
            a, b = (int(x) for x in t.members[h])
            np.testing.assert_allclose(mine[:, h], theirs[:, t._full_index(a, b)], atol=1e-12)
        for h in range(t.lump_start, t.unknown):
            a = int(t.members[h, 0])
            groups = [t.plan.classes[k].tolist() for k in t.lump[h] if k >= 0]
            if a >= 0:
                inside = (((members[:, 0] == a) & np.isin(members[:, 1], groups[0]))
                          | ((members[:, 1] == a) & np.isin(members[:, 0], groups[0])))
            else:
                x, y = members[:, 0], members[:, 1]
                inside = (np.isin(x, groups[0]) & np.isin(y, groups[-1])) | (
                    np.isin(x, groups[-1]) & np.isin(y, groups[0]))
            w = weight[inside]
            np.testing.assert_allclose(mine[:, h], theirs[:, inside] @ w / w.sum(), atol=1e-12)
        np.testing.assert_allclose(mine[:, t.unknown], theirs[:, full.unknown], atol=0)
