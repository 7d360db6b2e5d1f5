"""The knowledge analysis of a pack, per complaint and for the pack, as values.

``analyze(model)`` gathers, for every complaint:

* the fault-tree analysis (``cutsets``, ``importance``): minimal cut sets, the
  top-event probability exactly, by the rare-event approximation and by the
  min-cut upper bound, and the importance of each cause;
* the testability (``testability``) in site and in phone mode: detection and
  isolation shares, ambiguity groups with a hint each;
* the expected effort to cure from the simulator, when the simulator is
  installed, beside the entropy lower bound and the chart policy; a share
  ``UNKNOWN_RATE`` of the simulated calls has a cause outside the pack, and
  the effort says how often each policy escalated (or ranked "unknown" first)
  on those and how many repairs it tried in vain.

The values turn into plain data with ``to_dict()`` (what ``--json`` prints and
the Markdown / HTML reports read); the screen draws them
(:class:`diagnose.views_reasoning.PackAnalysisView`). Pure: no I/O.

See "Reading the analysis" (DEVELOPERS.md; drafted in docs_analysis.md) for what
each figure means.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import asdict, dataclass, field, replace
from typing import Any

from diagnose.errors import DiagnoseError, InputError
from diagnose.kb.model import Model
from diagnose.reasoning.cutsets import (
    cause_probabilities,
    min_cut_upper_bound,
    minimal_cut_sets,
    rare_event_approximation,
    top_event_probability,
)
from diagnose.reasoning.importance import Importance, importances
from diagnose.reasoning.testability import (
    MODES,
    THRESHOLD,
    Testability,
    available_checks,
    dependency_matrix,
    idle_checks,
    testability,
    undetected_causes,
    weighted_share,
)

NO_SIMULATOR = "simulator not available: expected effort not computed"
RUNS = 100  # simulated calls per policy and complaint, unless asked otherwise
SEED = 1  # the same draws every time: the figures of two analyses compare
UNKNOWN_RATE = 0.1  # share of simulated calls whose cause is outside the pack


@dataclass(frozen=True)
class Effort:
    """Expected work to cure a complaint, in minutes and checks.

    ``expected_*`` come from the simulator with the planner's policy,
    ``chart_*`` from the simulator with the fixed chart policy, ``bound_*``
    are the entropy lower bound (see ``entropy_bound``). Minutes, checks and
    ``cured`` are over the calls with a known cause. On the share
    ``unknown_rate`` of calls with a cause outside the pack,
    ``*escalated_when_unknown`` is the share the policy escalated, or ranked
    "unknown" first before any repair, and ``*wrong_repairs_when_unknown`` the
    mean repairs it tried (see ``diagnose.reasoning.simulate``). Fields the
    simulator did not fill are ``None``; ``note`` says why.
    """

    available: bool
    note: str = ""
    expected_minutes: float | None = None
    expected_checks: float | None = None
    chart_minutes: float | None = None
    chart_checks: float | None = None
    bound_minutes: float | None = None
    bound_checks: float | None = None
    entropy_bits: float | None = None
    cured: float | None = None  # share of simulated calls the planner cured (no escalation)
    runs: int | None = None
    unknown_rate: float | None = None
    escalated_when_unknown: float | None = None  # planner
    wrong_repairs_when_unknown: float | None = None  # planner
    chart_escalated_when_unknown: float | None = None
    chart_wrong_repairs_when_unknown: float | None = None

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


@dataclass(frozen=True)
class ComplaintAnalysis:
    """Fault tree, testability and effort of one complaint."""

    complaint: str
    title: str
    causes: tuple[tuple[str, str, float], ...]  # (id, title, prior) in listing order
    cut_sets: tuple[tuple[str, ...], ...]
    probability: float  # exact top-event probability
    rare_event: float
    upper_bound: float  # min-cut upper bound
    importances: tuple[Importance, ...]
    testability: Mapping[str, Testability]  # mode -> figures
    effort: Effort
    matrix: Mapping[str, Mapping[str, float]] = field(default_factory=dict)  # check -> cause -> TV

    @property
    def groups(self) -> tuple[Any, ...]:
        """The ambiguity groups of every mode, site first."""
        return tuple(g for m in MODES for g in self.testability[m].groups)

    def to_dict(self) -> dict[str, Any]:
        return {
            "complaint": self.complaint,
            "title": self.title,
            "causes": [{"id": c, "title": t, "prior": p} for c, t, p in self.causes],
            "fault_tree": {
                "cut_sets": [list(s) for s in self.cut_sets],
                "probability": {
                    "exact": self.probability,
                    "rare_event": self.rare_event,
                    "min_cut_upper_bound": self.upper_bound,
                },
                "importance": [i.to_dict() for i in self.importances],
            },
            "testability": {m: t.to_dict() for m, t in self.testability.items()},
            "dependency_matrix": {k: dict(row) for k, row in self.matrix.items()},
            "effort": self.effort.to_dict(),
        }


@dataclass(frozen=True)
class PackAnalysis:
    """The analysis of every complaint of a pack (or of the one asked for) and the totals."""

    pack: str
    title: str
    version: str
    threshold: float
    complaints: tuple[ComplaintAnalysis, ...]
    detection: Mapping[str, float]  # mode -> prior-weighted share over the pack's causes
    isolation: Mapping[str, float]  # mode -> share isolated in every complaint they belong to
    undetected: Mapping[str, tuple[str, ...]]  # mode -> causes no check detects
    idle_checks: tuple[str, ...]
    effort_note: str = ""
    notes: tuple[str, ...] = field(default=())

    @property
    def groups(self) -> tuple[Any, ...]:
        return tuple(g for c in self.complaints for g in c.groups)

    def to_dict(self) -> dict[str, Any]:
        return {
            "pack": self.pack,
            "title": self.title,
            "version": self.version,
            "threshold": self.threshold,
            "summary": {
                "detection": dict(self.detection),
                "isolation": dict(self.isolation),
                "undetected": {m: list(v) for m, v in self.undetected.items()},
                "ambiguity_groups": {
                    m: sum(1 for g in self.groups if g.mode == m) for m in MODES
                },
                "idle_checks": list(self.idle_checks),
                "effort": self.effort_note,
                "notes": list(self.notes),
            },
            "complaints": [c.to_dict() for c in self.complaints],
        }


def analyze(
    model: Model,
    *,
    complaint: str | None = None,
    threshold: float = THRESHOLD,
    effort: bool = True,
    runs: int | None = None,
    unknown_rate: float = UNKNOWN_RATE,
    progress: Callable[[int, int], None] | None = None,
) -> PackAnalysis:
    """The knowledge analysis of ``model``: every complaint, or only ``complaint``.

    ``effort=False`` leaves out the simulator (the entropy bound is still
    given); ``runs`` is passed on to the simulator when it takes a number of runs;
    ``unknown_rate`` is the share of simulated calls with a cause outside the pack.
    ``progress(done, total)`` is called as the work goes: after each simulated
    call (``total``: complaints × runs × the two policies), or, without the
    simulator, after each complaint.

    Raises:
        InputError: unknown complaint, ``unknown_rate`` outside [0, 1).
    """
    if complaint is not None and complaint not in model.complaints:
        known = ", ".join(model.complaints)
        raise InputError("--complaint", f"unknown complaint {complaint!r}; known: {known}")
    if not 0.0 <= unknown_rate < 1.0:
        raise InputError("--unknown-rate", f"give a share from 0 up to 1, got {unknown_rate}")
    ids = (complaint,) if complaint else tuple(model.complaints)
    simulator = _simulator() if effort else None
    if simulator is not None:
        note = f"simulated, {runs or RUNS} calls per policy and complaint (seed {SEED})"
        if unknown_rate > 0:
            note += f", {100 * unknown_rate:.0f}% of them with a cause outside the pack"
    else:
        note = NO_SIMULATOR if effort else "effort not asked for"
    per = (runs or RUNS) * len(_POLICIES) if simulator is not None else 1
    parts = tuple(
        analyze_complaint(model, cid, threshold=threshold, simulator=simulator, note=note,
                          runs=runs, unknown_rate=unknown_rate,
                          progress=None if progress is None
                          else _offset(progress, n * per, len(ids) * per))
        for n, cid in enumerate(ids)
    )
    causes = tuple(dict.fromkeys(c for cid in ids for c in model.tree_causes(cid)))
    isolated = {
        m: tuple(c for c in causes
                 if all(c in p.testability[m].isolated
                        for p in parts if c in p.testability[m].causes))
        for m in MODES
    }
    return PackAnalysis(
        pack=model.id,
        title=model.title,
        version=model.version,
        threshold=threshold,
        complaints=parts,
        detection={m: weighted_share(model, causes, set(causes) - set(
            undetected_causes(model, mode=m, threshold=threshold))) for m in MODES},
        isolation={m: weighted_share(model, causes, isolated[m]) for m in MODES},
        undetected={m: tuple(c for c in undetected_causes(model, mode=m, threshold=threshold)
                             if c in causes) for m in MODES},
        idle_checks=idle_checks(model, threshold=threshold),
        effort_note=note,
    )


def analyze_complaint(
    model: Model,
    complaint: str,
    *,
    threshold: float = THRESHOLD,
    simulator: Any = None,
    note: str = NO_SIMULATOR,
    runs: int | None = None,
    unknown_rate: float = UNKNOWN_RATE,
    progress: Callable[[int, int], None] | None = None,
) -> ComplaintAnalysis:
    """Fault tree, testability and effort of one complaint (see ``analyze``).

    ``progress(done, total)``: after each simulated call, or once at the end
    without the simulator.
    """
    sets = minimal_cut_sets(model, complaint)
    q = cause_probabilities(model)
    causes = model.tree_causes(complaint)
    bound = entropy_bound(model, complaint)
    eff = Effort(available=False, note=note, **bound)
    if simulator is not None:
        eff = simulator(model, complaint, bound, runs, unknown_rate) if progress is None \
            else simulator(model, complaint, bound, runs, unknown_rate, progress=progress)
    elif progress is not None:
        progress(1, 1)
    return ComplaintAnalysis(
        complaint=complaint,
        title=model.complaints[complaint].title,
        causes=tuple((c, model.causes[c].title, model.causes[c].prior) for c in causes),
        cut_sets=tuple(tuple(c for c in model.causes if c in s) for s in sets),
        probability=top_event_probability(model, complaint),
        rare_event=rare_event_approximation(sets, q),
        upper_bound=min_cut_upper_bound(sets, q),
        importances=importances(model, complaint, cut_sets=sets),
        testability={m: testability(model, complaint, mode=m, threshold=threshold)
                     for m in MODES},
        effort=eff,
        matrix=dependency_matrix(model, complaint, mode="site"),
    )


def entropy_bound(model: Model, complaint: str) -> dict[str, float | None]:
    """The entropy lower bound of the effort to find the cause of ``complaint``.

    With the causes of the tree weighted by their priors, ``H`` bits must be
    learnt. A check with ``m`` outcomes gives at most ``log2 m`` bits, so at
    least ``H / log2 m_max`` checks are needed on average, and at least
    ``H / r`` minutes where ``r`` is the best bits-per-minute of the site
    checks that see a cause of the complaint; the expected minutes of the
    quickest repair of the true cause are added to the minutes. A bound for
    strategies that find the cause before they repair; trying a repair as a
    test can go below it.

    References:
        C. E. Shannon, "A mathematical theory of communication", 1948
        (noiseless coding theorem); D. W. Loveland, "Performance bounds for
        binary testing with arbitrary weights", Acta Informatica 22, 1985.
    """
    causes = model.tree_causes(complaint)
    total = sum(model.causes[c].prior for c in causes)
    probs = [model.causes[c].prior / total for c in causes] if total > 0 else []
    bits = -sum(p * math.log2(p) for p in probs if p > 0)
    seeing = [k for k in available_checks(model, "site")
              if len(k.outcomes) > 1 and any(c in k.effects for c in causes)]
    repair = 0.0
    for c, p in zip(causes, probs):
        fixes = [model.repairs[r].minutes for r in model.repairs_for(c)]
        repair += p * (min(fixes) if fixes else 0.0)
    if not seeing:
        return {"entropy_bits": bits, "bound_checks": None, "bound_minutes": None}
    best_bits = max(math.log2(len(k.outcomes)) for k in seeing)
    best_rate = max(math.log2(len(k.outcomes)) / k.minutes for k in seeing)
    return {
        "entropy_bits": bits,
        "bound_checks": bits / best_bits,
        "bound_minutes": bits / best_rate + repair,
    }


def complaint_model(model: Model, complaint: str) -> Model:
    """``model`` cut down to one complaint: its tree's causes and events, every check and repair.

    What the simulator runs on to give the effort of one complaint.
    """
    keep: set[str] = set()
    stack = [complaint]
    while stack:
        node = stack.pop()
        gate = model.complaints[node].gate if node in model.complaints else model.events.get(node)
        if gate is not None and node not in keep:
            keep.add(node)
            stack.extend(gate.inputs)
    tree = set(model.tree_causes(complaint))
    return replace(
        model,
        complaints={complaint: model.complaints[complaint]},
        events={e: g for e, g in model.events.items() if e in keep},
        causes={c: v for c, v in model.causes.items() if c in tree},
        cases={},
    )


_POLICIES = ("planner", "chart")  # the policies the simulator compares


def _offset(progress: Callable[[int, int], None], before: int, total: int,
            ) -> Callable[[int, int], None]:
    """``progress`` for one complaint's share of the work, after ``before`` units."""
    return lambda done, _: progress(before + done, total)


