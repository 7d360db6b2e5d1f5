"""`diagnose simulate PACK`: simulated service calls, planner against a printed chart."""

from __future__ import annotations

import argparse
import json
from typing import Any

POLICIES = ("planner", "chart", "listing", "random")  # run when --policy is not given
CHOICES = (*POLICIES, "reference")


def register(sub: Any) -> None:
    p = sub.add_parser(
        "simulate", help="simulate service calls and compare the planner with a chart",
        description="Draw true causes from the priors, answer every check from the pack's "
        "effects (each answer wrong with probability --noise) and run a policy until a repair "
        "cures the unit. Reports mean checks, mean minutes to a cure, first-repair success, "
        "top-1 accuracy at the first repair and the entropy bound. With --unknown-rate a share "
        "of the calls has a cause outside the pack (every check answers normal, no repair "
        "cures): reports how often each policy escalated or ranked 'unknown' first before "
        "a repair, and how many repairs it tried in vain. Without --policy the planner and the "
        "three chart policies run on the same draws, side by side; --policy reference runs "
        "the planner's slower reference version, which must give the planner's figures. "
        "--jobs N splits the runs over N processes with the same results; on a terminal a "
        "progress bar shows on standard error (never with --json).")
    p.add_argument("pack", metavar="PACK", help="pack id or folder")
    p.add_argument("--runs", type=int, default=500, metavar="N", help="simulated calls (500)")
    p.add_argument("--seed", type=int, default=1, metavar="S", help="random seed (1)")
    p.add_argument("--noise", type=float, default=0.0, metavar="Q",
                   help="probability that an answer is wrong (0)")
    p.add_argument("--unknown-rate", type=float, default=0.0, metavar="R",
                   help="share of calls whose cause is outside the pack, from 0 up to 1 (0); "
                   "the other figures stay over the known-cause calls")
    p.add_argument("--policy", choices=CHOICES, action="append", default=None,
                   help="run this policy (repeatable; listing: the pack's order, for "
                   "reference; reference: the planner's reference version)")
    p.add_argument("--max-faults", type=int, choices=(1, 2), default=1,
                   help="hypotheses of the planner: one cause (default) or up to two")
    p.add_argument("--jobs", type=int, default=1, metavar="N",
                   help="split the runs over N processes (1); the same seed gives the same "
                   "report whatever N is, since every run's draws come from the seed first")
    p.add_argument("--json", action="store_true", help="one JSON object instead of a table")
    p.set_defaults(handler=_simulate)


def _simulate(args: argparse.Namespace) -> int:
    from diagnose.commands.kb import load
    from diagnose.commands.progress import progress_bar
    from diagnose.errors import InputError
    from diagnose.reasoning.simulate import simulate

    if args.jobs < 1:
        raise InputError("--jobs", f"expected at least 1 process, got {args.jobs}")
    model = load(args, args.pack)
    policies = tuple(dict.fromkeys(args.policy)) if args.policy else POLICIES
    options: dict[str, Any] = {"runs": args.runs, "seed": args.seed, "noise": args.noise,
                               "policies": policies, "max_faults": args.max_faults,
                               "unknown_rate": args.unknown_rate}
    with progress_bar("simulating", json=args.json) as progress:
        if args.jobs == 1 or args.runs < 2:
            report = simulate(model, progress=progress, **options)
        else:
            from concurrent.futures import ProcessPoolExecutor

            # a few parts per process, so that the processes finish together
            chunk = max(1, -(-args.runs // (4 * args.jobs)))
            with ProcessPoolExecutor(max_workers=args.jobs) as pool:
                report = simulate(model, progress=progress, executor=pool, chunk=chunk,
                                  **options)
    if args.json:
        print(json.dumps(report.to_dict(), indent=2))
    else:
        from diagnose.text import console
        from diagnose.views_reasoning import SimulationView

        console().print(SimulationView(report))
    return 0
