"""Models built in code: random packs of any size, and one small hand-made brake model.

:func:`synthetic_model` draws a pack with a given number of causes (for the
benchmark and for property tests); :func:`pack_data` turns any such Model back
into the raw data of a pack file, so that the knowledge compiler can be timed
on it; :func:`tiny_model` is a five-cause brake for examples and tests.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from diagnose.kb.model import (
    Case,
    Cause,
    Caution,
    Check,
    Complaint,
    Gate,
    Model,
    Parameter,
    Repair,
    Step,
)


def _fill(row: dict[str, float], outcomes: tuple[str, ...]) -> dict[str, float]:
    """Complete a row over ``outcomes``: the outcomes left out share the rest evenly."""
    rest = [o for o in outcomes if o not in row]
    left = max(0.0, 1.0 - sum(row.values()))
    out = {o: float(row.get(o, left / len(rest) if rest else 0.0)) for o in outcomes}
    return out


def _check(id: str, title: str, minutes: float, outcomes: tuple[str, ...],
           normal: dict[str, float], effects: dict[str, dict[str, float]], *,
           unknown: dict[str, float] | None = None, **kw: Any) -> Check:
    """A check with its rows (``normal``, ``unknown``, each effect) completed by :func:`_fill`."""
    return Check(
        id=id, title=title, minutes=minutes, outcomes=outcomes,
        effects={c: _fill(r, outcomes) for c, r in effects.items()},
        normal=_fill(normal, outcomes),
        unknown=_fill(unknown or {}, outcomes), ask=kw.pop("ask", title), **kw,
    )


def tiny_model(*, unknown_prior: float = 5.0, leak: float = 0.01) -> Model:
    """A small brake model: two complaints, five causes, a preparation step.

    ``will_not_release`` is an OR over ``no_coil_power`` (fuse or cable) and
    the coil and lining causes; ``slips`` needs oil on the lining or a worn
    lining; ``noise_and_slip`` is an AND gate (it needs a pair of causes).
    """
    causes = {c.id: c for c in (
        Cause("fuse_blown", "Fuse blown", 20), Cause("cable_break", "Cable broken", 10),
        Cause("coil_open", "Coil winding open", 12), Cause("lining_worn", "Lining worn", 30),
        Cause("lining_oily", "Oil on the lining", 15),
    )}
    events = {"no_coil_power": Gate("no_coil_power", "No voltage at the coil", "or",
                                    ("fuse_blown", "cable_break"))}
    complaints = {k.id: k for k in (
        Complaint("will_not_release", "Brake will not release",
                  Gate("will_not_release", "Brake will not release", "or",
                       ("no_coil_power", "coil_open", "lining_worn"))),
        Complaint("slips", "Brake slips", Gate("slips", "Brake slips", "or",
                                               ("lining_oily", "lining_worn"))),
        Complaint("noise_and_slip", "Slips and rubs", Gate("noise_and_slip", "Slips and rubs",
                                                            "and", ("lining_oily", "lining_worn"),
                                                            k=2)),
    )}
    checks = {c.id: c for c in (
        _check("listen_click", "Listen for the click", 2, ("click", "silent"), {"click": 0.97},
               {"coil_open": {"silent": 0.97}, "fuse_blown": {"silent": 0.98},
                "cable_break": {"silent": 0.95}, "lining_worn": {"click": 0.8}},
               unknown={"click": 0.5}, where="phone", caller="Does the brake click?"),
        _check("fuse", "Look at the fuse", 3, ("intact", "blown"), {"intact": 0.98},
               {"fuse_blown": {"blown": 0.97}}, cautions=("lockout",)),
        _check("coil_ohms", "Coil resistance", 10, ("ok", "open", "low"), {"ok": 0.96},
               {"coil_open": {"open": 0.97}}, cautions=("lockout",)),
        _check("continuity", "Cable continuity", 8, ("ok", "broken"), {"ok": 0.97},
               {"cable_break": {"broken": 0.9}}),
        _check("oil_traces", "Look for oil on the lining", 5, ("dry", "oily"), {"dry": 0.95},
               {"lining_oily": {"oily": 0.9}}, needs=("secure_load",)),
        _check("gap", "Measure the air gap", 12, ("ok", "worn"), {"ok": 0.95},
               {"lining_worn": {"worn": 0.9}}, needs=("secure_load",)),
        _check("secure_load", "Support the load", 6, ("done", "cannot"), {"done": 0.99}, {},
               preparation=True, only_if={"gravity_load": "yes"}),
    )}
    repairs = {r.id: r for r in (
        Repair("replace_fuse", "Replace the fuse", 10, ("fuse_blown",), ("fuse",), 0.95),
        Repair("replace_cable", "Replace the cable", 45, ("cable_break",), ("cable",), 0.95),
        Repair("replace_coil", "Replace the magnet body", 60, ("coil_open",), ("magnet body",),
               0.95),
        Repair("replace_disc", "Replace the friction disc", 90, ("lining_worn", "lining_oily"),
               ("friction disc",), 0.9, needs=("secure_load",)),
        Repair("clean_lining", "Degrease the lining", 30, ("lining_oily",), ("solvent",), 0.6),
    )}
    parameters = {"gravity_load": Parameter("gravity_load", "Gravity load?",
                                            choices=("yes", "no"), default="yes")}
    cautions = {"lockout": Caution("lockout", "DANGER", "Isolate and lock out.")}
    cases = {"fuse_found": Case("fuse_found", ("will_not_release",),
                                (Step(check="listen_click", answer="silent"),
                                 Step(check="fuse", answer="blown")), ("fuse_blown",))}
    return Model(
        id="tiny-brake", title="A tiny brake", version="1", packs=("tiny-brake",),
        notice="This tool is an aid.", parameters=parameters, complaints=complaints,
        events=events, causes=causes, checks=checks, repairs=repairs, cautions=cautions,
        cases=cases, unknown_prior=unknown_prior, leak=leak,
    )


def synthetic_model(n_causes: int, *, seed: int, checks_per_cause: float = 0.2,
                    causes_per_check: float = 5.0, max_outcomes: int = 4,
                    phone_share: float = 0.25, unknown_prior: float = 5.0,
                    leak: float = 0.01) -> Model:
    """A random pack of ``n_causes`` causes, reproducible from ``seed``.

    About ``checks_per_cause`` checks per cause, each listing about
    ``causes_per_check`` causes (every cause is listed by at least one check
    when the chunks allow); 2 to ``max_outcomes`` outcomes per check; one
    repair per cause plus a few that fix several; complaints of about 20
    causes each, with intermediate OR events; one preparation check that some
    site checks need.
    """
    rng = np.random.default_rng(seed)
    n = int(n_causes)
    if n < 2:
        raise ValueError("a synthetic model needs at least two causes")
    ids = [f"c{i:05d}" for i in range(n)]
    # the draws are made in this order (causes, trees, checks, repairs): seeds stay comparable
    causes = _synthetic_causes(rng, ids)
    members = _complaint_members(rng, ids)
    events, complaints = _fault_trees(rng, ids, members)
    checks = _synthetic_checks(rng, ids, checks_per_cause=checks_per_cause,
                               causes_per_check=causes_per_check, max_outcomes=max_outcomes,
                               phone_share=phone_share)
    repairs = _synthetic_repairs(rng, ids, members)
    return Model(
        id=f"synthetic-{n}", title=f"Synthetic pack of {n} causes", version="0",
        packs=(f"synthetic-{n}",), notice="Synthetic pack for tests and benchmarks.",
        parameters={}, complaints=complaints, events=events, causes=causes, checks=checks,
        repairs=repairs, cautions={}, cases={}, unknown_prior=unknown_prior, leak=leak,
    )


def _synthetic_causes(rng: np.random.Generator, ids: list[str]) -> dict[str, Cause]:
    """Causes with log-normal priors that sum to about 900."""
    w = rng.lognormal(0.0, 1.0, len(ids))
    prior = 900.0 * w / w.sum()
    return {c: Cause(c, f"Cause {c}", float(round(max(p, 1e-4), 6))) for c, p in zip(ids, prior)}


def _complaint_members(rng: np.random.Generator, ids: list[str]) -> list[list[str]]:
    """The causes under each complaint: each cause under one (a fifth under two)."""
    n = len(ids)
    n_k = max(2, n // 20)
    home = rng.integers(0, n_k, n)
    members: list[list[str]] = [[] for _ in range(n_k)]
    for i, k in enumerate(home):
        members[k].append(ids[i])
        if rng.random() < 0.2:
            members[int(rng.integers(0, n_k))].append(ids[i])
    return members


def _fault_trees(rng: np.random.Generator, ids: list[str], members: list[list[str]],
                 ) -> tuple[dict[str, Gate], dict[str, Complaint]]:
    """One OR complaint per member list, its causes grouped by 1 to 4 under OR events."""
    events: dict[str, Gate] = {}
    complaints: dict[str, Complaint] = {}
    for k, mem in enumerate(members):
        mem = list(dict.fromkeys(mem)) or [ids[int(rng.integers(0, len(ids)))]]
        inputs: list[str] = []
        i = 0
        while i < len(mem):
            size = int(rng.integers(1, 5))
            group = mem[i:i + size]
            if len(group) >= 2:
                eid = f"e{len(events):05d}"
                events[eid] = Gate(eid, f"Event {eid}", "or", tuple(group))
                inputs.append(eid)
            else:
                inputs += group
            i += size
        kid = f"k{k:04d}"
        complaints[kid] = Complaint(kid, f"Complaint {kid}", Gate(kid, f"Complaint {kid}", "or",
                                                                   tuple(inputs)))
    return events, complaints


def _synthetic_checks(rng: np.random.Generator, ids: list[str], *, checks_per_cause: float,
                      causes_per_check: float, max_outcomes: int, phone_share: float,
                      ) -> dict[str, Check]:
    """A preparation step, then checks on chunks of the shuffled causes plus a few extra."""
    n = len(ids)
    n_x = max(1, round(n * checks_per_cause))
    order = rng.permutation(n)
    chunks = np.array_split(order, n_x)
    checks: dict[str, Check] = {}
    prep = "x_prepare"
    checks[prep] = _check(prep, "Prepare the unit", 5, ("done", "cannot"), {"done": 0.99}, {},
                          preparation=True)
    for j, chunk in enumerate(chunks):
        listed = [ids[i] for i in chunk]
        extra = int(rng.poisson(max(0.0, causes_per_check - len(listed)))) if n > 5 else 0
        listed += [ids[int(i)] for i in rng.integers(0, n, extra)]
        listed = list(dict.fromkeys(listed))
        k = int(rng.integers(2, max_outcomes + 1))
        outs = tuple(f"o{i}" for i in range(k))
        normal = {outs[0]: float(round(rng.uniform(0.9, 0.98), 3))}
        effects = {}
        for c in listed:
            to = outs[int(rng.integers(1, k))]
            strength = rng.uniform(0.7, 0.95) if rng.random() < 0.8 else rng.uniform(0.3, 0.6)
            effects[c] = {to: float(round(strength, 3))}
        where = "phone" if rng.random() < phone_share else "site"
        needs = (prep,) if where == "site" and rng.random() < 0.1 else ()
        xid = f"x{j:05d}"
        checks[xid] = _check(xid, f"Check {xid}", float(rng.choice([1, 2, 3, 5, 10, 15, 20, 30])),
                             outs, normal, effects, where=where, needs=needs,
                             caller=f"Tell me about {xid}." if where == "phone" else "")
    return checks


def _synthetic_repairs(rng: np.random.Generator, ids: list[str], members: list[list[str]],
                       ) -> dict[str, Repair]:
    """One repair per cause, plus a unit replacement for some complaints' first causes."""
    repairs: dict[str, Repair] = {}
    for i, c in enumerate(ids):
        rid = f"r{i:05d}"
        repairs[rid] = Repair(rid, f"Fix {c}", float(rng.choice([5, 10, 20, 30, 45, 60, 90, 120])),
                              (c,), (f"part for {c}",), float(round(rng.uniform(0.85, 0.98), 3)),
                              where="phone" if rng.random() < 0.05 else "site")
    for k, mem in enumerate(members):
        if len(mem) >= 3 and rng.random() < 0.3:
            rid = f"r_unit{k:04d}"
            fixes = tuple(dict.fromkeys(mem[:4]))
            repairs[rid] = Repair(rid, f"Replace unit {k}", 150.0, fixes, ("unit",), 0.97)
    return repairs


