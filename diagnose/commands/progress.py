"""A progress bar for the long commands (`simulate`, `kb analyze`, `kb test`), on a terminal only.

The bar is drawn by rich on standard error, through the program's one gate
for consoles (:func:`diagnose.text.console`), and only when standard error
is a terminal and the command does not write JSON: a pipe, a file, a test
and a ``--json`` run see nothing of it. The computing layers know nothing of
it: they take a ``progress(done, total)`` callback, which the command passes
in (:func:`progress_bar` yields it, or None when no bar is drawn).
"""

from __future__ import annotations

import sys
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import IO

__all__ = ["progress_bar", "shows_progress"]


def shows_progress(*, json: bool = False, stream: IO[str] | None = None) -> bool:
    """Whether a bar is drawn: not for JSON output, and only when ``stream`` (standard
    error) is a terminal.

    >>> import io
    >>> shows_progress(stream=io.StringIO())
    False
    """
    stream = sys.stderr if stream is None else stream
    if json:
        return False
    isatty = getattr(stream, "isatty", None)
    return bool(isatty and isatty())


@contextmanager
def progress_bar(label: str, *, json: bool = False,
                 ) -> Iterator[Callable[[int, int], None] | None]:
    """A transient bar on standard error while the block runs; yields its ``progress(done,
    total)`` callback, or None when no bar is drawn (see :func:`shows_progress`)."""
    if not shows_progress(json=json):
        yield None
        return
    from rich.progress import (
        BarColumn,
        MofNCompleteColumn,
        Progress,
        TextColumn,
        TimeRemainingColumn,
    )

    from diagnose.text import console

    bar = Progress(TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(),
                   TimeRemainingColumn(), console=console(stderr=True), transient=True)
    with bar:
        task = bar.add_task(label, total=None)

        def progress(done: int, total: int) -> None:
            bar.update(task, completed=done, total=total)

        yield progress
