"""Benchmark of the reasoner, the loading of packs and the start-up: ``python -m diagnose.bench``.

For synthetic packs of 200, 2,000 and 10,000 causes (about one check per five
causes; :func:`diagnose.reasoning.synthetic.synthetic_model`) it prints:

* cold steps of realistic sessions: three sessions of twelve answers at each
  size, each session drawn from its own cause and answered as that cause
  would answer the planner's proposals, played on a fresh copy of the pack
  (no table, memo or cached vector of it yet beyond the tables a loaded pack
  has), so every step is a new answer; the median milliseconds of

  - the reasoner's step: the answer added, the posterior, every check's
    expected information and ECO and every repair's p/c ranked, the choice;
  - the shell-equivalent step: what the shell works out after an answer
    (:func:`_shell_step`): the same with the ECO of every check, every check
    and repair ordered (the full next-action ranking), the 30 rows of the
    ``checks`` view, the ranking's leading entries and its view drawn, the
    toolbar's leading cause;

  each with the fast planner and with its reference version
  (``plan(..., reference=True)``, ``--policy reference``) side by side, and
  the peak memory (tracemalloc) of the shell step;
* the compile time of the same pack as raw data through the knowledge
  compiler (``diagnose.kb.compiler.compile_pack``), the JSON Schema pass apart
  from it, the tables' build and the compiler's peak memory;
* up to 2,000 causes, the posterior of each step's new evidence by the
  reasoner (cold) and by pgmpy's VariableElimination (its network built once
  per session with every answered check; each query with that step's
  evidence), and how many times slower pgmpy is;
* at 2,000 causes, the ``--max-faults 2`` step: the posterior and ranking
  with the pairs pruned to the evidence (``diagnose.reasoning.tables``,
  "Pruned pairs"), and with the planner on top when the planner takes them;
* the simulator on a shipped pack (``spring-applied-brake``, 300 runs, seed
  1, noise 0.05, a tenth of the calls with a cause outside the pack) with the
  planner and with its reference version on the same draws, side by side:
  seconds of each, the ratio, and whether every run went the same way.

Loading a pack and the start-up, each in a fresh process (``load``), with the
user's folders in a temporary one and Python's bytecode kept there as an
installed program keeps it:

* a 10,000-cause synthetic pack written as YAML files (a few hundred entries a
  file, as a trainer splits a pack) loaded as the command line loads it
  (:func:`diagnose.kb.loader.load_model`): from the YAML with the
  compiled-pack cache off (read, schema, compile), from the YAML keeping the
  entry, then from the cache; seconds and the process's peak memory (resident
  set) of each, the median of three runs (the one that keeps the entry: once);
* ``diagnose --help``, ``diagnose calc coil ...`` (the README's example), the
  first question of the shell with piped input (``diagnose start`` on the
  shipped pack, standard input empty: the safety notice, the nameplate's
  first question, then end of input) with a warm cache and with
  ``--no-cache``, and, when pexpect is installed, the first question at a
  terminal (Enter pressed at the notice at once); the median of a few runs,
  after one that fills the caches.

The Bayesian network given to pgmpy is the reasoner's model written out: one
root ``H`` over the hypotheses and one child per piece of evidence.
"""

from __future__ import annotations

import argparse
import gc
import statistics
import time
import tracemalloc
from typing import Any

import numpy as np

from diagnose.kb.model import PER, UNKNOWN_CAUSE, Check, Model
from diagnose.reasoning.evidence import Evidence

SIZES = (200, 2000, 10000)


def _hypotheses(model: Model, max_faults: int) -> list[frozenset[str] | None]:
    ids = list(model.causes)
    hyps: list[frozenset[str] | None] = [frozenset({c}) for c in ids]
    if max_faults == 2:
        hyps += [frozenset({a, b}) for i, a in enumerate(ids) for b in ids[i + 1:]]
    return [*hyps, None]


def _row(check: Check, h: frozenset[str] | None) -> list[float]:
    if h is None:
        return [check.unknown[o] for o in check.outcomes]
    listed = [c for c in h if c in check.effects]
    if not listed:
        return [check.normal[o] for o in check.outcomes]
    return [sum(check.effects[c][o] for c in listed) / len(listed) for o in check.outcomes]


