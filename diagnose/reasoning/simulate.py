"""Simulated service calls: how fast and how well each policy finds and cures the cause.

Each run draws a true cause from the priors (known causes only: a run must be
curable; the simulated unit has the pack's default nameplate, so a cause that
nameplate rules out with ``only_if`` is never drawn), then the complaint from
the complaints whose fault tree that cause produces alone (uniformly; when
none does, because of AND gates, from those whose tree holds it). Every check
answers from the true cause's row of its effects (``normal`` for a cause it
does not list; measurements give their verdict directly); with probability
``noise`` an answer is replaced by a different outcome, chosen uniformly. A
repair that fixes the true cause cures with probability ``success``; any
other repair does not. A run ends at the cure, or at an escalation, which
adds ``escalation_minutes``.

Unknown causes: a share ``unknown_rate`` of the runs has a true cause outside
the pack. Such a run gets a complaint drawn uniformly from the pack's
complaints; every check answers from its ``normal`` row (the outcomes when
none of the listed causes is present), with the same answer noise, and no
repair cures.

All draws (true causes, complaints, answers, cures) come from ``seed`` before
any policy runs, so every policy meets the same cases and the same answers.
Which runs are unknown, and their complaints, come from a second stream
(``[seed, 7]``): with ``unknown_rate=0`` every draw and figure is the same as
without unknown runs, and with a higher rate the known runs keep their draws.

Each run depends on its own draws only, so the runs can be split into parts
(:meth:`Draws.part`) and run apart, for example in several processes
(``simulate(..., executor=...)``, ``diagnose simulate --jobs N``): the report
is the same, figure for figure. A ``progress(done, total)`` callback, passed
in by the command that draws a bar, is told as the runs are done.

Policies:

* ``planner``: :func:`diagnose.reasoning.planner.next_action` at every step;
* ``reference``: the same with the planner's reference version
  (``next_action(..., reference=True)``); it must give exactly the planner's
  runs, only slower (the benchmark compares both). Not run unless asked for;
* ``chart``: what a printed chart can do at best: the complaint's checks in
  one fixed order, ranked by the prior mass of the causes each check can
  reveal per minute (a static p/c order); at the first abnormal finding (an
  outcome less likely under ``normal`` than under some cause) repair the most
  likely revealed cause (prior × P(outcome | cause); revealed = the causes
  that make the outcome more likely than ``normal``) and go on down the chart
  if that did not cure; after the last check, repair the remaining causes of
  the tree in static p/c order;
* ``listing``: the chart rule with the checks in the pack's listing order
  (for reference only);
* ``random``: the chart rule with the checks in a random order (a floor).

Reported per policy: mean checks, mean minutes to a cure (an escalation counts
``escalation_minutes``), first-repair success (the first repair cured, over
all runs), top-1 accuracy (the top of the posterior ranking, at the moment the
first repair is chosen, is the true cause; over the runs that reach a repair),
first-repair hits (the first repair fixes the true cause; same runs) and the
share of runs cured (the rest were escalated); all of them over the runs with a
known cause. Over the runs with an unknown cause (when there are any):

* ``escalated_when_unknown``: the share of those runs that end before any
  repair is tried, in an escalation (or, for the planner by phone, a site
  visit) or with "unknown" on top of the posterior ranking. The chart
  policies always try a repair first, so they score 0;
* ``wrong_repairs_when_unknown``: the mean number of repairs tried (none of
  them can cure).

The information-theoretic lower bound on the number of checks is the entropy of
the cause prior over log2 of the most outcomes any check has.

References:
    D. Heckerman, J. S. Breese, K. Rommelse, "Decision-theoretic
    troubleshooting", CACM 38(3), 1995 (evaluation by simulated sessions).
    C. E. Shannon, "A mathematical theory of communication", Bell System
    Technical Journal 27, 1948 (entropy bound on questions to ask).
"""

from __future__ import annotations

import bisect
import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from diagnose.errors import InputError
from diagnose.kb.model import UNKNOWN_CAUSE, Model
from diagnose.reasoning.evidence import Evidence
from diagnose.reasoning.nameplate import excluded_causes
from diagnose.reasoning.plancache import PlanCache, plan_cache
from diagnose.reasoning.planner import (
    DEFAULT,
    Settings,
    missing_prerequisites,
    next_action,
    only_if_matches,
    top_entry,
)
from diagnose.reasoning.tables import tables_for
from diagnose.reasoning.unitstate import setup_minutes

if TYPE_CHECKING:
    from concurrent.futures import Executor

