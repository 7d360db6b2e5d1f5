"""Importance measures against worked values and brute-force enumeration."""

from __future__ import annotations

import math
from dataclasses import replace
from itertools import product

import pytest
from ftmodels import gate, make_model, random_trees, two_of_three
from hypothesis import given, settings

from diagnose.kb.model import Model
from diagnose.reasoning.cutsets import minimal_cut_sets
from diagnose.reasoning.importance import importances


def test_two_of_three_worked_values():
    # Worked from the definitions in NUREG-0492 (1981), 2-out-of-3 with q = 0.1 each:
    # P(T) = 0.028, P(T | a) = 0.19, P(T | not a) = 0.01, P(ab + ac) = 0.019
    a = importances(two_of_three(0.1), "top")[0]
    assert a.cause == "a"
    assert a.birnbaum == pytest.approx(0.18, abs=1e-12)  # 0.19 - 0.01
    assert a.fussell_vesely == pytest.approx(19 / 28, abs=1e-12)  # 0.678571
    assert a.risk_achievement_worth == pytest.approx(6.7857, abs=1e-4)  # 0.19 / 0.028
    assert a.risk_reduction_worth == pytest.approx(2.8, abs=1e-12)  # 0.028 / 0.01


def test_cause_in_every_cut_set_has_infinite_risk_reduction_worth():
    model = make_model(causes={"a": 100, "b": 200},
                       complaints={"top": gate("top", "and", ("a", "b"))})
    a, b = importances(model, "top")
    assert math.isinf(a.risk_reduction_worth)
    assert a.to_dict()["risk_reduction_worth"] is None
    assert a.fussell_vesely == pytest.approx(1.0)
    assert b.birnbaum == pytest.approx(0.1)  # P(T | b) - P(T | not b) = q_a


def test_absorbed_cause_scores_nothing():
    # a + ab = a: b is in no minimal cut set
    model = make_model(causes={"a": 100, "b": 200},
                       complaints={"top": gate("top", "or", ("a", "ab"))},
                       events=[gate("ab", "and", ("a", "b"))])
    b = importances(model, "top")[1]
    assert b.birnbaum == pytest.approx(0.0, abs=1e-15)
    assert b.fussell_vesely == 0.0
    assert b.risk_achievement_worth == pytest.approx(1.0)
    assert b.risk_reduction_worth == pytest.approx(1.0)


def _with_q(model: Model, cause: str, q: float) -> Model:
    causes = dict(model.causes)
    causes[cause] = replace(causes[cause], prior=q * 1000)
    return replace(model, causes=causes)


def _enumerate(model: Model, top: str, event) -> float:
    """P(event(present causes)) by enumerating every state of the tree's causes."""
    causes = model.tree_causes(top)
    total = 0.0
    for states in product((False, True), repeat=len(causes)):
        present = frozenset(c for c, s in zip(causes, states) if s)
        if event(present):
            w = 1.0
            for c, s in zip(causes, states):
                w *= model.causes[c].q if s else 1.0 - model.causes[c].q
            total += w
    return total


@settings(max_examples=60, deadline=None)
@given(random_trees())
def test_random_trees_match_definitions_by_enumeration(model):
    sets = minimal_cut_sets(model, "top")
    p = _enumerate(model, "top", lambda f: model.holds("top", f))
    for imp in importances(model, "top"):
        c = imp.cause
        p1 = _enumerate(_with_q(model, c, 1.0), "top", lambda f: model.holds("top", f))
        p0 = _enumerate(_with_q(model, c, 0.0), "top", lambda f: model.holds("top", f))
        with_c = [s for s in sets if c in s]
        fv = _enumerate(model, "top", lambda f, w=with_c: any(s <= f for s in w)) / p
        # Both sides sum many float products; with basic events near 1e-6 and a top event
        # near certainty they part in the 8th digit (found by hypothesis), so 1e-6 relative.
        assert imp.birnbaum == pytest.approx(p1 - p0, abs=1e-12)
        assert imp.fussell_vesely == pytest.approx(fv, rel=1e-6, abs=1e-12)
        assert imp.risk_achievement_worth == pytest.approx(p1 / p, rel=1e-6)
        if p0 > 0:
            assert imp.risk_reduction_worth == pytest.approx(p / p0, rel=1e-6)
        else:
            assert math.isinf(imp.risk_reduction_worth)
