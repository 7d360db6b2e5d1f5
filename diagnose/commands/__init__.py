"""Subcommand groups of the command line; each module has ``register(subparsers)``."""

from __future__ import annotations

import argparse
import os
import sys
from typing import Any

FORCE_HELP = ("replace FILE if it exists (never the journal, a database file or a path "
              "through a symbolic link)")


def add_output_arguments(parser: Any, *, what: str = "write to FILE instead of the screen") -> None:
    """The ``-o/--output FILE`` and ``--force`` options of a command that writes a file."""
    parser.add_argument("-o", "--output", metavar="FILE",
                        help=f"{what}; an existing FILE is kept unless --force")
    parser.add_argument("--force", action="store_true", help=FORCE_HELP)


def write_output(text: str, output: str | None, *, force: bool = False,
                 journal: str | os.PathLike[str] | None = None) -> None:
    """``text`` to the file ``output`` (the -o option), or to the screen when none is given.

    The file is written at once (a temporary file renamed into place). An
    existing file is replaced only with ``force``; the journal in use
    (``journal``, else the one DIAGNOSE_JOURNAL or the data folder names), a
    database file and a path through a symbolic link never are.

    Raises:
        InputError: the file is refused or cannot be written.
    """
    if not output:
        sys.stdout.write(text)
        return
    from diagnose.paths import writable_target, write_text_atomically

    target = writable_target(output, journal=journal, force=force)
    write_text_atomically(target, text)


def output_options(args: argparse.Namespace) -> dict[str, Any]:
    """``force`` and ``journal`` for ``write_output`` from the parsed command line."""
    return {"force": bool(getattr(args, "force", False)),
            "journal": getattr(args, "journal", None)}