POLICIES = ("planner", "chart", "listing", "random")  # run when none are named
ALL_POLICIES = (*POLICIES, "reference")
PLANNERS = ("planner", "reference")
_UNKNOWN_STREAM = 7  # the unknown runs come from np.random.default_rng([seed, 7])

#: ``progress(done, total)``: called as runs are done (see :func:`simulate`).
Progress = Callable[[int, int], None]


@dataclass(frozen=True, eq=False)
class Draws:
    """Everything random about a batch of runs, drawn once from the seed.

    For a run with a cause outside the pack, ``unknown[i]`` is True and
    ``causes[i]`` is ``UNKNOWN_CAUSE``.
    """

    causes: tuple[str, ...]
    complaints: tuple[str, ...]
    answer: np.ndarray  # (runs, checks, 3) uniforms: outcome, noise or not, which wrong one
    cure: np.ndarray  # (runs, repairs) uniforms
    order: np.ndarray  # (runs, checks) uniforms for the random policy
    unknown: tuple[bool, ...] = ()  # per run: the true cause is outside the pack

    def is_unknown(self, i: int) -> bool:
        """Whether run ``i`` has a true cause outside the pack."""
        return bool(self.unknown) and self.unknown[i]

    def part(self, start: int, stop: int) -> Draws:
        """The draws of runs ``start`` to ``stop`` (not included): a run depends on its own
        draws only, so it goes the same way in a part as in the whole."""
        return Draws(self.causes[start:stop], self.complaints[start:stop],
                     self.answer[start:stop], self.cure[start:stop], self.order[start:stop],
                     self.unknown[start:stop])


def draw_cases(model: Model, runs: int, seed: int, *, unknown_rate: float = 0.0) -> Draws:
    """True causes and complaints (see the module docstring) and every uniform a run may use.

    Raises:
        InputError: runs < 1, ``unknown_rate`` outside [0, 1), a cause that reaches no
            complaint.
    """
    if runs < 1:
        raise InputError("runs", f"expected at least 1, got {runs}")
    if not 0.0 <= unknown_rate < 1.0:
        raise InputError("unknown_rate", f"expected a share from 0 up to 1, got {unknown_rate}")
    rng = np.random.default_rng(seed)
    # the simulated unit has the pack's default nameplate: a cause it rules out cannot occur
    excluded = excluded_causes(model, Evidence())
    ids = [c for c in model.causes if c not in excluded]
    if not ids:
        raise InputError("pack", "the default nameplate rules out every cause")
    prior = np.array([model.causes[c].prior for c in ids], dtype=float)
    picks = rng.choice(len(ids), size=runs, p=prior / prior.sum())
    produced: dict[str, list[str]] = {}
    for c in ids:
        alone = [k for k in model.complaints if model.holds(k, frozenset({c}))]
        produced[c] = alone or [k for k in model.complaints if c in model.tree_causes(k)]
    pick_k = rng.random(runs)
    causes, complaints = [], []
    for i, j in enumerate(picks):
        c = ids[int(j)]
        options = produced[c]
        if not options:
            raise InputError("pack", f"cause {c} reaches no complaint")
        causes.append(c)
        complaints.append(options[int(pick_k[i] * len(options))])
    # A separate stream: the main one, and so every known run, stays as it was.
    side = np.random.default_rng([seed, _UNKNOWN_STREAM])
    unknown = side.random(runs) < unknown_rate
    any_complaint = side.integers(len(model.complaints), size=runs)
    ks = list(model.complaints)
    for i in np.flatnonzero(unknown):
        causes[i] = UNKNOWN_CAUSE
        complaints[i] = ks[int(any_complaint[i])]
    return Draws(tuple(causes), tuple(complaints), rng.random((runs, len(model.checks), 3)),
                 rng.random((runs, len(model.repairs))), rng.random((runs, len(model.checks))),
                 tuple(bool(u) for u in unknown))


@dataclass(frozen=True)
class RunResult:
    """How one simulated call went under one policy."""

    cause: str  # UNKNOWN_CAUSE for a cause outside the pack
    complaint: str
    checks: int
    minutes: float
    cured: bool
    repaired: bool  # some repair was done
    first_repair_cured: bool
    top1: bool
    first_hit: bool
    unknown: bool = False  # the true cause is outside the pack
    escalated: bool = False  # the policy escalated or asked for a visit (not ran out, not cured)
    repairs: int = 0  # repairs tried
    unknown_top_before_repair: bool = False  # "unknown" led at the first repair or at the end
    steps: tuple[str, ...] = ()  # the checks and repairs done, in order ("*id": seen in passing)