def bayesian_network(model: Model, evidence: Evidence, max_faults: int = 1,
                     ) -> tuple[Any, dict[str, str], list[Any], list[str]]:
    """The model as a pgmpy network for ``evidence``: (network, hard evidence, virtual, labels).

    One root ``H`` over the hypotheses (prior as in the reasoner); a child per
    complaint reported, per check answered (soft answers as virtual evidence)
    and per repair done.
    """
    from pgmpy.factors.discrete import TabularCPD
    from pgmpy.models import DiscreteBayesianNetwork

    order = list(model.causes)
    hyps = _hypotheses(model, max_faults)
    labels = [UNKNOWN_CAUSE if h is None else "+".join(sorted(h, key=order.index)) for h in hyps]
    if max_faults == 1:
        prior = np.array([model.unknown_prior if h is None else model.causes[next(iter(h))].prior
                          for h in hyps], dtype=float)
    else:
        def odds(q: float) -> float:
            return q / (1 - q)

        prior = np.array([odds(model.unknown_prior / PER) if h is None
                          else float(np.prod([odds(model.causes[c].q) for c in h]))
                          for h in hyps])
    n = len(hyps)
    bn = DiscreteBayesianNetwork()
    bn.add_node("H")
    cpds = [TabularCPD("H", n, (prior / prior.sum()).reshape(-1, 1), state_names={"H": labels})]
    hard: dict[str, str] = {}
    virtual: list[Any] = []

    def child(node: str, states: list[str], table: np.ndarray) -> None:
        bn.add_edge("H", node)
        cpds.append(TabularCPD(node, len(states), table, evidence=["H"], evidence_card=[n],
                               state_names={node: states, "H": labels}))

    for k in evidence.complaints:
        yes = np.array([1.0 if h is None or model.holds(k, h) else model.leak for h in hyps])
        child(f"complaint_{k}", ["yes", "no"], np.vstack([yes, 1 - yes]))
        hard[f"complaint_{k}"] = "yes"
    for cid, weights in evidence.findings.items():
        chk = model.checks[cid]
        child(f"check_{cid}", list(chk.outcomes), np.array([_row(chk, h) for h in hyps]).T)
        if len(weights) == 1:
            hard[f"check_{cid}"] = next(iter(weights))
        else:
            virtual.append(TabularCPD(f"check_{cid}", len(chk.outcomes),
                                      [[weights.get(o, 0.0)] for o in chk.outcomes],
                                      state_names={f"check_{cid}": list(chk.outcomes)}))
    for j, (rid, cured) in enumerate(evidence.repairs):
        r = model.repairs[rid]
        cure = np.array([r.success if h is not None and any(c in h for c in r.fixes) else 0.0
                         for h in hyps])
        child(f"repair_{j}_{rid}", ["cured", "not"], np.vstack([cure, 1 - cure]))
        hard[f"repair_{j}_{rid}"] = "cured" if cured else "not"
    bn.add_cpds(*cpds)
    return bn, hard, virtual, labels


def pgmpy_posterior(model: Model, evidence: Evidence, max_faults: int = 1) -> dict[str, float]:
    """P(h | evidence) from pgmpy's VariableElimination on :func:`bayesian_network`."""
    from pgmpy.inference import VariableElimination

    bn, hard, virtual, _ = bayesian_network(model, evidence, max_faults)
    result = VariableElimination(bn).query(["H"], evidence=hard or None,
                                           virtual_evidence=virtual or None, show_progress=False)
    return {s: float(v) for s, v in zip(result.state_names["H"], result.values)}


