"""Where the journal and the learned priors live.

The journal is one SQLite file. Its place, first match wins:

1. the ``--journal PATH`` option;
2. the environment variable ``DIAGNOSE_JOURNAL``;
3. the user's data folder: ``$XDG_DATA_HOME/diagnose/journal.sqlite3`` or
   ``~/.local/share/diagnose/journal.sqlite3`` on Linux (the XDG Base
   Directory Specification), ``~/Library/Application Support/diagnose`` on
   macOS, ``%LOCALAPPDATA%\\diagnose`` on Windows.

Learned priors are JSON files beside the journal, one a pack:
``<journal folder>/learned/<pack>.json``.
"""

from __future__ import annotations

import os
import sys
from collections.abc import Mapping
from pathlib import Path

ENV_JOURNAL = "DIAGNOSE_JOURNAL"
FILE_NAME = "journal.sqlite3"
LEARNED_DIR = "learned"


def data_dir(env: Mapping[str, str] | None = None) -> Path:
    """The user's data folder for diagnose (not created here).

    References:
        XDG Base Directory Specification 0.8, ``$XDG_DATA_HOME``.
    """
    env = os.environ if env is None else env
    if sys.platform == "win32":
        base = env.get("LOCALAPPDATA") or str(Path.home() / "AppData" / "Local")
        return Path(base) / "diagnose"
    if sys.platform == "darwin":
        return Path.home() / "Library" / "Application Support" / "diagnose"
    xdg = env.get("XDG_DATA_HOME", "")
    # The specification says a relative value is invalid and must be ignored.
    base = Path(xdg) if xdg and os.path.isabs(xdg) else Path.home() / ".local" / "share"
    return base / "diagnose"


def journal_path(explicit: str | os.PathLike[str] | None = None,
                 env: Mapping[str, str] | None = None) -> Path:
    """The journal file: ``explicit`` (the --journal option), DIAGNOSE_JOURNAL or the data folder.

    >>> str(journal_path("/tmp/j.sqlite3"))
    '/tmp/j.sqlite3'
    >>> journal_path(env={"DIAGNOSE_JOURNAL": "/srv/j.sqlite3"}).name
    'j.sqlite3'
    """
    env = os.environ if env is None else env
    if explicit:
        return Path(explicit).expanduser()
    chosen = env.get(ENV_JOURNAL, "")
    if chosen:
        return Path(chosen).expanduser()
    return data_dir(env) / FILE_NAME


def overlay_path(journal: str | os.PathLike[str], pack_id: str) -> Path:
    """The learned-priors file of ``pack_id`` beside ``journal``.

    >>> overlay_path("/data/journal.sqlite3", "spring-applied-brake").as_posix()
    '/data/learned/spring-applied-brake.json'
    """
    return Path(journal).parent / LEARNED_DIR / f"{pack_id}.json"
