"""Subcommand groups of the command line; each module has ``register(subparsers)``."""

from __future__ import annotations

import sys


def write_output(text: str, output: str | None) -> None:
    """``text`` to the file ``output`` (the -o option), or to the screen when none is given.

    Raises:
        InputError: the file cannot be written.
    """
    if not output:
        sys.stdout.write(text)
        return
    try:
        with open(output, "w", encoding="utf-8") as fh:
            fh.write(text)
    except OSError as exc:
        from diagnose.errors import InputError

        raise InputError("--output", f"cannot write {output}: {exc.strerror}") from None