def _session(model: Model, steps: int, seed: int) -> tuple[str, list[tuple[str, str]]]:
    """A complaint and plausible answers: the planner's proposals, answered from one cause."""
    from diagnose.reasoning.planner import next_action

    rng = np.random.default_rng(seed)
    cause = list(model.causes)[int(rng.integers(len(model.causes)))]
    complaint = next(k for k in model.complaints if cause in model.tree_causes(k))
    ev = Evidence(complaints=(complaint,))
    out = []
    for _ in range(steps):
        a = next_action(model, ev)
        if a.kind != "check" or a.id is None:
            break
        chk = model.checks[a.id]
        row = chk.effects.get(cause, chk.normal)
        o = str(rng.choice(chk.outcomes, p=np.array([row[x] for x in chk.outcomes])))
        out.append((a.id, o))
        ev = ev.with_outcome(a.id, o)
    return complaint, out


def _fresh(model: Model) -> Model:
    """The same pack as a new Model object: no table, memo or cached vector of it exists yet."""
    import dataclasses

    return dataclasses.replace(model)


def _sessions(model: Model, sessions: int, steps: int, seed: int,
              ) -> list[tuple[str, list[tuple[str, str]]]]:
    """Realistic sessions (complaint, answers), each from its own drawn cause, until there are
    ``sessions * steps`` answers (a session ends early when the planner turns to a repair;
    at most four times ``sessions`` are drawn)."""
    out: list[tuple[str, list[tuple[str, str]]]] = []
    for i in range(4 * sessions):
        if sum(len(a) for _, a in out) >= sessions * steps:
            break
        complaint, answers = _session(model, steps, seed + 1000 * (i + 1))
        if answers:
            out.append((complaint, answers))
    return out


def _shell_step(model: Model, ev: Evidence, cid: str, outcome: str, *, reference: bool,
                max_faults: int = 1) -> Evidence:
    """What the shell works out after an answer, as ``Session`` and ``Shell`` do it.

    The answer added to the evidence; the posterior; the plan: every check's
    expected information, the ECO of every check that can be proposed (all of
    them, not only those the rule could choose), every repair's P(cure), the
    choice, then every check ordered by the rule of ``diagnose.reasoning.ties``
    and every repair by p/c (the full next-action ranking); the rows of the
    ``checks`` view (the first ``ChecksTable.shown``, 30, made into rows, not
    drawn); the ranking as the shell asks for it (the leading entries the view
    needs, and "none of the known causes") and its view drawn on an 80-column
    console; the toolbar's leading cause. Not in it: the recording of the event
    (``Session.answer``, about 0.1 ms), the card of the next check and the
    prompt's redraw, which do not depend on the size of the pack.
    """
    import io

    from rich.console import Console

    from diagnose.reasoning.actions import ChecksTable
    from diagnose.reasoning.planner import plan
    from diagnose.reasoning.posterior import posterior
    from diagnose.views import RankingView

    ev = ev.with_outcome(cid, outcome)
    post = posterior(model, ev, max_faults=max_faults)
    pl = plan(model, ev, max_faults=max_faults, post=post, reference=reference)
    pl.check_order()
    pl.repair_order()
    ChecksTable(pl.checks(ChecksTable.shown), pl.ecr, ev.mode, total=len(pl.check_ids))
    console = Console(file=io.StringIO(), width=80, color_system=None)
    view = RankingView.of(post.ranking(RankingView.entries_for(), unknown=True))
    console.print(view)
    post.ranking(1, unknown=True)  # the toolbar
    return ev


def cold_steps(model: Model, sessions: list[tuple[str, list[tuple[str, str]]]], *,
               reference: bool = False, shell: bool = False, max_faults: int = 1,
               ) -> list[float]:
    """Milliseconds of each step of ``sessions``, each session on a fresh copy of ``model``.

    Every step adds an answer never seen before by that copy: nothing of the step is in a
    cache (the tables of the pack are made before the first step, as a pack loaded once).
    ``shell``: the shell-equivalent step (:func:`_shell_step`), else the reasoner's step.
    """
    from diagnose.reasoning.tables import tables_for

    times: list[float] = []
    for complaint, answers in sessions:
        fresh = _fresh(model)
        if max_faults == 1:
            tables_for(fresh)
        ev = Evidence(complaints=(complaint,))
        for cid, o in answers:
            gc.collect()
            t0 = time.perf_counter()
            if shell:
                ev = _shell_step(fresh, ev, cid, o, reference=reference, max_faults=max_faults)
            else:
                ev = _reasoner_step(fresh, ev, cid, o, reference=reference)
            times.append((time.perf_counter() - t0) * 1000)
    return times


