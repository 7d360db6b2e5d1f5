"""Attaching a photo or file to a diagnosis: stored beside the journal, recorded as an event.

The faces (the shell's ``attach``, the ``attach`` list of an answers file)
call :func:`attach`; the file goes into the journal's attachment store
(:mod:`diagnose.journal.attachments`) and the session records what it was.
Without a journal there is nowhere to keep the file, and it says so.
"""

from __future__ import annotations

import os
import shlex
from typing import Any

from diagnose.errors import InputError


def split_argument(arg: str) -> tuple[str, str]:
    """``PATH [caption]`` as typed (a path with spaces in quotes) into (path, caption).

    >>> split_argument('"/tmp/worn disc.jpg" disc worn to the rivets')
    ('/tmp/worn disc.jpg', 'disc worn to the rivets')
    >>> split_argument("photo.png")
    ('photo.png', '')
    """
    try:
        words = shlex.split(arg)
    except ValueError as exc:
        raise InputError("attach", f"cannot read the path: {exc}") from None
    if not words:
        raise InputError("attach", "usage: attach PATH [caption]")
    return words[0], " ".join(words[1:])


def attach(session: Any, journal: str | os.PathLike[str] | None, path: str,
           caption: str = "") -> Any:
    """Store ``path`` beside ``journal`` and record it in ``session``; returns the event.

    Raises:
        InputError: no journal in use, or the file is refused (see the store).
    """
    if not journal:
        raise InputError("attach", "no journal in use: there is nowhere to keep the file")
    if session.ended:
        raise InputError("attach", "the diagnosis is closed; nothing can be attached now")
    from diagnose.journal.attachments import store

    kept = store(path, journal)
    return session.attach(kept.sha256, name=kept.name, caption=caption,
                          media_type=kept.media_type, size=kept.size)