@dataclass(frozen=True)
class PolicyReport:
    """The averages of one policy: over the known-cause runs, and over the unknown ones.

    ``runs`` counts every run; the figures from ``mean_checks`` to ``cured`` are
    over the runs with a known cause (0.0 when there are none). The two
    ``*_when_unknown`` figures are over the ``unknown_runs`` (``None`` when there
    are none); ``to_dict`` carries them when ``unknown_rate`` > 0.
    """

    policy: str
    runs: int
    mean_checks: float
    mean_minutes: float
    first_repair_success: float
    top1_accuracy: float
    first_repair_hits: float
    cured: float
    unknown_rate: float = 0.0
    unknown_runs: int = 0
    escalated_when_unknown: float | None = None
    wrong_repairs_when_unknown: float | None = None

    def to_dict(self) -> dict[str, Any]:
        out: dict[str, Any] = {
            "policy": self.policy, "runs": self.runs,
            "mean_checks": round(self.mean_checks, 4),
            "mean_minutes": round(self.mean_minutes, 3),
            "first_repair_success": round(self.first_repair_success, 4),
            "top1_accuracy": round(self.top1_accuracy, 4),
            "first_repair_hits": round(self.first_repair_hits, 4),
            "cured": round(self.cured, 4)}
        if self.unknown_rate > 0:
            out["unknown_runs"] = self.unknown_runs
            out["escalated_when_unknown"] = _round(self.escalated_when_unknown, 4)
            out["wrong_repairs_when_unknown"] = _round(self.wrong_repairs_when_unknown, 4)
        return out


def _round(x: float | None, digits: int) -> float | None:
    return None if x is None else round(x, digits)


@dataclass(frozen=True)
class SimulationReport:
    """Every policy's report on the same draws, and the entropy bound."""

    pack: str
    runs: int
    seed: int
    noise: float
    entropy_bound: float
    prior_entropy_bits: float
    policies: dict[str, PolicyReport] = field(default_factory=dict)
    unknown_rate: float = 0.0

    @property
    def main(self) -> PolicyReport:
        """The planner's report when it ran, else the first policy's."""
        return self.policies.get("planner") or next(iter(self.policies.values()))

    def to_dict(self) -> dict[str, Any]:
        out: dict[str, Any] = {"pack": self.pack, "runs": self.runs, "seed": self.seed,
                               "noise": self.noise,
                               **({"unknown_rate": self.unknown_rate}
                                  if self.unknown_rate > 0 else {}),
                               **self.main.to_dict(),
                               "entropy_bound": round(self.entropy_bound, 4),
                               "prior_entropy_bits": round(self.prior_entropy_bits, 4)}
        if len(self.policies) > 1:
            out["policies"] = {k: v.to_dict() for k, v in self.policies.items()}
        return out