def _reasoner_step(model: Model, ev: Evidence, cid: str, outcome: str, *,
                   reference: bool) -> Evidence:
    """One finding added, the posterior, every check's ECO and every repair ranked, the choice."""
    from diagnose.reasoning.planner import plan
    from diagnose.reasoning.posterior import posterior

    ev = ev.with_outcome(cid, outcome)
    post = posterior(model, ev)
    pl = plan(model, ev, post=post, reference=reference)
    np.lexsort((np.nan_to_num(pl.ecos(), nan=np.inf), pl.check_code != 0))
    np.argsort(-(pl.p_cure / pl.repair_minutes))
    return ev


def two_fault_steps(model: Model, sessions: list[tuple[str, list[tuple[str, str]]]],
                    ) -> dict[str, Any]:
    """Cold ``--max-faults 2`` steps: the posterior and ranking (pairs pruned to the evidence,
    ``diagnose.reasoning.tables``), and the planner on top when it takes them."""
    from diagnose.errors import InputError
    from diagnose.reasoning.planner import plan
    from diagnose.reasoning.posterior import posterior

    post_ms, step_ms, planner = [], [], "yes"
    for complaint, answers in sessions:
        fresh = _fresh(model)
        ev = Evidence(complaints=(complaint,))
        for cid, o in answers:
            ev = ev.with_outcome(cid, o)
            gc.collect()
            t0 = time.perf_counter()
            post = posterior(fresh, ev, max_faults=2)
            post.ranking()
            t1 = time.perf_counter()
            post_ms.append((t1 - t0) * 1000)
            if planner == "yes":
                try:
                    plan(fresh, ev, max_faults=2, post=post).checks()
                    step_ms.append((time.perf_counter() - t0) * 1000)
                except (InputError, ValueError, IndexError) as exc:
                    planner = f"no ({type(exc).__name__})"
    hyps = post.tables.n_hyp
    return {"posterior_ms": statistics.median(post_ms), "hypotheses": hyps,
            "step_ms": statistics.median(step_ms) if step_ms else float("nan"),
            "planner": planner, "steps": len(post_ms)}


def pgmpy_new_evidence(model: Model, sessions: list[tuple[str, list[tuple[str, str]]]],
                       ) -> dict[str, Any]:
    """Median ms of the posterior for each step's new evidence: the reasoner (cold, on a fresh
    copy) against pgmpy's VariableElimination (its network built once per session with every
    answered check as a node; each query with that step's evidence)."""
    try:
        from pgmpy.inference import VariableElimination
    except ImportError:
        return {}
    from diagnose.reasoning.posterior import posterior

    ours, theirs = [], []
    for complaint, answers in sessions:
        last = Evidence(complaints=(complaint,))
        for cid, o in answers:
            last = last.with_outcome(cid, o)
        bn, _, _, _ = bayesian_network(model, last)
        ve = VariableElimination(bn)
        fresh = _fresh(model)
        ev = Evidence(complaints=(complaint,))
        for cid, o in answers:
            ev = ev.with_outcome(cid, o)
            hard = {f"complaint_{k}": "yes" for k in ev.complaints}
            hard.update({f"check_{c}": next(iter(w)) for c, w in ev.findings.items()})
            t0 = time.perf_counter()
            posterior(fresh, ev)
            ours.append((time.perf_counter() - t0) * 1000)
            t0 = time.perf_counter()
            ve.query(["H"], evidence=hard, show_progress=False)
            theirs.append((time.perf_counter() - t0) * 1000)
    a, b = statistics.median(ours), statistics.median(theirs)
    return {"posterior_ms": a, "pgmpy_ms": b, "pgmpy_ratio": b / a, "pgmpy_steps": len(ours)}


