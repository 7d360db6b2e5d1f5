"""`calc` inside the shell: the physics calculators of `diagnose calc`, with the same options.

``calc coil --rated-voltage 24V --rated-power 20W --ohms 3.2`` gives the
verdict with its figures. The options are those of `diagnose calc NAME`
(generated from the evaluator registry), so the two never disagree; a bare
length is read, and figures are shown, in the technician's preferred units.
"""

from __future__ import annotations

import argparse
import shlex
from typing import Any, NoReturn

from diagnose.errors import InputError


class _Refused(argparse.ArgumentParser):
    """An ArgumentParser that raises InputError instead of printing and exiting."""

    def error(self, message: str) -> NoReturn:  # type: ignore[override]
        raise InputError("calc", message)

    def exit(self, status: int = 0, message: str | None = None) -> NoReturn:  # type: ignore[override]
        raise InputError("calc", message or "see: calc NAME --help")


def _parsers() -> tuple[argparse.ArgumentParser, dict[str, argparse.ArgumentParser]]:
    from diagnose.service.calc import register

    root = _Refused(prog="", add_help=False)
    sub = root.add_subparsers(dest="group", parser_class=_Refused)
    calc_parser = register(sub)
    names: dict[str, argparse.ArgumentParser] = {}
    for action in calc_parser._actions:  # the evaluators' sub-parsers, for their help text
        if isinstance(action, argparse._SubParsersAction):
            names = dict(action.choices)
    return root, names


def run_calc(line: str, units: str | None = None) -> Any:
    """A renderable: the verdict of ``line`` (``NAME --input VALUE ...``) or the help asked for.

    ``units``: the technician's preference ("metric" or "inch"): under "inch" a
    bare length is read in inches and lengths are shown in inches with mm
    beside them, as the shell's readings are. None: the settings file's.

    Raises:
        InputError: unknown calculator, bad options, a value the physics refuses,
            a broken settings file.
    """
    from rich.text import Text

    from diagnose.physics.registry import EVALUATORS

    try:
        tokens = shlex.split(line)
    except ValueError as exc:
        raise InputError("calc", str(exc)) from None
    if not tokens:
        listing = "\n".join(f"  {s.name:<12} {s.title}" for s in EVALUATORS.values())
        return Text("calc NAME --INPUT VALUE ...   (calc NAME alone lists its inputs)\n"
                    + listing)
    root, names = _parsers()
    name = tokens[0]
    if name not in EVALUATORS:
        raise InputError("calc", f"no calculator {name!r}; known: {', '.join(EVALUATORS)}")
    if len(tokens) == 1 or any(t in ("-h", "--help", "help") for t in tokens[1:]):
        return Text(names[name].format_help().replace("usage:  calc", "usage: calc"))
    from diagnose.service import preferences
    from diagnose.service.calc import verdict_of
    from diagnose.views import VerdictView

    args = root.parse_args(["calc", *tokens])
    units = units or preferences().units
    return VerdictView(verdict_of(args, units), units)
