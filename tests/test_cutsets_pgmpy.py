"""Exact top-event probability against pgmpy on the fault tree mapped to a Bayesian network.

The mapping is that of Bobbio, Portinale, Minichino and Ciancamerla,
"Improving the analysis of dependable systems by mapping fault trees into
Bayesian networks", Reliability Engineering and System Safety 71 (2001):
basic events are root nodes with P(true) = q, every gate is a node with a
deterministic CPT over its inputs, and the top event's marginal is queried
(here with variable elimination).
"""

from __future__ import annotations

import random
from itertools import product

import pytest
from ftmodels import gate, make_model, random_trees, two_of_three
from hypothesis import given, settings

from diagnose.kb.model import Model
from diagnose.reasoning.cutsets import top_event_probability

pgmpy = pytest.importorskip("pgmpy")


def bayesian_network_probability(model: Model, top: str) -> float:
    """P(top) by variable elimination on the mapped network (Bobbio et al. 2001)."""
    import logging

    from pgmpy.factors.discrete import TabularCPD
    from pgmpy.inference import VariableElimination
    from pgmpy.models import DiscreteBayesianNetwork

    logging.getLogger("pgmpy").setLevel(logging.ERROR)
    edges, cpds, seen = [], [], set()

    def add(node: str) -> None:
        if node in seen:
            return
        seen.add(node)
        if node in model.causes:
            q = model.causes[node].q
            cpds.append(TabularCPD(node, 2, [[1.0 - q], [q]]))
            return
        g = model.complaints[node].gate if node in model.complaints else model.events[node]
        for i in g.inputs:
            add(i)
            edges.append((i, node))
        # pgmpy's column order: the first evidence variable changes slowest, as in product()
        holds = [float(g.holds(bool(s) for s in states))
                 for states in product((0, 1), repeat=len(g.inputs))]
        cpds.append(TabularCPD(node, 2, [[1.0 - h for h in holds], holds],
                               evidence=list(g.inputs), evidence_card=[2] * len(g.inputs)))

    add(top)
    net = DiscreteBayesianNetwork(edges)
    net.add_cpds(*cpds)
    result = VariableElimination(net).query([top], show_progress=False)
    return float(result.values[1])


def test_two_of_three_by_bayesian_network():
    # Bobbio et al. (2001) mapping; 0.028 worked by hand from NUREG-0492 definitions
    model = two_of_three(0.1)
    assert bayesian_network_probability(model, "top") == pytest.approx(0.028, abs=1e-12)
    assert top_event_probability(model, "top") == pytest.approx(0.028, abs=1e-12)


def test_thirty_causes_with_shared_events_by_bayesian_network():
    rng = random.Random(1522)
    causes = {f"c{i:02d}": rng.choice([2, 10, 40, 150, 300]) for i in range(30)}
    names = list(causes)
    events = []
    for n in range(10):  # AND gates over three causes drawn with overlap
        events.append(gate(f"a{n}", "and", rng.sample(names, 3)))
    events.append(gate("vote", "k_of_n", ["a0", "a1", "c00", "c29"], k=2))
    events.append(gate("top", "or", [f"a{n}" for n in range(2, 10)] + ["vote"]
                       + [c for c in names if not any(c in e.inputs for e in events)]))
    model = make_model(causes=causes, complaints={"complaint": gate("complaint", "or", ["top"])},
                       events=events)
    expected = bayesian_network_probability(model, "complaint")
    assert top_event_probability(model, "complaint") == pytest.approx(expected, abs=1e-12)


@settings(max_examples=15, deadline=None)
@given(random_trees())
def test_random_trees_by_bayesian_network(model):
    expected = bayesian_network_probability(model, "top")
    assert top_event_probability(model, "top") == pytest.approx(expected, abs=1e-12)
