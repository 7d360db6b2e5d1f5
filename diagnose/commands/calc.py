"""`diagnose calc NAME`: run one measurement evaluator by hand.

The options come from the registry (``diagnose.service.calc``, shared with
the shell's `calc`); this face prints the verdict, or one JSON object. A
bare length is read in the preferred units, and figures are shown in them.
"""

from __future__ import annotations

import argparse
from typing import Any


def register(subparsers: Any) -> None:
    from diagnose.service.calc import register as add_calc

    add_calc(subparsers, handler=run)


def run(args: argparse.Namespace) -> int:
    """Evaluate the chosen evaluator on the options given and print the verdict.

    Bare lengths are read, and figures shown, in the preferred units
    (``--units`` over the settings file); the JSON is the verdict's data as
    the evaluator worked it out.
    """
    from diagnose.service import preferences
    from diagnose.service.calc import verdict_of
    from diagnose.text import console, json_text
    from diagnose.views import VerdictView

    units = preferences(args).units
    verdict = verdict_of(args, units)
    if args.calc_json:
        print(json_text(verdict.to_dict(), indent=2))
    else:
        console().print(VerdictView(verdict, units))
    return 0