def simulate_side_by_side(pack: str = "spring-applied-brake", *, runs: int = 300, seed: int = 1,
                          noise: float = 0.05, unknown_rate: float = 0.0) -> dict[str, Any]:
    """Seconds of the simulator with the planner and with its reference, on the same draws.

    ``identical``: every run went the same way (checks and repairs in order, minutes, cure).
    """
    from diagnose.kb.loader import load_model
    from diagnose.reasoning.simulate import draw_cases, run_policy

    model = load_model(pack)
    draws = draw_cases(model, runs, seed, unknown_rate=unknown_rate)
    out: dict[str, Any] = {"pack": pack, "runs": runs}
    results = {}
    for policy in ("reference", "planner"):
        gc.collect()
        t0 = time.perf_counter()
        results[policy] = run_policy(model, draws, policy, noise=noise)
        out[f"{policy}_s"] = time.perf_counter() - t0
    out["ratio"] = out["reference_s"] / out["planner_s"]
    out["identical"] = results["planner"] == results["reference"]
    return out


def run(sizes: tuple[int, ...] = SIZES, *, seed: int = 1, sessions: int = 3, steps: int = 12,
        pgmpy: bool = True, two_faults: int = 2000) -> list[dict[str, Any]]:
    """Measure each size; returns one row per size (see the module docstring)."""
    from diagnose.kb.compiler import compile_pack
    from diagnose.reasoning.synthetic import pack_data, synthetic_model
    from diagnose.reasoning.tables import tables_for

    warm = synthetic_model(20, seed=seed)  # first use imports networkx and jsonschema
    compile_pack([("pack.yaml", pack_data(warm))], pack_id=warm.id)
    rows = []
    for n in sizes:
        model = synthetic_model(n, seed=seed)
        data = pack_data(model)
        row: dict[str, Any] = {"causes": n, "checks": len(model.checks) - 1,
                               "repairs": len(model.repairs)}
        gc.collect()
        t0 = time.perf_counter()
        compiled = compile_pack([("pack.yaml", data)], pack_id=model.id, schema=False)
        row["compile_s"] = time.perf_counter() - t0
        del compiled
        t0 = time.perf_counter()
        compile_pack([("pack.yaml", data)], pack_id=model.id, schema=True)
        row["schema_s"] = time.perf_counter() - t0 - row["compile_s"]
        gc.collect()
        tracemalloc.start()
        compiled = compile_pack([("pack.yaml", data)], pack_id=model.id, schema=False)
        row["compile_peak_mb"] = tracemalloc.get_traced_memory()[1] / 2**20
        tracemalloc.stop()
        del compiled
        t0 = time.perf_counter()
        tables_for(_fresh(model))
        row["tables_s"] = time.perf_counter() - t0
        plays = _sessions(model, sessions, steps, seed)
        row["steps"] = sum(len(a) for _, a in plays)
        cold_steps(model, [_session(model, 2, seed)])  # imports and first-call costs, not timed
        for key, shell, reference in (("step_ms", False, False), ("ref_ms", False, True),
                                      ("shell_ms", True, False), ("shell_ref_ms", True, True)):
            row[key] = statistics.median(cold_steps(model, plays, shell=shell,
                                                    reference=reference))
        gc.collect()
        tracemalloc.start()
        cold_steps(model, [(plays[0][0], plays[0][1][:3])], shell=True)
        row["step_peak_mb"] = tracemalloc.get_traced_memory()[1] / 2**20
        tracemalloc.stop()
        if pgmpy and n <= 2000:
            row.update(pgmpy_new_evidence(model, plays))
        if n == two_faults:
            row["two_faults"] = two_fault_steps(model, plays)
        rows.append(row)
    return rows


#: Entries written to one YAML file of a synthetic pack (each file stays far below the
#: reader's limit on values, :data:`diagnose.kb.yamlpos.MAX_NODES`).
PER_FILE = 200

# The peak is the process's own high-water mark (VmHWM): ru_maxrss on Linux keeps the one of
# the process it was forked from across exec (the benchmark, with its synthetic model).
_LOAD_SCRIPT = """
import json, resource, sys, time
from diagnose.kb.loader import load_model
t0 = time.perf_counter()
model = load_model(sys.argv[1], cache=sys.argv[2] == "cache")
seconds = time.perf_counter() - t0
try:
    with open("/proc/self/status") as fh:
        peak = next(int(x.split()[1]) for x in fh if x.startswith("VmHWM:")) / 1024
except (OSError, StopIteration, ValueError):
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
print(json.dumps({"s": seconds, "mb": peak, "causes": len(model.causes)}))
"""