class _Run:
    """One simulated service call: answers checks and repairs from the draws."""

    def __init__(self, model: Model, draws: Draws, i: int, noise: float,
                 check_pos: dict[str, int], repair_pos: dict[str, int], *,
                 cum: dict[tuple[str, str | None], list[float]] | None = None,
                 cache: PlanCache | None = None) -> None:
        self.model, self.draws, self.i, self.noise = model, draws, i, noise
        self.cause = draws.causes[i]
        self.unknown = draws.is_unknown(i)
        self.evidence = Evidence(complaints=(draws.complaints[i],))
        self.check_pos, self.repair_pos = check_pos, repair_pos
        self.checks = 0
        self.minutes = 0.0
        self.cured = False
        self.escalated = False
        self.repairs = 0
        self.first: tuple[bool, bool, bool] | None = None  # cured, top1, hit
        self.unknown_top = False  # "unknown" led the ranking when the first repair was chosen
        self.steps: list[str] = []
        self._cum = {} if cum is None else cum  # shared by the runs of a policy
        self._cache = cache or plan_cache(tables_for(model))  # the state of the unit, memoised

    def answer(self, cid: str, free: bool = False) -> str:
        """Answer ``cid`` from the draws; it costs its minutes and any setup of the unit's state.

        ``free``: observed in plain sight during a repair (no minutes).
        """
        chk = self.model.checks[cid]
        if not free and chk.requires:
            self.minutes += setup_minutes(self.model,
                                          self._cache.unit_state(self.model, self.evidence),
                                          chk.requires)
        u = self.draws.answer[self.i, self.check_pos[cid]]
        listed = not self.unknown and self.cause in chk.effects
        key = (cid, self.cause if listed else None)
        cum = self._cum.get(key)
        if cum is None:  # the answer's distribution: its row, cumulated (the same for every run)
            row = chk.effects[self.cause] if listed else chk.normal
            probs = np.array([row.get(o, 0.0) for o in chk.outcomes], dtype=float)
            cum = self._cum[key] = np.cumsum(probs / probs.sum()).tolist()
        k = min(bisect.bisect_right(cum, float(u[0])), len(chk.outcomes) - 1)
        if len(chk.outcomes) > 1 and u[1] < self.noise:
            others = [j for j in range(len(chk.outcomes)) if j != k]
            k = others[int(u[2] * len(others))]
        outcome = chk.outcomes[k]
        self.evidence = self.evidence.with_outcome(cid, outcome)
        self.steps.append(f"*{cid}" if free else cid)
        if not free:
            self.checks += 1
            self.minutes += chk.minutes
        return outcome

    def repair(self, rid: str, max_faults: int = 1) -> bool:
        r = self.model.repairs[rid]
        hit = not self.unknown and self.cause in r.fixes
        cured = bool(hit and self.draws.cure[self.i, self.repair_pos[rid]] < r.success)
        if self.first is None:
            top = _top(self.model, self.evidence, max_faults)
            self.first = (cured, top == self.cause, hit)
            self.unknown_top = top == UNKNOWN_CAUSE
        observed = [c for c in r.observes if c in self.model.checks
                    and c not in self.evidence.done
                    and only_if_matches(self.model, self.evidence, self.model.checks[c])]
        for cid in observed:  # in plain sight while the brake is apart
            self.answer(cid, free=True)
        self.evidence = self.evidence.with_repair(rid, cured)
        self.steps.append(rid)
        self.minutes += r.minutes
        self.cured = cured
        self.repairs += 1
        return cured

    def prerequisites(self, needs: tuple[str, ...]) -> None:
        for cid in missing_prerequisites(self.model, self.evidence, needs)[0]:
            self.answer(cid)

    def result(self, escalation: float, max_faults: int = 1) -> RunResult:
        first = self.first or (False, False, False)
        minutes = self.minutes + (0.0 if self.cured else escalation)
        unknown_top = self.unknown_top
        if self.first is None:  # no repair: the ranking at the end of the run
            top = _top(self.model, self.evidence, max_faults)
            unknown_top = top == UNKNOWN_CAUSE
        return RunResult(self.cause, self.draws.complaints[self.i], self.checks, minutes,
                         self.cured, self.first is not None, *first, unknown=self.unknown,
                         escalated=self.escalated, repairs=self.repairs,
                         unknown_top_before_repair=unknown_top, steps=tuple(self.steps))


def _planner(run: _Run, settings: Settings, max_faults: int, limit: int,
             reference: bool = False) -> None:
    for _ in range(limit):
        action = next_action(run.model, run.evidence, max_faults=max_faults, settings=settings,
                             reference=reference)
        if action.kind == "check" and action.id:
            run.answer(action.id)
        elif action.kind == "repair" and action.id:
            if run.repair(action.id, max_faults):
                return
        else:
            run.escalated = action.kind in ("escalate", "visit")
            return


def _top(model: Model, evidence: Evidence, max_faults: int) -> str:
    """The top of the posterior ranking (the planner's memoised posterior and its top entry,
    :func:`~diagnose.reasoning.planner.top_entry`: the same values)."""
    tables = tables_for(model, max_faults, evidence)
    return top_entry(plan_cache(tables).posterior(model, evidence)).cause


def chart_order(model: Model, complaint: str, *, listing: bool = False) -> tuple[str, ...]:
    """The complaint's checks (they list a cause of its tree), in static p/c order.

    Score of a check: Σ prior of the tree's causes it can reveal (their row
    makes some outcome more likely than ``normal``) / minutes with prerequisites.
    """
    tree = set(model.tree_causes(complaint))
    empty = Evidence()
    scored = []
    for n, chk in enumerate(model.checks.values()):
        if chk.preparation or not only_if_matches(model, empty, chk):
            continue
        revealed = [c for c in chk.effects if c in tree and any(
            chk.effects[c].get(o, 0.0) > chk.normal.get(o, 0.0) + 1e-9 for o in chk.outcomes)]
        if not revealed:
            continue
        minutes = chk.minutes + sum(model.checks[x].minutes for x in
                                    missing_prerequisites(model, empty, chk.needs)[0])
        mass = sum(model.causes[c].prior for c in revealed)
        scored.append((n if listing else -mass / minutes, n, chk.id))
    return tuple(cid for _, _, cid in sorted(scored))


