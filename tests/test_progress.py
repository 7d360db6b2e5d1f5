"""Progress and processes: the bar only on a terminal, the callbacks, `simulate --jobs N`."""

from __future__ import annotations

import io
import json
import subprocess
import sys
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import pytest

from diagnose.cli import main
from diagnose.commands.progress import progress_bar, shows_progress
from diagnose.errors import InputError
from diagnose.reasoning.analysis import analyze
from diagnose.reasoning.evidence import Evidence
from diagnose.reasoning.plancache import plan_cache
from diagnose.reasoning.simulate import draw_cases, run_policy, simulate
from diagnose.reasoning.synthetic import synthetic_model, tiny_model
from diagnose.reasoning.tables import tables_for
from diagnose.reasoning.unitstate import unit_state

MINI = str(Path(__file__).parent / "fixtures" / "mini")


class Calls:
    """A progress callback that remembers how it was called."""

    def __init__(self) -> None:
        self.seen: list[tuple[int, int]] = []

    def __call__(self, done: int, total: int) -> None:
        self.seen.append((done, total))


def test_simulate_calls_progress_once_per_run_and_policy():
    calls = Calls()
    simulate(tiny_model(), runs=12, seed=3, noise=0.05, policies=("planner", "chart"),
             progress=calls)
    assert calls.seen == [(n, 24) for n in range(1, 25)]


def test_run_policy_calls_progress_once_per_run():
    m = tiny_model()
    calls = Calls()
    run_policy(m, draw_cases(m, 7, 1), "planner", progress=calls)
    assert calls.seen == [(n, 7) for n in range(1, 8)]


def test_parts_on_an_executor_give_the_same_report_and_progress_per_part():
    m = synthetic_model(12, seed=4)
    calls = Calls()
    one = simulate(m, runs=23, seed=5, noise=0.05, unknown_rate=0.1)
    with ThreadPoolExecutor(max_workers=2) as pool:
        split = simulate(m, runs=23, seed=5, noise=0.05, unknown_rate=0.1, executor=pool,
                         chunk=5, progress=calls)
    assert json.dumps(split.to_dict()) == json.dumps(one.to_dict())
    parts = 5 * len(split.policies)  # 23 runs in parts of 5, per policy
    assert len(calls.seen) == parts and calls.seen[-1] == (23 * len(split.policies),) * 2
    assert [d for d, _ in calls.seen] == sorted(d for d, _ in calls.seen)


def test_a_part_of_the_draws_runs_as_in_the_whole():
    m = synthetic_model(10, seed=2)
    draws = draw_cases(m, 20, 9, unknown_rate=0.2)
    whole = run_policy(m, draws, "planner", noise=0.1)
    assert run_policy(m, draws.part(5, 12), "planner", noise=0.1) == whole[5:12]


def test_a_bad_chunk_is_refused():
    with pytest.raises(InputError):
        simulate(tiny_model(), runs=3, seed=1, chunk=0)


def test_analyze_calls_progress_up_to_its_total():
    calls = Calls()
    analyze(tiny_model(), runs=4, progress=calls)
    complaints = len(tiny_model().complaints)
    total = complaints * 4 * 2  # runs × the planner and the chart, per complaint
    assert len(calls.seen) == total and calls.seen[-1] == (total, total)
    calls = Calls()
    analyze(tiny_model(), effort=False, progress=calls)
    assert calls.seen == [(n, complaints) for n in range(1, complaints + 1)]


def test_no_bar_for_json_or_when_standard_error_is_not_a_terminal():
    class Tty(io.StringIO):
        def isatty(self) -> bool:
            return True

    assert not shows_progress(stream=io.StringIO())
    assert shows_progress(stream=Tty()) and not shows_progress(json=True, stream=Tty())
    with progress_bar("simulating") as progress:  # under pytest standard error is captured
        assert progress is None


@pytest.mark.parametrize(("argv", "label"), [
    (["simulate", MINI, "--runs", "15", "--policy", "planner"], "simulating"),
    (["kb", "analyze", MINI, "--runs", "3"], "analysing"),
    (["kb", "test", MINI], "testing"),
])
def test_piped_output_has_no_progress_bar(argv, label):
    done = subprocess.run([sys.executable, "-m", "diagnose", *argv], capture_output=True,
                          text=True, timeout=120, env=_env())
    assert done.stdout
    for text in (done.stdout, done.stderr):  # no bar, no cursor moves, no colours
        assert label not in text and "\x1b[" not in text and "\r" not in text


def test_simulate_jobs_gives_the_same_json_as_one_process(capsys):
    argv = ["simulate", MINI, "--runs", "30", "--seed", "4", "--noise", "0.05",
            "--unknown-rate", "0.1", "--json"]
    assert main(argv) == 0
    one = capsys.readouterr()[0]
    assert main([*argv, "--jobs", "2"]) == 0
    assert capsys.readouterr()[0] == one


def test_simulate_jobs_must_be_positive(capsys):
    assert main(["simulate", MINI, "--runs", "3", "--jobs", "0"]) != 0
    assert "--jobs" in capsys.readouterr()[1]


def test_the_memoised_state_of_the_unit_is_the_fold():
    m = synthetic_model(15, seed=6)
    cache = plan_cache(tables_for(m))
    ev = Evidence(complaints=(next(iter(m.complaints)),))
    for cid in list(m.checks)[:12]:
        chk = m.checks[cid]
        ev = ev.with_outcome(cid, chk.outcomes[0])
        assert dict(cache.unit_state(m, ev)) == unit_state(m, ev)


def _env() -> dict[str, str]:
    import os

    env = {k: v for k, v in os.environ.items() if k not in ("FORCE_COLOR", "NO_COLOR")}
    return env


def _on_a_terminal(argv: list[str]) -> tuple[bytes, bytes]:
    """Run the command with standard error on a pseudo-terminal: (its output, what the
    terminal saw)."""
    import os

    leader, follower = os.openpty()
    try:
        done = subprocess.run([sys.executable, "-m", "diagnose", *argv], stdout=subprocess.PIPE,
                              stderr=follower, timeout=120, env=_env())
    finally:
        os.close(follower)
    seen = b""
    try:
        while chunk := os.read(leader, 65536):
            seen += chunk
    except OSError:  # the terminal is closed once read
        pass
    finally:
        os.close(leader)
    assert done.returncode == 0
    return done.stdout, seen


@pytest.mark.skipif(sys.platform == "win32", reason="pseudo-terminals")
def test_a_terminal_sees_the_bar_on_standard_error_and_the_output_stays_clean():
    out, seen = _on_a_terminal(["simulate", MINI, "--runs", "40", "--policy", "planner"])
    assert b"simulating" in seen and b"simulating" not in out and b"\r" not in out
    out, seen = _on_a_terminal(["simulate", MINI, "--runs", "40", "--policy", "planner",
                                "--json"])
    assert b"simulating" not in seen + out and json.loads(out)["runs"] == 40
