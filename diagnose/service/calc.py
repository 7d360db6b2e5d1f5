"""The calculators' options and their verdict, for `diagnose calc NAME` and the shell's `calc`.

Both faces build their parsers here and get the verdict from
:func:`verdict_of`, so the two never disagree. Options are generated from the
evaluator registry: input ``rated_voltage`` becomes ``--rated-voltage``;
``--temp`` is kept as a short form of ``--temperature``. Only the light
registry is imported here; pint and rich are imported when a calculation
runs, so ``diagnose --help`` stays fast.
"""

from __future__ import annotations

import argparse
import re
import textwrap
from typing import Any

from diagnose.physics.registry import EVALUATORS, EvaluatorSpec, InputSpec

_ALIASES = {"temperature": ("--temp",)}
# argparse takes "-24" for a value but "-24V" for an option; a reversed supply or a
# temperature below zero is typed with its unit, so any "-<digit>..." is a value here.
_NEGATIVE_VALUE = re.compile(r"^-\.?\d")


class _Formatter(argparse.HelpFormatter):
    """Shows a one-value option as ``--ohms OHM`` although it takes "31.1 ohm" as two words."""

    def _format_args(self, action: argparse.Action, default_metavar: str) -> str:
        if getattr(action, "calc_single", False):
            return self._metavar_formatter(action, default_metavar)(1)[0]
        return super()._format_args(action, default_metavar)

    def _fill_text(self, text: str, width: int, indent: str) -> str:
        """Wraps the description without breaking an option such as --supply-voltage."""
        text = " ".join(text.split())
        return textwrap.fill(text, width, initial_indent=indent, subsequent_indent=indent,
                             break_on_hyphens=False)


def register(subparsers: Any, handler: Any = None) -> Any:
    """Add the ``calc`` parser with one sub-parser per registered evaluator; return it.

    ``handler`` is what the command line runs for a calculator (set as its default).
    """
    listing = "\n".join(textwrap.fill(f"{spec.name}: {', '.join(spec.all_verdicts)}", 78,
                                       initial_indent="  ", subsequent_indent="    ")
                         for spec in EVALUATORS.values())
    calc = subparsers.add_parser(
        "calc", help="work out one measurement by hand (coil, supply, cable, gap, ...)",
        description=textwrap.fill(
            "Judge one measurement without a session. Values take units (24V, 0.15 mm, "
            "0.006 in, 40 degC, 0.5mm2, OL); a bare number is in the input's default unit, "
            "but for a length in mm it is in inches under the inch preference (--units inch "
            "or the settings file), and figures are then shown in inches with mm beside. "
            "See `diagnose calc NAME --help` for the inputs of each.", 78),
        epilog="verdicts:\n" + listing,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    names = calc.add_subparsers(dest="calc_name", metavar="NAME", required=True)
    for spec in EVALUATORS.values():
        _add_evaluator(names, spec, handler)
    return calc


def _add_evaluator(names: Any, spec: EvaluatorSpec, handler: Any) -> None:
    parser = names.add_parser(
        spec.name, help=spec.title,
        description=f"{spec.title}. Verdicts: {', '.join(spec.verdicts)}. "
        + "".join(f"With --{' and --'.join(_option(n) for n in sig.needs)}, also {sig.name}: "
                  f"{sig.help}. " for sig in spec.signatures)
        + "A value may be typed with a space before its unit (--length 50 m).",
        formatter_class=_Formatter,
    )
    parser._negative_number_matcher = _NEGATIVE_VALUE  # type: ignore[attr-defined]
    for inp in spec.inputs:
        _add_input(parser, inp)
    if spec.reading:
        parser.add_argument("--accuracy", metavar="FRACTION", dest="calc_accuracy",
                            help=f"meter accuracy as a fraction of the reading (0.01 or 1%%): "
                            f"near a band edge, show the share of each verdict across "
                            f"--{_option(spec.reading)}")
    parser.add_argument("--json", action="store_true", dest="calc_json",
                        help="print one JSON object (verdict, figures, summary)")
    parser.set_defaults(handler=handler, calc_evaluator=spec.name)


def _option(name: str) -> str:
    return name.replace("_", "-")


def _add_input(parser: argparse.ArgumentParser, inp: InputSpec) -> None:
    flags = (f"--{_option(inp.name)}", *_ALIASES.get(inp.name, ()))
    dest = f"in_{inp.name}"
    notes = ["required"] if inp.required else []
    if inp.default is not None:
        notes.append(f"default {inp.default}")
    if inp.kind == "flag":
        parser.add_argument(*flags, dest=dest, action="store_true", default=None,
                            help=inp.help)
        return
    if inp.kind == "choice":
        parser.add_argument(*flags, dest=dest, metavar="{" + ",".join(inp.choices) + "}",
                            help=f"{inp.help}; {'; '.join(notes)}" if notes else inp.help)
        return
    if inp.unit:
        notes.insert(0, f"bare numbers in {inp.unit}")
    metavar = inp.unit.replace("**", "").upper() if inp.unit else "NUMBER"
    # nargs="+" so that "--ohms 31.1 ohm" works as well as "--ohms 31.1ohm"
    action = parser.add_argument(*flags, dest=dest, metavar=metavar, nargs="+",
                                 help=f"{inp.help}; {'; '.join(notes)}".replace("%", "%%"))
    action.calc_single = not inp.many  # type: ignore[attr-defined]


def verdict_of(args: argparse.Namespace, units: str = "metric") -> Any:
    """The verdict of the chosen evaluator on the options given (parsed by :func:`register`'s).

    ``units``: the technician's preference; under "inch" a bare number given
    for a length in mm (a gap, a runout) is taken in inches, as the readings
    of a session are (``diagnose.physics.units.preferred_reading``), and the
    evaluator then works its figures out in inches.

    Raises:
        InputError: a value the physics refuses.
    """
    from diagnose.physics import evaluate
    from diagnose.physics.units import preferred_reading

    spec = EVALUATORS[args.calc_evaluator]
    values: dict[str, Any] = {}
    for inp in spec.inputs:
        given = getattr(args, f"in_{inp.name}", None)
        if given is not None:
            joined = isinstance(given, list) and not inp.many
            value = " ".join(given) if joined else given
            values[inp.name] = preferred_reading(value, inp.unit, units) \
                if inp.kind == "quantity" else value
    accuracy = getattr(args, "calc_accuracy", None)
    if accuracy is not None:
        from diagnose.physics.soft import soft_verdict
        from diagnose.physics.units import parse_quantity

        verdict = soft_verdict(spec.name, values, parse_quantity(accuracy, "", "accuracy"))
    else:
        verdict = evaluate(spec.name, values)
    return verdict