def _abnormal_causes(model: Model, cid: str, outcome: str, tree: set[str]) -> list[str]:
    """Causes revealed by ``outcome`` of ``cid``, most likely first; [] for a normal outcome."""
    chk = model.checks[cid]
    base = chk.normal.get(outcome, 0.0)
    revealed = [c for c in chk.effects if c in tree and chk.effects[c].get(outcome, 0.0) > base]
    revealed.sort(key=lambda c: -model.causes[c].prior * chk.effects[c].get(outcome, 0.0))
    return revealed


def _best_repair(model: Model, cause: str, done: frozenset[str]) -> str | None:
    options = [model.repairs[r] for r in model.repairs_for(cause) if r not in done]
    if not options:
        return None
    return max(options, key=lambda r: r.success / r.minutes).id


def _chart(run: _Run, order: tuple[str, ...]) -> None:
    model = run.model
    complaint = run.evidence.complaints[0]
    tree = set(model.tree_causes(complaint))
    for cid in order:
        if cid in run.evidence.done:
            continue
        run.prerequisites(model.checks[cid].needs)
        outcome = run.answer(cid)
        for cause in _abnormal_causes(model, cid, outcome, tree):
            rid = _best_repair(model, cause, run.evidence.repairs_done)
            if rid is None:
                continue
            run.prerequisites(model.repairs[rid].needs)
            if run.repair(rid):
                return
            break
    rest = sorted(tree, key=lambda c: -model.causes[c].prior)
    while True:
        done = run.evidence.repairs_done
        options = [(model.causes[c].prior * model.repairs[r].success / model.repairs[r].minutes, r)
                   for c in rest for r in [_best_repair(model, c, done)] if r is not None]
        if not options:
            return
        rid = max(options)[1]
        run.prerequisites(model.repairs[rid].needs)
        if run.repair(rid):
            return


def entropy_bound(model: Model) -> tuple[float, float]:
    """(lower bound on checks, entropy of the cause prior in bits)."""
    prior = np.array([c.prior for c in model.causes.values()], dtype=float)
    prior = prior / prior.sum()
    bits = float(-(prior[prior > 0] * np.log2(prior[prior > 0])).sum())
    most = max((len(c.outcomes) for c in model.checks.values()), default=2)
    return bits / math.log2(max(most, 2)), bits


def simulate(model: Model, *, runs: int, seed: int, noise: float = 0.0,
             policies: tuple[str, ...] = POLICIES, settings: Settings = DEFAULT,
             max_faults: int = 1, unknown_rate: float = 0.0,
             progress: Progress | None = None, executor: Executor | None = None,
             chunk: int = 50) -> SimulationReport:
    """Run ``runs`` simulated calls with each policy on the same draws.

    ``unknown_rate`` is the share of calls whose true cause is outside the
    pack (see the module docstring); 0 gives exactly the figures of a run
    without unknown causes. ``policies`` may name any of ``ALL_POLICIES``.

    ``progress(done, total)`` is called after each run (``total`` = runs ×
    policies). With ``executor`` (a ``concurrent.futures`` executor, for
    example a process pool) the runs of each policy go to it in parts of
    ``chunk`` runs, and ``progress`` is called after each part. Every run
    depends on its own draws only (all drawn from ``seed`` first), so the
    report is the same however the runs are split.

    Raises:
        InputError: unknown policy, ``noise`` or ``unknown_rate`` outside [0, 1), runs < 1,
            ``chunk`` < 1.
    """
    bad = [p for p in policies if p not in ALL_POLICIES]
    if bad:
        raise InputError("policy", f"unknown policy {bad[0]!r}; known: {', '.join(ALL_POLICIES)}")
    if not 0.0 <= noise < 1.0:
        raise InputError("noise", f"expected a probability below 1, got {noise}")
    if chunk < 1:
        raise InputError("chunk", f"expected at least 1 run per part, got {chunk}")
    draws = draw_cases(model, runs, seed, unknown_rate=unknown_rate)
    options: dict[str, Any] = {"noise": noise, "settings": settings, "max_faults": max_faults}
    if executor is None:
        results = {}
        for n, policy in enumerate(policies):
            step = None if progress is None else _offset(progress, n * runs, len(policies) * runs)
            results[policy] = run_policy(model, draws, policy, progress=step, **options)
    else:
        results = _run_parts(model, draws, policies, executor, chunk=chunk, progress=progress,
                             options=options)
    reports = {policy: policy_report(policy, results[policy], unknown_rate)
               for policy in policies}
    bound, bits = entropy_bound(model)
    return SimulationReport(model.id, runs, seed, noise, bound, bits, reports, unknown_rate)


