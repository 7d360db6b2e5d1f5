"""`diagnose calc NAME`: run one measurement evaluator by hand.

The options come from the registry (``diagnose.service.calc``, shared with
the shell's `calc`); this face prints the verdict, or one JSON object.
"""

from __future__ import annotations

import argparse
from typing import Any


def register(subparsers: Any) -> None:
    from diagnose.service.calc import register as add_calc

    add_calc(subparsers, handler=run)


def run(args: argparse.Namespace) -> int:
    """Evaluate the chosen evaluator on the options given and print the verdict."""
    from diagnose.service.calc import verdict_of
    from diagnose.text import console, json_text
    from diagnose.views import VerdictView

    verdict = verdict_of(args)
    if args.calc_json:
        print(json_text(verdict.to_dict(), indent=2))
    else:
        console().print(VerdictView(verdict))
    return 0