def write_pack(model: Model, folder: Any, per_file: int = PER_FILE) -> list[str]:
    """Write ``model`` (a synthetic pack) into ``folder`` as YAML: the manifest, then each
    section in files of ``per_file`` entries. Returns the file names."""
    from pathlib import Path

    import yaml

    from diagnose.reasoning.synthetic import pack_data

    data = pack_data(model)
    lists = ("complaints", "events", "causes", "checks", "repairs")
    files: dict[str, Any] = {"pack.yaml": {k: v for k, v in data.items() if k not in lists}}
    for section in lists:
        items = data.get(section, [])
        for n, i in enumerate(range(0, len(items), per_file)):
            files[f"{section}-{n:04d}.yaml"] = {section: items[i:i + per_file]}
    dumper = getattr(yaml, "CSafeDumper", yaml.SafeDumper)
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    for name, content in files.items():
        text = yaml.dump(content, Dumper=dumper, sort_keys=False, allow_unicode=True)
        (folder / name).write_text(text, encoding="utf-8")
    return list(files)


def _environment(home: Any) -> dict[str, str]:
    """The process environment with the user's folders and journal inside ``home``."""
    import os

    env = dict(os.environ)
    for kind in ("DATA", "CACHE", "STATE", "CONFIG"):
        env[f"XDG_{kind}_HOME"] = str(home / kind.lower())
    env["DIAGNOSE_JOURNAL"] = str(home / "journal.sqlite3")
    env.pop("DIAGNOSE_SETTINGS", None)
    env.pop("DIAGNOSE_PACKS", None)
    # compiled once, as an installed program is: not every start compiling its modules again
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    env["PYTHONPYCACHEPREFIX"] = str(home / "bytecode")
    return env


