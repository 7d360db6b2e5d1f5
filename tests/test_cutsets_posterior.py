"""The exact top-event probability against the reasoner's hypothesis tables.

The reasoner (diagnose/reasoning/tables.py) weighs fault sets of at most two
causes with P(h) proportional to the product of the odds q/(1 - q) of its
causes, against "unknown" with odds u/(1 - u). Scaled by P(no fault) =
prod(1 - q), the weight of a fault set is its probability with independent
causes; summed over the fault sets whose tree holds it gives P(top and at
most two faults). The reasoner cannot go further: fault sets of three or
more causes are not hypotheses, so P(top) itself is compared where at most
two causes exist, or with the three-fault term added by hand.
"""

from __future__ import annotations

import math
from dataclasses import replace

import pytest
from ftmodels import gate, make_model, random_trees, two_of_three
from hypothesis import given, settings

from diagnose.kb.model import Model
from diagnose.reasoning.cutsets import top_event_probability

tables = pytest.importorskip("diagnose.reasoning.tables")


def at_most_two_faults(model: Model, top: str) -> float:
    """P(top and at most two causes present), from the reasoner's prior and complaint tables."""
    import numpy as np

    tight = replace(model, leak=0.0)  # kept alive: the tables hold it by a weak reference
    t = tables.tables_for(tight, 2)
    u = model.unknown_prior / 1000
    odds = np.exp(t.log_prior - t.log_prior[t.unknown]) * (u / (1 - u))  # prod of q/(1-q)
    holds = t.complaint(top) == 1.0
    holds[t.unknown] = False
    none = math.prod(1.0 - c.q for c in model.causes.values())
    return none * float(odds[holds].sum())


@pytest.mark.parametrize("kind", ["or", "and"])
def test_two_cause_trees_agree(kind):
    model = make_model(causes={"a": 40, "b": 250}, complaints={"top": gate("top", kind, "ab")})
    assert at_most_two_faults(model, "top") == pytest.approx(
        top_event_probability(model, "top"), rel=1e-9)


def test_two_of_three_agrees_with_the_three_fault_term_added():
    model = two_of_three(0.1)
    # 3 q^2 (1 - q) = 0.027 from the reasoner; + q^3 = 0.001; = 0.028 (NUREG-0492 definitions)
    assert at_most_two_faults(model, "top") == pytest.approx(0.027, abs=1e-12)
    assert at_most_two_faults(model, "top") + 0.1 ** 3 == pytest.approx(
        top_event_probability(model, "top"), abs=1e-12)


@settings(max_examples=40, deadline=None)
@given(random_trees())
def test_difference_is_at_most_the_chance_of_three_faults(model):
    qs = [c.q for c in model.causes.values()]
    dist = [1.0]  # P(exactly j causes present)
    for q in qs:
        dist = [a * (1 - q) + b * q for a, b in zip(dist + [0.0], [0.0] + dist)]
    three_or_more = sum(dist[3:])
    gap = top_event_probability(model, "top") - at_most_two_faults(model, "top")
    assert -1e-12 <= gap <= three_or_more + 1e-12
