"""A load test of a team journal: many programs writing scripted sessions at once.

::

    python -m diagnose.journal.loadtest URL --procs 16 --sessions 50

starts ``--procs`` processes; each writes ``--sessions`` sessions, one after
another, to the journal at ``URL`` (a ``postgresql://`` team journal, or an
SQLite file). The sessions are the test cases of a shipped pack
(``--pack``, default ``spring-applied-brake``: its ``tests.yaml``), each
played through the real session API (:class:`diagnose.session.Session` with
the journal's :class:`diagnose.journal.recorder.Recorder` as its sink):
notice, nameplate, complaint, every caution acknowledged, every step, the
end. A process holds each of its sessions while it writes it
(:mod:`diagnose.journal.holders`), as the faces do.

By default every process first plays each case once in memory and then
writes the same events, with the rankings the session computed, through the
store (``write``, one committed transaction an event): this measures the
journal. ``--live`` plays every session live instead, ranking each step as
it goes; on a small machine the reasoning, not the journal, then sets the
pace.

Then it checks the journal: every session of the run has exactly the events
its process wrote (none lost, none twice), and every session's hash chain
holds. It prints one line of figures: events, events per second over the
whole run, and the median and 99th percentile of the time of one ``write``
(the commit of one event), and exits 1 when anything was lost, duplicated
or broken.

The database should be one the test may fill (a fresh one); the run's
sessions are known by the technician's name it gives them
(``load <run> p<n>``), so other sessions there do not count.
"""

from __future__ import annotations

import argparse
import json
import multiprocessing
import os
import sys
import time
from dataclasses import dataclass
from typing import Any

DEFAULT_PACK = "spring-applied-brake"


def _cases(pack: str) -> tuple[Any, list[dict[str, Any]]]:
    """The compiled pack and its test cases (the scripts played)."""
    import yaml

    from diagnose.kb.loader import load_model
    from diagnose.kb.locate import find_pack

    model = load_model(pack, cache=True)
    with open(find_pack(pack) / "tests.yaml", encoding="utf-8") as fh:
        cases = list(yaml.safe_load(fh).get("tests") or [])
    if not cases:
        raise SystemExit(f"loadtest: the pack {pack} has no test cases to play")
    return model, cases


def _play(session: Any, case: dict[str, Any]) -> None:
    """One test case through the session, as a technician would: cautions acknowledged."""
    for param, value in (case.get("nameplate") or {}).items():
        session.set_nameplate(param, value)
    for complaint in case.get("complaints") or []:
        session.add_complaint(complaint)
    for step in case.get("steps") or []:
        item = step.get("check") or step.get("repair")
        for caution in session.pending_cautions(item):
            session.acknowledge(caution.id, item)
        session.apply_step(step)
    if not session.ended:
        session.end()


class _Timed:
    """A journal whose every ``write`` is timed (seconds, in ``times``)."""

    def __init__(self, journal: Any) -> None:
        self.journal = journal
        self.times: list[float] = []

    def write(self, session_id: str, event: Any, **options: Any) -> int:
        t0 = time.perf_counter()
        seq = self.journal.write(session_id, event, **options)
        self.times.append(time.perf_counter() - t0)
        return int(seq)

    def __getattr__(self, name: str) -> Any:
        return getattr(self.journal, name)


class _Capture:
    """A sink keeping each event and the ranking the recorder computes after it."""

    def __init__(self, model: Any) -> None:
        from diagnose.journal.recorder import Recorder

        self.rows: list[tuple[Any, Any]] = []
        self._recorder = Recorder(self, model)

    def write(self, session_id: str, event: Any, *, ranking: Any = None) -> None:
        self.rows.append((event, ranking))

    def sink(self) -> Any:
        return self._recorder


def _scripted(model: Any, cases: list[dict[str, Any]]) -> list[list[tuple[Any, Any]]]:
    """Every case played once in memory: its events and rankings, in order."""
    from diagnose.session import Session

    out = []
    for case in cases:
        capture = _Capture(model)
        _play(Session(model, sink=capture.sink(), session_id="script"), case)
        out.append(capture.rows)
    return out


def _worker(target: str, index: int, options: dict[str, Any], go: Any, queues: Any) -> None:
    """One process: its sessions written, then (ids, event counts, write times) sent back."""
    from diagnose.journal.holders import holder_name
    from diagnose.journal.recorder import start_session
    from diagnose.journal.stores import open_journal

    model, cases = _cases(options["pack"])
    scripts = None if options["live"] else _scripted(model, cases)
    who = f"load {options['run']} p{index}"
    written: dict[str, int] = {}
    ready, results = queues
    with open_journal(target) as journal:
        timed = _Timed(journal)
        ready.put(index)
        go.wait()
        for n in range(options["sessions"]):
            k = (index * options["sessions"] + n) % len(cases)
            if scripts is None:
                session = start_session(timed, model, who=who)
                timed.take(session.session_id, holder_name(who))
                _play(session, cases[k])
                sid, count = session.session_id, len(session.events)
            else:
                sid = timed.new_session(model.id, model.version, model.content_hash, "site",
                                        who)
                timed.take(sid, holder_name(who))
                for event, ranking in scripts[k]:
                    timed.write(sid, event, ranking=ranking)
                count = len(scripts[k])
            timed.release(sid)
            written[sid] = count
    results.put((index, written, timed.times))


