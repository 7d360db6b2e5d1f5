"""Test helpers: small random Models built in code, and independent reference posteriors.

``brute_posterior`` enumerates the joint distribution directly from the
Model's own methods (``Model.holds``, ``Check.effects``), sharing no code with
the vectorised reasoner. ``pgmpy_posterior`` (from ``diagnose.bench``, which
writes the model out as a pgmpy network) asks pgmpy's VariableElimination.
"""

from __future__ import annotations

import itertools
import math

import numpy as np

from diagnose.bench import pgmpy_posterior  # noqa: F401  (re-exported for the tests)
from diagnose.kb.model import (
    PER,
    UNKNOWN_CAUSE,
    Cause,
    Check,
    Complaint,
    Gate,
    Model,
    Repair,
)
from diagnose.reasoning.evidence import Evidence


def random_model(seed: int, *, n_causes: int = 5, n_checks: int = 4, zeros: bool = False,
                 unknown_prior: float = 5.0, leak: float = 0.01) -> Model:
    """A small random pack: random gates (or, and, k_of_n), events, effects and repairs."""
    rng = np.random.default_rng(seed)
    ids = [f"c{i}" for i in range(n_causes)]
    causes = {c: Cause(c, c, float(rng.uniform(1, 80))) for c in ids}
    events: dict[str, Gate] = {}
    if n_causes >= 3:
        ins = tuple(rng.choice(ids, size=2, replace=False))
        kind = str(rng.choice(["or", "and"]))
        events["e0"] = Gate("e0", "e0", kind, ins, k=2 if kind == "and" else 1)
    complaints = {}
    for j in range(2):
        pool = ids + list(events)
        size = int(rng.integers(1, min(4, len(pool)) + 1))
        ins = tuple(rng.choice(pool, size=size, replace=False))
        kind = str(rng.choice(["or", "or", "and", "k_of_n"])) if size > 1 else "or"
        k = int(rng.integers(1, size + 1)) if kind == "k_of_n" else (size if kind == "and" else 1)
        complaints[f"k{j}"] = Complaint(f"k{j}", f"k{j}", Gate(f"k{j}", f"k{j}", kind, ins, k))
    checks = {}
    for j in range(n_checks):
        n_out = int(rng.integers(2, 5))
        outs = tuple(f"o{i}" for i in range(n_out))

        def row(n_out: int = n_out, outs: tuple[str, ...] = outs) -> dict[str, float]:
            w = rng.dirichlet(np.ones(n_out) * 0.7)
            if zeros and rng.random() < 0.3:
                w[int(rng.integers(0, n_out))] = 0.0
                w = w / w.sum()
            return {o: float(x) for o, x in zip(outs, w)}

        listed = [c for c in ids if rng.random() < 0.5]
        checks[f"x{j}"] = Check(f"x{j}", f"x{j}", float(rng.integers(1, 20)), outs,
                                {c: row() for c in listed}, row(), row(),
                                where=str(rng.choice(["phone", "site"])),
                                caller="caller wording")
    repairs = {}
    for j, c in enumerate(ids):
        fixes = (c,) if rng.random() < 0.7 else tuple(rng.choice(ids, size=2, replace=False))
        repairs[f"r{j}"] = Repair(f"r{j}", f"r{j}", float(rng.integers(5, 90)), fixes,
                                  success=float(rng.uniform(0.6, 0.99)))
    return Model(id="random", title="random", version="0", packs=("random",), notice="",
                 parameters={}, complaints=complaints, events=events, causes=causes,
                 checks=checks, repairs=repairs, cautions={}, cases={},
                 unknown_prior=unknown_prior, leak=leak)


def random_evidence(model: Model, seed: int, *, soft: bool = True) -> Evidence:
    """Some complaints, hard and soft findings, and repairs, drawn from ``seed``."""
    rng = np.random.default_rng(seed + 7919)
    ev = Evidence()
    for k in model.complaints:
        if rng.random() < 0.6:
            ev = ev.with_complaint(k)
    for cid, chk in model.checks.items():
        u = rng.random()
        if u < 0.4:
            ev = ev.with_outcome(cid, str(rng.choice(chk.outcomes)))
        elif u < 0.6 and soft:
            a, b = rng.choice(chk.outcomes, size=2, replace=False)
            w = float(rng.uniform(0.1, 0.9))
            ev = ev.with_finding(cid, {str(a): w, str(b): 1 - w})
    for rid in model.repairs:
        if rng.random() < 0.2:
            ev = ev.with_repair(rid, False)
    return ev


def hypotheses(model: Model, max_faults: int) -> list[frozenset[str]]:
    ids = list(model.causes)
    out = [frozenset({c}) for c in ids]
    if max_faults == 2:
        out += [frozenset(p) for p in itertools.combinations(ids, 2)]
    return out


def _prior(model: Model, h: frozenset[str] | None, max_faults: int) -> float:
    if max_faults == 1:
        return model.unknown_prior if h is None else model.causes[next(iter(h))].prior
    qs = [model.unknown_prior / PER] if h is None else [model.causes[c].q for c in h]
    return math.prod(q / (1 - q) for q in qs)


def _check_row(chk: Check, h: frozenset[str] | None) -> dict[str, float]:
    if h is None:
        return dict(chk.unknown)
    listed = [c for c in sorted(h) if c in chk.effects]
    if not listed:
        return dict(chk.normal)
    return {o: sum(chk.effects[c][o] for c in listed) / len(listed) for o in chk.outcomes}


def brute_posterior(model: Model, evidence: Evidence, max_faults: int = 1) -> dict[str, float]:
    """P(h | evidence) by enumerating every hypothesis; keys like "c1", "c0+c2", "unknown"."""
    joint: dict[str, float] = {}
    for h in hypotheses(model, max_faults) + [None]:
        w = _prior(model, h, max_faults)
        for k in evidence.complaints:
            w *= 1.0 if h is None or model.holds(k, h) else model.leak
        for cid, weights in evidence.findings.items():
            row = _check_row(model.checks[cid], h)
            w *= sum(wt * row[o] for o, wt in weights.items())
        for rid, cured in evidence.repairs:
            r = model.repairs[rid]
            fixes = h is not None and any(c in h for c in r.fixes)
            p_cure = r.success if fixes else 0.0
            w *= p_cure if cured else 1.0 - p_cure
        label = UNKNOWN_CAUSE if h is None else "+".join(sorted(h, key=list(model.causes).index))
        joint[label] = w
    total = sum(joint.values())
    if total == 0:  # every hypothesis ruled out
        return {k: math.nan for k in joint}
    return {k: v / total for k, v in joint.items()}
