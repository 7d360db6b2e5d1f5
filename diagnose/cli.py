"""The command line: argparse subcommands over the library, nothing more.

Each group of subcommands lives in ``diagnose/commands/<group>.py`` with a
``register(subparsers)`` function; a handler returns an exit status. Domain
errors become one line on stderr: exit 2 for bad input, 1 for a broken pack
or journal. No traceback reaches a user.
"""

from __future__ import annotations

import argparse
import sys
from importlib import import_module

from diagnose import __version__

# Order is the order in --help.
_GROUPS = ("start", "run", "calc", "kb", "simulate", "journal")

EXIT_OK, EXIT_FAIL, EXIT_USAGE = 0, 1, 2


class _Parser(argparse.ArgumentParser):
    """An ArgumentParser whose errors are one line and exit status 2."""

    def error(self, message: str) -> None:  # type: ignore[override]
        self.exit(EXIT_USAGE, f"{self.prog}: error: {message}\n")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="diagnose",
        description="Diagnostic assistant for electromagnetic holding brakes. "
        "With no command, opens the interactive shell on the default pack.",
    )
    parser.add_argument("--version", action="version", version=f"diagnose {__version__}")
    parser.add_argument("--packs", metavar="DIR", action="append", default=[],
                        help="a folder of your own packs, searched before the shipped ones "
                        "(repeatable; also DIAGNOSE_PACKS, separated by ':')")
    parser.add_argument("--journal", metavar="PATH",
                        help="the journal file (default: DIAGNOSE_JOURNAL or the user data folder)")
    parser.add_argument("--no-learned", action="store_true",
                        help="ignore priors learned from closed repairs")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for group in _GROUPS:
        try:
            module = import_module(f"diagnose.commands.{group}")
        except ModuleNotFoundError as exc:  # a group not built yet
            if exc.name != f"diagnose.commands.{group}":
                raise
            continue
        module.register(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    from diagnose.errors import DiagnoseError, InputError

    parser = build_parser()
    args = parser.parse_args(argv)
    handler = getattr(args, "handler", None)
    if handler is None:
        start = getattr(args, "default_handler", None)
        try:
            from diagnose.commands import start as start_mod
        except ModuleNotFoundError:
            parser.print_help()
            return EXIT_OK
        handler = start or start_mod.default
    try:
        return int(handler(args) or 0)
    except InputError as exc:
        print(f"diagnose: {exc}", file=sys.stderr)
        return EXIT_USAGE
    except DiagnoseError as exc:
        print(f"diagnose: {exc}", file=sys.stderr)
        return EXIT_FAIL
    except KeyboardInterrupt:
        print("diagnose: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return EXIT_OK


if __name__ == "__main__":
    raise SystemExit(main())