def _simulator() -> Any:
    """A function (model, complaint, bound, runs, unknown_rate, progress=None) -> Effort."""
    from diagnose.reasoning.simulate import simulate

    def run(model: Model, complaint: str, bound: dict[str, Any], runs: int | None,
            unknown_rate: float = UNKNOWN_RATE,
            progress: Callable[[int, int], None] | None = None) -> Effort:
        n = runs or RUNS
        try:
            report = simulate(complaint_model(model, complaint), runs=n, seed=SEED,
                              policies=_POLICIES, unknown_rate=unknown_rate, progress=progress)
        except DiagnoseError as exc:
            return Effort(available=False, note=f"simulator failed: {exc}", **bound)
        planner, chart = report.policies["planner"], report.policies["chart"]
        note = f"{n} simulated calls per policy on this complaint's causes (seed {SEED})"
        if unknown_rate > 0:
            note = (f"{n} simulated calls per policy (seed {SEED}), {planner.unknown_runs} of "
                    "them with a cause outside the pack, the rest on this complaint's causes")
        return Effort(
            available=True,
            note=note,
            expected_minutes=planner.mean_minutes,
            expected_checks=planner.mean_checks,
            chart_minutes=chart.mean_minutes,
            chart_checks=chart.mean_checks,
            cured=planner.cured,
            runs=n,
            unknown_rate=unknown_rate,
            escalated_when_unknown=planner.escalated_when_unknown,
            wrong_repairs_when_unknown=planner.wrong_repairs_when_unknown,
            chart_escalated_when_unknown=chart.escalated_when_unknown,
            chart_wrong_repairs_when_unknown=chart.wrong_repairs_when_unknown,
            **bound,
        )

    return run