def _offset(progress: Progress, before: int, total: int) -> Progress:
    """``progress`` for one policy's runs: ``before`` runs were done before them."""
    return lambda done, _: progress(before + done, total)


def _run_parts(model: Model, draws: Draws, policies: tuple[str, ...], executor: Executor, *,
               chunk: int, progress: Progress | None, options: dict[str, Any],
               ) -> dict[str, list[RunResult]]:
    """Every policy's runs, in parts of ``chunk`` runs on ``executor``, put back in order."""
    from concurrent.futures import as_completed

    runs = len(draws.causes)
    parts = [(policy, start) for policy in policies for start in range(0, runs, chunk)]
    futures = {executor.submit(run_policy, model, draws.part(start, start + chunk), policy,
                               **options): (policy, start) for policy, start in parts}
    done_parts: dict[tuple[str, int], list[RunResult]] = {}
    total, done = runs * len(policies), 0
    for fut in as_completed(futures):
        key = futures[fut]
        done_parts[key] = fut.result()
        done += len(done_parts[key])
        if progress is not None:
            progress(done, total)
    return {policy: [r for start in range(0, runs, chunk) for r in done_parts[policy, start]]
            for policy in policies}


def run_policy(model: Model, draws: Draws, policy: str, *, noise: float = 0.0,
               settings: Settings = DEFAULT, max_faults: int = 1,
               progress: Progress | None = None) -> list[RunResult]:
    """Every run of ``draws`` under ``policy`` (one of ``ALL_POLICIES``), in order.

    ``progress(done, total)`` is called after each run.

    Raises:
        InputError: unknown policy.
    """
    if policy not in ALL_POLICIES:
        raise InputError("policy", f"unknown policy {policy!r}; known: {', '.join(ALL_POLICIES)}")
    check_pos = {c: i for i, c in enumerate(model.checks)}
    repair_pos = {r: i for i, r in enumerate(model.repairs)}
    limit = len(model.checks) + len(model.repairs) + 5
    charts: dict[str, tuple[str, ...]] = {}
    cum: dict[tuple[str, str | None], list[float]] = {}
    cache = plan_cache(tables_for(model, max_faults if policy in PLANNERS else 1))
    results = []
    total = len(draws.causes)
    for i in range(total):
        run = _Run(model, draws, i, noise, check_pos, repair_pos, cum=cum, cache=cache)
        k = draws.complaints[i]
        if policy in PLANNERS:
            _planner(run, settings, max_faults, limit, reference=policy == "reference")
            results.append(run.result(settings.escalation_minutes, max_faults))
        else:
            if k not in charts:
                charts[k] = chart_order(model, k, listing=policy == "listing")
            if policy in ("chart", "listing"):
                _chart(run, charts[k])
            else:
                base = charts[k]
                shuffle = np.argsort(draws.order[i, [check_pos[c] for c in base]])
                _chart(run, tuple(base[j] for j in shuffle))
            results.append(run.result(settings.escalation_minutes, 1))
        if progress is not None:
            progress(i + 1, total)
    return results


def policy_report(policy: str, results: list[RunResult],
                  unknown_rate: float = 0.0) -> PolicyReport:
    """The averages of ``results`` (see :class:`PolicyReport` and the module docstring)."""
    known = [r for r in results if not r.unknown]
    unknown = [r for r in results if r.unknown]

    def mean(values: list[Any]) -> float:
        return float(np.mean(values)) if values else 0.0

    repaired = [r for r in known if r.repaired]
    return PolicyReport(
        policy, len(results),
        mean([r.checks for r in known]),
        mean([r.minutes for r in known]),
        mean([r.first_repair_cured for r in known]),
        mean([r.top1 for r in repaired]),
        mean([r.first_hit for r in repaired]),
        mean([r.cured for r in known]),
        unknown_rate=unknown_rate,
        unknown_runs=len(unknown),
        escalated_when_unknown=(
            mean([r.repairs == 0 and (r.escalated or r.unknown_top_before_repair)
                  for r in unknown])
            if unknown else None),
        wrong_repairs_when_unknown=mean([r.repairs for r in unknown]) if unknown else None,
    )
