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
        import_module(group).register(sub)
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