def pack_data(model: Model) -> dict[str, Any]:
    """The raw data of one pack file (manifest and all sections) that compiles to ``model``.

    Covers what :func:`synthetic_model` and :func:`tiny_model` use (no measurements).
    """
    def check(c: Check) -> dict[str, Any]:
        d: dict[str, Any] = {"id": c.id, "title": c.title, "minutes": c.minutes,
                             "where": c.where, "ask": c.ask or c.title,
                             "outcomes": list(c.outcomes), "normal": dict(c.normal),
                             "unknown": dict(c.unknown),
                             "effects": {k: dict(v) for k, v in c.effects.items()}}
        if c.caller:
            d["caller"] = c.caller
        for key in ("needs", "cautions", "tools"):
            if getattr(c, key):
                d[key] = list(getattr(c, key))
        if c.only_if:
            d["only_if"] = dict(c.only_if)
        if c.preparation:
            d["preparation"] = True
        return d

    def gate(g: Gate) -> dict[str, Any]:
        d: dict[str, Any] = {"id": g.id, "title": g.title, "gate": g.kind, "inputs": list(g.inputs)}
        if g.kind == "k_of_n":
            d["k"] = g.k
        return d

    def repair(r: Repair) -> dict[str, Any]:
        d: dict[str, Any] = {"id": r.id, "title": r.title, "minutes": r.minutes,
                             "fixes": list(r.fixes), "success": r.success, "where": r.where}
        for key in ("parts", "needs", "cautions"):
            if getattr(r, key):
                d[key] = list(getattr(r, key))
        return d

    data: dict[str, Any] = {
        "pack": model.id, "title": model.title, "version": model.version,
        "notice": model.notice, "unknown_prior": model.unknown_prior, "leak": model.leak,
        "cautions": [{"id": c.id, "level": c.level, "text": c.text}
                     for c in model.cautions.values()],
        "parameters": [
            {k: v for k, v in {"id": p.id, "prompt": p.prompt, "unit": p.unit or None,
                               "choices": list(p.choices) or None, "default": p.default}.items()
             if v is not None}
            for p in model.parameters.values()],
        "complaints": [{**gate(k.gate), "title": k.title} for k in model.complaints.values()],
        "events": [gate(e) for e in model.events.values()],
        "causes": [{"id": c.id, "title": c.title, "prior": c.prior} for c in model.causes.values()],
        "checks": [check(c) for c in model.checks.values()],
        "repairs": [repair(r) for r in model.repairs.values()],
    }
    return {k: v for k, v in data.items() if v != []}
