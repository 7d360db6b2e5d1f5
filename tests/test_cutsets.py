"""Minimal cut sets and top-event probabilities against worked values and brute force."""

from __future__ import annotations

import math
import time

import pytest
from ftmodels import brute_force, gate, make_model, random_trees, two_of_three
from hypothesis import HealthCheck, given, settings

from diagnose.errors import InputError
from diagnose.reasoning.cutsets import (
    cause_probabilities,
    min_cut_upper_bound,
    minimal_cut_sets,
    rare_event_approximation,
    top_event_probability,
)


def test_two_of_three_worked_values():
    model = two_of_three(0.1)
    sets = minimal_cut_sets(model, "top")
    q = cause_probabilities(model)
    assert set(sets) == {frozenset("ab"), frozenset("ac"), frozenset("bc")}
    # NUREG-0492 (1981) ch. XI definitions, worked by hand: 3 q^2 (1 - q) + q^3
    assert top_event_probability(model, "top") == pytest.approx(0.028, abs=1e-12)
    # NUREG-0492: rare-event approximation, sum of cut-set products = 3 q^2
    assert rare_event_approximation(sets, q) == pytest.approx(0.030, abs=1e-12)
    # NUREG-0492: min-cut upper bound 1 - (1 - q^2)^3
    assert min_cut_upper_bound(sets, q) == pytest.approx(0.029701, abs=1e-12)


def test_absorption_and_shared_event():
    # top = a OR (a AND b) OR (b AND c): a + ab + bc = a + bc (Boolean absorption)
    model = make_model(
        causes={"a": 10, "b": 20, "c": 30},
        complaints={"top": gate("top", "or", ("a", "ab", "bc"))},
        events=[gate("ab", "and", ("a", "b")), gate("bc", "and", ("b", "c"))],
    )
    assert minimal_cut_sets(model, "top") == (frozenset("a"), frozenset("bc"))
    # exact by hand: P(a) + P(not a) P(b) P(c)
    assert top_event_probability(model, "top") == pytest.approx(0.01 + 0.99 * 0.02 * 0.03)


def test_cut_sets_sorted_by_size_then_listing_order():
    model = make_model(
        causes={"z": 1, "y": 1, "x": 1},
        complaints={"top": gate("top", "or", ("xy", "z"))},
        events=[gate("xy", "and", ("x", "y"))],
    )
    assert minimal_cut_sets(model, "top") == (frozenset("z"), frozenset("xy"))


def test_unknown_top_is_an_input_error():
    with pytest.raises(InputError):
        minimal_cut_sets(two_of_three(), "nothing")


def test_forty_causes_under_or_gates_is_exact_and_fast():
    priors = {f"c{i:02d}": 1 + i % 7 for i in range(40)}
    names = list(priors)
    model = make_model(
        causes=priors,
        complaints={"top": gate("top", "or", ("e1", "e2", "e3", "c39"))},
        events=[gate("e1", "or", names[:15]), gate("e2", "or", names[15:30]),
                gate("e3", "or", names[30:39] + names[:3])],  # shares c00..c02 with e1
    )
    start = time.perf_counter()
    p = top_event_probability(model, "top")
    sets = minimal_cut_sets(model, "top")
    assert time.perf_counter() - start < 1.0
    expected = 1.0 - math.prod(1.0 - v / 1000 for v in priors.values())  # OR of independents
    assert p == pytest.approx(expected, rel=1e-12)
    assert len(sets) == 40


def test_shared_events_across_and_gates_against_hand_shannon():
    # top = (a AND b) OR (a AND c); P = q_a (1 - (1 - q_b)(1 - q_c))
    model = make_model(
        causes={"a": 100, "b": 200, "c": 300},
        complaints={"top": gate("top", "or", ("ab", "ac"))},
        events=[gate("ab", "and", ("a", "b")), gate("ac", "and", ("a", "c"))],
    )
    assert top_event_probability(model, "top") == pytest.approx(0.1 * (1 - 0.8 * 0.7))


# --- random trees against brute-force enumeration of all states ----------------------
@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(random_trees())
def test_random_trees_match_brute_force(model):
    p, minimal = brute_force(model, "top")
    assert set(minimal_cut_sets(model, "top")) == minimal
    assert top_event_probability(model, "top") == pytest.approx(p, abs=1e-12)
    q = cause_probabilities(model)
    sets = minimal_cut_sets(model, "top")
    # NUREG-0492: for independent causes, exact <= min-cut upper bound <= rare-event sum
    assert p <= min_cut_upper_bound(sets, q) + 1e-12
    assert min_cut_upper_bound(sets, q) <= rare_event_approximation(sets, q) + 1e-12
