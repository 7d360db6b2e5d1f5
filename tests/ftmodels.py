"""Small compiled Models built in code, for the fault-tree and testability tests.

No YAML and no compiler: the dataclasses of ``diagnose.kb.model`` directly, so
that these tests do not depend on the loader.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from itertools import product

from hypothesis import strategies as st

from diagnose.errors import Source
from diagnose.kb.model import Cause, Check, Complaint, Gate, Model, Repair


def gate(id: str, kind: str, inputs: Sequence[str], k: int = 1) -> Gate:
    return Gate(id=id, title=id.replace("_", " "), kind=kind, inputs=tuple(inputs), k=k,
                source=Source("tree.yaml", 1, 1))


def check(
    id: str,
    effects: Mapping[str, Mapping[str, float]],
    *,
    normal: Mapping[str, float] | None = None,
    outcomes: Sequence[str] = ("ok", "bad"),
    where: str = "site",
    minutes: float = 5.0,
) -> Check:
    """A check; ``normal`` defaults to the first outcome at 0.95."""
    if normal is None:
        rest = 0.05 / (len(outcomes) - 1)
        normal = {o: (0.95 if n == 0 else rest) for n, o in enumerate(outcomes)}
    even = {o: 1.0 / len(outcomes) for o in outcomes}
    return Check(id=id, title=id.replace("_", " "), minutes=minutes, outcomes=tuple(outcomes),
                 effects={c: dict(r) for c, r in effects.items()}, normal=dict(normal),
                 unknown=even, where=where, ask=f"do {id}",
                 caller=f"please {id}" if where == "phone" else "",
                 source=Source("checks.yaml", 10, 5))


def make_model(
    *,
    causes: Mapping[str, float],
    complaints: Mapping[str, Gate],
    events: Iterable[Gate] = (),
    checks: Iterable[Check] = (),
    repairs: Mapping[str, Sequence[str]] | None = None,
    id: str = "test-pack",
) -> Model:
    """A Model from priors (per 1,000), top gates by complaint id, events, checks, repairs.

    Every cause gets its own repair ``fix_<cause>`` unless ``repairs`` maps
    repair ids to the causes they fix.
    """
    if repairs is None:
        repairs = {f"fix_{c}": (c,) for c in causes}
    return Model(
        id=id, title=id, version="0", packs=(id,), notice="", parameters={},
        complaints={cid: Complaint(cid, cid.replace("_", " "), g, source=Source("tree.yaml", 1, 1))
                    for cid, g in complaints.items()},
        events={g.id: g for g in events},
        causes={c: Cause(c, c.replace("_", " "), p, source=Source("causes.yaml", n + 1, 5))
                for n, (c, p) in enumerate(causes.items())},
        checks={k.id: k for k in checks},
        repairs={r: Repair(r, r, 30.0, tuple(fx)) for r, fx in repairs.items()},
        cautions={}, cases={},
    )


def two_of_three(q: float = 0.1) -> Model:
    """A 2-out-of-3 tree over causes a, b, c, each with probability ``q``."""
    return make_model(causes={"a": q * 1000, "b": q * 1000, "c": q * 1000},
                      complaints={"top": gate("top", "k_of_n", ("a", "b", "c"), k=2)})


@st.composite
def random_trees(draw):
    """A tree over 2..7 causes with or / and / k_of_n gates; gates may share inputs."""
    n = draw(st.integers(2, 7))
    causes = {f"c{i}": draw(st.sampled_from([1, 5, 50, 200, 500, 900])) for i in range(n)}
    nodes = list(causes)
    gates = []
    for g in range(draw(st.integers(1, 5))):
        inputs = draw(st.lists(st.sampled_from(nodes), min_size=1, max_size=4, unique=True))
        kind = draw(st.sampled_from(["or", "and", "k_of_n"]))
        k = draw(st.integers(1, len(inputs))) if kind == "k_of_n" else 1
        gates.append(gate(f"g{g}", kind, inputs, k))
        nodes.append(f"g{g}")
    top = gates[-1]
    # every cause must reach the top: an OR of the last gate and every node nothing uses
    used = {i for g in gates for i in g.inputs}
    loose = [c for c in nodes[:-1] if c not in used]
    if loose:
        top = gate("root", "or", (top.id, *loose))
        gates.append(top)
    model = make_model(causes=causes, complaints={"top": gate("top_c", "or", (top.id,))},
                       events=gates)
    return model


# --- brute force, the reference for the exact methods -----------------------------------
def brute_force(model: Model, top: str) -> tuple[float, set[frozenset[str]]]:
    """P(top) and the minimal cut sets by enumerating every state of the tree's causes."""
    causes = model.tree_causes(top)
    prob = 0.0
    failing: list[frozenset[str]] = []
    for states in product((False, True), repeat=len(causes)):
        present = frozenset(c for c, s in zip(causes, states) if s)
        if model.holds(top, present):
            weight = 1.0
            for c, s in zip(causes, states):
                q = model.causes[c].q
                weight *= q if s else 1.0 - q
            prob += weight
            failing.append(present)
    minimal = {s for s in failing if not any(o < s for o in failing)}
    return prob, minimal