def load_figures(causes: int = 10000, *, seed: int = 1, start_runs: int = 5) -> dict[str, Any]:
    """Seconds and peak MB of loading a ``causes`` pack from YAML and from the cache, each in
    a fresh process; and the piped first question with a warm cache and with ``--no-cache``."""
    import json
    import subprocess
    import sys
    import tempfile
    from pathlib import Path

    from diagnose.reasoning.synthetic import synthetic_model

    out: dict[str, Any] = {"causes": causes}
    with tempfile.TemporaryDirectory() as tmp:
        home = Path(tmp)
        env = _environment(home)
        if causes:
            folder = home / "pack"
            out["files"] = len(write_pack(synthetic_model(causes, seed=seed), folder))
            runs = [("warm", "electrical-supply", "none")]  # Python compiles what loading uses
            runs += [("yaml", str(folder), "none")] * 3 + [("fill", str(folder), "cache")]
            runs += [("cache", str(folder), "cache")] * 3
            found: dict[str, list[dict[str, float]]] = {}
            for key, pack, how in runs:
                done = subprocess.run([sys.executable, "-c", _LOAD_SCRIPT, pack, how],
                                      env=env, capture_output=True, text=True, check=True)
                found.setdefault(key, []).append(json.loads(done.stdout))
            for key, figures in found.items():  # the median run of each
                middle = sorted(figures, key=lambda f: f["s"])[len(figures) // 2]
                out[f"{key}_s"], out[f"{key}_mb"] = middle["s"], middle["mb"]
        if start_runs:
            out.update(_first_question(env, start_runs))
    return out


#: The calculator run timed at start-up (the README's example).
CALC = ("calc", "coil", "--rated-voltage", "24V", "--rated-power", "20W", "--ohms", "31.1ohm",
        "--temp", "40degC")


def _first_question(env: dict[str, str], runs: int) -> dict[str, float]:
    """Median seconds, each in a fresh process: `diagnose --help`, `diagnose calc coil ...`,
    `diagnose start` with piped, empty input (warm cache and ``--no-cache``) and, when pexpect
    is there, the first question at a terminal (Enter pressed at the notice at once)."""
    import subprocess
    import sys

    def once(*args: str) -> float:
        t0 = time.perf_counter()
        subprocess.run([sys.executable, "-m", "diagnose", *args], input="", env=env,
                       capture_output=True, text=True, check=True)
        return time.perf_counter() - t0

    once("start")  # fills the caches
    once(*CALC)
    out = {"start_s": statistics.median([once("start") for _ in range(runs)]),
           "start_no_cache_s": statistics.median([once("start", "--no-cache")
                                                  for _ in range(runs)]),
           "help_s": statistics.median([once("--help") for _ in range(runs)]),
           "calc_s": statistics.median([once(*CALC) for _ in range(runs)])}
    _at_terminal(env)  # the terminal library's bytecode, made once as an installed program has it
    terminal = [t for t in (_at_terminal(env) for _ in range(runs)) if t is not None]
    if terminal:
        out["terminal_s"] = statistics.median(terminal)
    return out


def _at_terminal(env: dict[str, str]) -> float | None:
    """Seconds from start to the nameplate's first question at a terminal, None without pexpect.

    The terminal is pexpect's; prompt_toolkit's question where the cursor is (which a real
    terminal answers at once) is switched off, or its wait would be counted.
    """
    try:
        import pexpect
    except ImportError:
        return None
    import sys

    t0 = time.perf_counter()
    child = pexpect.spawn(sys.executable, ["-m", "diagnose", "start"], dimensions=(24, 80),
                          env={**env, "TERM": "xterm", "NO_COLOR": "1",
                               "PROMPT_TOOLKIT_NO_CPR": "1"}, encoding="utf-8", timeout=30)
    child.delaybeforesend = 0
    try:
        child.expect("Press Enter")
        child.send("\r")
        child.expect("Enter keeps")
        child.expect(r"\]:|: ")
        return time.perf_counter() - t0
    except (pexpect.TIMEOUT, pexpect.EOF):
        return None
    finally:
        child.close(force=True)


def load_table(load: dict[str, Any]) -> str:
    """The figures of :func:`load_figures` as lines of text."""
    lines = []
    if "yaml_s" in load:
        lines.append(f"load a {load['causes']:,}-cause pack ({load['files']} YAML files), each in "
                     "a fresh process:")
        for key, what in (("yaml", "from YAML (cache off)"), ("fill", "from YAML, cache kept"),
                          ("cache", "from the cache")):
            lines.append(f"  {what:<22} {load[f'{key}_s']:6.2f} s  peak "
                         f"{load[f'{key}_mb']:5.0f} MB")
    if "start_s" in load:
        lines.append("start-up, each in a fresh process (median):")
        lines.append(f"  diagnose --help {load['help_s']:.2f} s; diagnose calc coil ... "
                     f"{load['calc_s']:.2f} s")
        lines.append(f"  first question, piped (`diagnose start` to exit): warm cache "
                     f"{load['start_s']:.2f} s, --no-cache {load['start_no_cache_s']:.2f} s")
        if "terminal_s" in load:
            lines.append(f"  first question at a terminal (Enter at the notice at once): "
                         f"{load['terminal_s']:.2f} s")
    return "\n".join(lines)


def table(rows: list[dict[str, Any]], sim: dict[str, Any] | None = None) -> str:
    """The rows (and the simulator's side by side) as plain text of 80 columns."""
    nan = float("nan")
    head = (f"{'causes':>7} {'checks':>6} {'steps':>5} | {'step ms':>7} {'ref ms':>7} | "
            f"{'shell ms':>8} {'ref ms':>7} | {'step MB':>7}")
    lines = ["cold steps (each a new answer; median), fast planner | reference:",
             head, "-" * len(head)]
    for r in rows:
        lines.append(f"{r['causes']:>7} {r['checks']:>6} {r.get('steps', 0):>5} | "
                     f"{r['step_ms']:>7.2f} {r.get('ref_ms', nan):>7.2f} | "
                     f"{r.get('shell_ms', nan):>8.2f} {r.get('shell_ref_ms', nan):>7.2f} | "
                     f"{r['step_peak_mb']:>7.1f}")
    lines.append("step: one answer added, the posterior, every check's ECO and every repair "
                 "ranked;")
    lines.append("shell: the same, every check and repair ordered, the checks view's rows, "
                 "the ranking")
    lines.append("view drawn; ref: the reference planner")
    lines.append("")
    head = (f"{'causes':>7} {'compile s':>9} {'schema s':>8} {'tables s':>8} "
            f"{'compile MB':>10}")
    lines += [head, "-" * len(head)]
    for r in rows:
        lines.append(f"{r['causes']:>7} {r['compile_s']:>9.2f} "
                     f"{r.get('schema_s', nan):>8.2f} {r['tables_s']:>8.3f} "
                     f"{r['compile_peak_mb']:>10.1f}")
    for r in rows:
        if "pgmpy_ms" in r:
            lines.append(f"posterior on each step's new evidence at {r['causes']:,} causes: "
                         f"reasoner {r['posterior_ms']:.3f} ms,")
            lines.append(f"  pgmpy VariableElimination {r['pgmpy_ms']:.1f} ms "
                         f"({r['pgmpy_ratio']:.0f}x; {r['pgmpy_steps']} steps)")
    for r in rows:
        two = r.get("two_faults")
        if two:
            n = r["causes"]
            every = n * (n - 1) // 2 + n + 1
            lines.append(f"--max-faults 2 at {n:,} causes ({two['hypotheses']:,} hypotheses, "
                         f"every pair: {every:,}):")
            planned = (f"with the planner {two['step_ms']:.0f} ms" if two["planner"] == "yes"
                       else f"the planner: {two['planner']}")
            lines.append(f"  posterior and ranking {two['posterior_ms']:.0f} ms; {planned}")
    if sim is not None:
        same = "identical runs" if sim["identical"] else "RUNS DIFFER"
        lines.append("")
        lines.append(f"simulate {sim['pack']}, {sim['runs']} runs: planner "
                     f"{sim['planner_s']:.2f} s, reference {sim['reference_s']:.2f} s "
                     f"({sim['ratio']:.1f}x), {same}")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    import warnings

    warnings.simplefilter("ignore", FutureWarning)  # pgmpy's deprecation notices
    parser = argparse.ArgumentParser(prog="python -m diagnose.bench",
                                     description="Benchmark the reasoner on synthetic packs.")
    parser.add_argument("--sizes", type=int, nargs="+", default=list(SIZES), metavar="N")
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--sessions", type=int, default=3, metavar="N",
                        help="sessions timed at each size (new answers at every step)")
    parser.add_argument("--steps", type=int, default=12, metavar="N",
                        help="answers in each session")
    parser.add_argument("--two-faults", type=int, default=2000, metavar="N",
                        help="size of the --max-faults 2 figure (0: skip)")
    parser.add_argument("--no-pgmpy", action="store_true", help="skip the pgmpy comparison")
    parser.add_argument("--sim-runs", type=int, default=300, metavar="N",
                        help="runs of the simulator, planner against reference (0: skip)")
    parser.add_argument("--load-causes", type=int, default=10000, metavar="N",
                        help="causes of the pack loaded from YAML and from the cache (0: skip)")
    parser.add_argument("--start-runs", type=int, default=5, metavar="N",
                        help="runs of the piped first question, each way (0: skip)")
    args = parser.parse_args(argv)
    rows = run(tuple(args.sizes), seed=args.seed, sessions=args.sessions, steps=args.steps,
               pgmpy=not args.no_pgmpy, two_faults=args.two_faults)
    sim = simulate_side_by_side(runs=args.sim_runs, seed=args.seed) if args.sim_runs > 0 else None
    print(table(rows, sim))
    if args.load_causes or args.start_runs:
        print()
        print(load_table(load_figures(args.load_causes, seed=args.seed,
                                      start_runs=args.start_runs)))
    return 0 if sim is None or sim["identical"] else 1


if __name__ == "__main__":
    raise SystemExit(main())