@dataclass(frozen=True)
class Figures:
    """What a load test measured and found."""

    procs: int
    sessions: int
    events: int
    seconds: float
    p50_ms: float
    p99_ms: float
    lost: int
    extra: int
    broken: str | None

    @property
    def ok(self) -> bool:
        return not self.lost and not self.extra and self.broken is None

    def __str__(self) -> str:
        rate = self.events / self.seconds if self.seconds else 0.0
        state = "ok" if self.ok else (f"FAILED: {self.lost} event(s) lost, {self.extra} extra"
                                      + (f", {self.broken}" if self.broken else ""))
        return (f"{self.procs} process(es) x {self.sessions // max(self.procs, 1)} session(s): "
                f"{self.sessions} sessions, {self.events} events in {self.seconds:.1f} s = "
                f"{rate:,.0f} events/s; commit (one write) median {self.p50_ms:.1f} ms, "
                f"p99 {self.p99_ms:.1f} ms; {state}")


def percentile(values: list[float], q: float) -> float:
    """The ``q``-th percentile of ``values`` (nearest rank; 0 for none).

    >>> percentile([5, 1, 4, 2, 3], 50), percentile(list(range(1, 101)), 99)
    (3, 99)
    """
    if not values:
        return 0.0
    ordered = sorted(values)
    rank = max(int(-(-q * len(ordered) // 100)), 1)  # ceil(q/100 * n)
    return ordered[rank - 1]


def check(target: str, written: dict[str, int]) -> tuple[int, int, str | None]:
    """Lost and extra events of the sessions ``written`` (id -> events), and the first break."""
    from diagnose.journal.stores import open_journal

    lost = extra = 0
    with open_journal(target, readonly=True) as journal:
        for sid, expected in written.items():
            found = journal.session(sid).events
            lost += max(expected - found, 0)
            extra += max(found - expected, 0)
            verified = journal.verify_chain(sid)
            if not verified.ok:
                return lost, extra, str(verified)
    return lost, extra, None


def run(target: str, *, procs: int, sessions: int, pack: str = DEFAULT_PACK,
        live: bool = False) -> Figures:
    """Run the load test against the journal ``target``; its figures."""
    from diagnose.journal.stores import open_journal

    open_journal(target).close()  # created (or upgraded) once, before the race
    ctx = multiprocessing.get_context("spawn")
    go, ready, results = ctx.Event(), ctx.Queue(), ctx.Queue()
    options = {"pack": pack, "sessions": sessions, "live": live,
               "run": f"{os.getpid()}-{int(time.time())}"}
    workers = [ctx.Process(target=_worker, args=(target, i, options, go, (ready, results)))
               for i in range(procs)]
    for w in workers:
        w.start()
    for _ in workers:  # each has loaded the pack and connected: the start is not timed
        ready.get(timeout=600)
    t0 = time.perf_counter()
    go.set()
    written: dict[str, int] = {}
    times: list[float] = []
    for _ in workers:
        _index, done, took = results.get(timeout=3600)
        written.update(done)
        times += took
    seconds = time.perf_counter() - t0
    for w in workers:
        w.join(60)
    failed = [w.exitcode for w in workers if w.exitcode]
    lost, extra, broken = check(target, written)
    if failed:
        broken = f"{len(failed)} process(es) failed"
    return Figures(procs, len(written), sum(written.values()), seconds,
                   percentile(times, 50) * 1000, percentile(times, 99) * 1000, lost, extra,
                   broken)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(
        prog="python -m diagnose.journal.loadtest",
        description="Many processes writing scripted sessions at once to one journal; then "
        "check that no event was lost or duplicated and every chain holds.")
    parser.add_argument("target", metavar="URL", help="the journal: a postgresql:// URL (or "
                        "an SQLite file)")
    parser.add_argument("--procs", type=int, default=16, help="processes (default 16)")
    parser.add_argument("--sessions", type=int, default=50,
                        help="sessions each process writes (default 50)")
    parser.add_argument("--pack", default=DEFAULT_PACK,
                        help=f"the pack whose test cases are played (default {DEFAULT_PACK})")
    parser.add_argument("--live", action="store_true",
                        help="rank every step live (the whole session API) instead of writing "
                        "the events of sessions played once in memory")
    parser.add_argument("--json", action="store_true", help="the figures as JSON")
    args = parser.parse_args(argv)
    if args.procs < 1 or args.sessions < 1:
        parser.error("--procs and --sessions must be 1 or more")
    from diagnose.errors import DiagnoseError
    from diagnose.paths import mask_url

    try:
        figures = run(args.target, procs=args.procs, sessions=args.sessions, pack=args.pack,
                      live=args.live)
    except DiagnoseError as exc:
        print(f"loadtest: {mask_url(str(exc))}", file=sys.stderr)
        return 1
    if args.json:
        rate = figures.events / figures.seconds if figures.seconds else 0.0
        print(json.dumps({**figures.__dict__, "events_per_second": round(rate, 1),
                          "ok": figures.ok}))
    else:
        print(f"{mask_url(args.target)}: {figures}")
    return 0 if figures.ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
