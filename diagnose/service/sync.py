"""`diagnose sync`: the local journal and the team journal, as the service opens them.

The team journal is ``--to URL``, else the environment variable
``DIAGNOSE_TEAM_JOURNAL``, else the settings file's ``team_journal``. What is
copied, and how it stays idempotent, resumable and order-independent, is
:mod:`diagnose.journal.sync`.
"""

from __future__ import annotations

import os
from typing import Any

from diagnose.errors import InputError

ENV_TEAM = "DIAGNOSE_TEAM_JOURNAL"


def team_target(to: str | None) -> str:
    """The team journal to sync with: ``to``, else DIAGNOSE_TEAM_JOURNAL, else the settings
    file's ``team_journal``.

    Raises:
        InputError: none is named anywhere.
    """
    chosen = (to or os.environ.get(ENV_TEAM, "")).strip()
    if not chosen:
        from diagnose.settings import load_preferences

        chosen = load_preferences().team_journal or ""
    if not chosen:
        raise InputError("--to", "name the team journal: --to postgresql://USER@HOST/DB, "
                                 f"{ENV_TEAM}, or team_journal in the settings file")
    return chosen


def sync_journals(where: Any, to: str | None, *, pull: bool = False) -> Any:
    """Sync the journal of ``where`` with the team journal ``to`` (see :func:`team_target`).

    Returns the :class:`diagnose.journal.sync.Synced` counts.

    Raises:
        InputError: no team journal named, or it is the local journal itself;
        JournalError: either journal cannot be reached, read or written (no password shown).
    """
    from diagnose.journal.stores import open_journal
    from diagnose.journal.sync import Synced, sync
    from diagnose.service import journal_target
    from diagnose.service import open_journal as open_local
    from diagnose.service import read_journal as read_local

    team = team_target(to)
    local_target = journal_target(where)
    if os.path.abspath(os.path.expanduser(team)) == os.path.abspath(local_target) or \
            team == local_target:
        raise InputError("--to", "the team journal is the local journal itself; name another")
    local = open_local(where) if pull else read_local(where)
    if local is None and not pull:
        with open_journal(team):  # reachable, and a journal: said now, not at the next sync
            return Synced()
    with local, open_journal(team) as shared:
        return sync(local, shared, pull=pull)


def team_label(to: str | None) -> str:
    """The team journal as shown to a person (its password masked)."""
    from diagnose.paths import journal_label

    return journal_label(team_target(to))
