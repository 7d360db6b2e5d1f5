"""The command line: argparse subcommands over the library, nothing more.

Each group of subcommands lives in a face's module with a
``register(subparsers)`` function (``diagnose/commands/<group>.py``, and
``diagnose/shell/cli.py`` for the shell's `start` and `resume`); a handler
returns an exit status. This is the one module that names every face. Domain
errors become one line on stderr: exit 2 for bad input, 1 for a broken pack
or journal. No traceback reaches a user: a bug is one line too (exit 70),
unless ``DIAGNOSE_DEBUG`` is set. Output that the terminal's encoding cannot
hold is written with replacements.
"""

from __future__ import annotations

import argparse
import os
import sys
from importlib import import_module
from typing import Any

from diagnose import __version__

# Order is the order in --help.
_GROUPS = ("diagnose.shell.cli", "diagnose.commands.run", "diagnose.commands.calc",
           "diagnose.commands.kb", "diagnose.commands.simulate", "diagnose.commands.journal")

EXIT_OK, EXIT_FAIL, EXIT_USAGE = 0, 1, 2
#: Exit status of a bug caught at the top (EX_SOFTWARE of BSD sysexits.h).
EXIT_SOFTWARE = 70
#: With this environment variable set, a bug shows its traceback (the tests set it).
DEBUG_ENV = "DIAGNOSE_DEBUG"


class _Parser(argparse.ArgumentParser):
    """An ArgumentParser whose errors are one line and exit status 2."""

    def error(self, message: str) -> None:  # type: ignore[override]
        from diagnose.text import excerpt

        self.exit(EXIT_USAGE, f"{self.prog}: error: {excerpt(message, 300)}\n")


class _Top(_Parser):
    """The parser of the whole command line."""

    def parse_known_args(self, args: Any = None, namespace: Any = None) -> Any:  # type: ignore[override]
        """As argparse does; then ``--packs`` given after the command joins the ones before it."""
        parsed, extra = super().parse_known_args(args, namespace)
        # one list a level of command ("diagnose kb", "diagnose kb lint"): outer ones first
        levels = sorted((k for k in vars(parsed) if k.startswith(_PACKS_AFTER)), key=len)
        for key in levels:
            parsed.packs = [*(getattr(parsed, "packs", None) or []), *vars(parsed).pop(key)]
        return parsed, extra


#: The options of every command, accepted before the command and after it.
GLOBAL_OPTIONS = ("--packs", "--journal", "--no-learned", "--no-cache", "--units")
#: The unit systems of ``--units`` (``diagnose.settings.UNITS``; here so that --help stays fast).
UNITS = ("metric", "inch")


def _global_options(parser: argparse.ArgumentParser, *, after: bool) -> None:
    """Add the options of every command (:data:`GLOBAL_OPTIONS`) to ``parser``.

    Before the command they have their defaults; after it (``after``) they
    default to nothing (``argparse.SUPPRESS``), so that a value given after the
    command wins and one given before it is kept when none is given after.
    ``--packs`` given both before and after adds up: the folders before come first.
    """
    target: Any = parser.add_argument_group("options of every command (before or after it)") \
        if after else parser
    unset: Any = argparse.SUPPRESS
    target.add_argument("--packs", metavar="DIR", action="append",
                        dest=f"{_PACKS_AFTER} {parser.prog}" if after else "packs",
                        default=unset if after else [],
                        help="a folder of your own packs, searched before the shipped ones "
                        "(repeatable; also DIAGNOSE_PACKS, separated by ':')")
    target.add_argument("--journal", metavar="PATH", default=unset if after else None,
                        help="the journal file, or a team journal's postgresql:// URL "
                        "(default: DIAGNOSE_JOURNAL, the settings file's journal, or the user "
                        "data folder)")
    target.add_argument("--no-learned", action="store_true",
                        default=unset if after else False,
                        help="ignore priors learned from closed repairs")
    target.add_argument("--no-cache", action="store_true",
                        default=unset if after else False,
                        help="read and compile packs from their YAML, not from the compiled-pack "
                        "cache (see `diagnose kb cache`)")
    target.add_argument("--units", choices=UNITS, default=unset if after else None,
                        help="inch: bare lengths (air gap, runout, wear) are read in inches and "
                        "shown in inches with mm beside them (default: the settings file's "
                        "units, else metric)")


#: Where ``--packs`` given after a command is kept until it joins the ones before it.
_PACKS_AFTER = "packs_after_command"


def _every_command(parser: argparse.ArgumentParser) -> list[argparse.ArgumentParser]:
    """The parsers of every command and subcommand under ``parser``, each once."""
    found: list[argparse.ArgumentParser] = []
    for action in parser._actions:  # argparse keeps its subcommands there
        if isinstance(action, argparse._SubParsersAction):
            for child in dict.fromkeys(action.choices.values()):
                found += [child, *_every_command(child)]
    return found


def build_parser() -> argparse.ArgumentParser:
    parser = _Top(
        prog="diagnose",
        description="Diagnostic assistant for electromagnetic holding brakes. "
        "With no command, opens the interactive shell on the default pack.",
    )
    parser.add_argument("--version", action="version", version=f"diagnose {__version__}")
    _global_options(parser, after=False)
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for group in _GROUPS:
        import_module(group).register(sub)
    for command in _every_command(parser):
        _global_options(command, after=True)
    return parser


def _tolerant_output() -> None:
    """Standard output and error write what their encoding cannot hold as replacements.

    With ``PYTHONIOENCODING=ascii`` or a C locale without UTF-8 mode, an ohm sign
    or a ranking bar would otherwise stop the program half-way (after a session
    was recorded); it is shown as ``?`` instead.
    """
    for stream in (sys.stdout, sys.stderr):
        if getattr(stream, "errors", None) in ("strict", "surrogateescape") and hasattr(
                stream, "reconfigure"):
            try:
                stream.reconfigure(errors="replace")
            except (ValueError, OSError):  # a stream that cannot change keeps its ways
                pass


def main(argv: list[str] | None = None) -> int:
    from diagnose.errors import DiagnoseError, InputError
    from diagnose.text import excerpt, say

    _tolerant_output()
    parser = build_parser()
    args = parser.parse_args(argv)
    handler = getattr(args, "handler", None)
    if handler is None:
        from diagnose.shell.cli import default

        handler = default
    try:
        return int(handler(args) or 0)
    except InputError as exc:
        say(f"diagnose: {exc}", file=sys.stderr)
        return EXIT_USAGE
    except DiagnoseError as exc:
        say(f"diagnose: {exc}", file=sys.stderr)
        return EXIT_FAIL
    except KeyboardInterrupt:
        print("diagnose: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return EXIT_OK
    except OSError as exc:  # the output or a file outside the journal failed (disk full, ...)
        what = exc.strerror or type(exc).__name__
        where = f": {exc.filename}" if exc.filename else ""
        say(f"diagnose: input or output failed: {what}{where}", file=sys.stderr)
        return EXIT_FAIL
    except MemoryError:
        print("diagnose: out of memory", file=sys.stderr)
        return EXIT_FAIL
    except Exception as exc:  # noqa: BLE001 (the last line of defence: a bug, said in one line)
        if os.environ.get(DEBUG_ENV):
            raise
        say(f"diagnose: unexpected error ({type(exc).__name__}: {excerpt(exc, 120)}); this is a "
            f"bug in diagnose: run again with {DEBUG_ENV}=1 to see where", file=sys.stderr)
        return EXIT_SOFTWARE


if __name__ == "__main__":
    raise SystemExit(main())
