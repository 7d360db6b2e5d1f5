"""The journal's one interface and its two stores: an SQLite file, or a PostgreSQL server.

A journal is named by a *target*: a ``postgresql://`` (or ``postgres://``)
URL selects the team journal on a PostgreSQL server
(:class:`diagnose.journal.pgstore.PgJournal`); anything else is the path of
an SQLite file (:class:`diagnose.journal.store.Journal`, the default). Both
keep the same schema versions and give the same guarantees; every face
opens one through :func:`open_journal` (by way of :mod:`diagnose.service`),
never a store's class itself.

>>> import tempfile, pathlib
>>> target = str(pathlib.Path(tempfile.mkdtemp()) / "j.sqlite3")
>>> read_journal(target) is None  # nothing recorded there yet
True
>>> with open_journal(target) as j:
...     type(j).__name__, j.schema_version
('Journal', 5)
"""

from __future__ import annotations

import os
from typing import TYPE_CHECKING, Any, Protocol

from diagnose.paths import is_journal_url, journal_label

if TYPE_CHECKING:
    from pathlib import Path

    from diagnose.events import Event
    from diagnose.journal.chain import Verified
    from diagnose.journal.store import SessionInfo


class JournalStore(Protocol):
    """What every journal store offers (the SQLite file's and the PostgreSQL server's).

    ``path`` is where files kept beside the journal go (attachments, learned
    priors): the SQLite file itself, or the team journal's local stand-in.
    """

    path: Path
    readonly: bool

    def close(self) -> None: ...
    def __enter__(self) -> JournalStore: ...
    def __exit__(self, *exc: object) -> None: ...
    @property
    def schema_version(self) -> int: ...
    def new_session(self, pack_id: str, pack_version: str, content_hash: str, mode: str,
                    who: str | None = None, *, started: str | None = None,
                    learned: str | None = None, wanted: str | None = None,
                    origin: str | None = None, uid: str | None = None) -> str: ...
    def write(self, session_id: str, event: Any, *, ranking: Any = None,
              uid: str | None = None) -> int: ...
    def close_session(self, session_id: str, outcome: str, cause: str | None = None
                      ) -> None: ...
    def load_events(self, session_id: str) -> list[Event]: ...
    def load_rankings(self, session_id: str) -> list[Any]: ...
    def verify_events(self, session_id: str | None = None) -> None: ...
    def verify_chain(self, session_id: str | None = None) -> Verified: ...
    def session(self, session_id: str) -> SessionInfo: ...
    def resolve(self, ref: str) -> str: ...
    def sessions(self, status: str | None = None, pack_id: str | None = None,
                 **unit: str | None) -> list[SessionInfo]: ...
    def integrity(self) -> list[str]: ...
    def backup(self, target: Any, *, force: bool = False) -> Any: ...


def open_journal(target: str | os.PathLike[str], *, readonly: bool = False) -> Any:
    """The journal ``target`` names, opened for writing (made when missing) or only reading.

    Raises:
        JournalError: it cannot be reached, opened or written; it is damaged, another
            program's or a newer diagnose's (the message shows no password).
    """
    if is_journal_url(target):
        from diagnose.journal.pgstore import PgJournal

        return PgJournal(os.fspath(target).strip(), readonly=readonly)
    from diagnose.journal.store import Journal

    return Journal(target, readonly=readonly)


def read_journal(target: str | os.PathLike[str]) -> Any:
    """The journal ``target`` opened for reading, or None when nothing was recorded there yet.

    A missing file, a 0-byte file, a journal never written to and an empty
    database are alike: no sessions.

    Raises:
        JournalError: it cannot be reached, or is damaged or not a journal.
    """
    if is_journal_url(target):
        from diagnose.journal.pgstore import PgJournal

        journal = PgJournal(os.fspath(target).strip(), readonly=True, empty_ok=True)
        if journal.empty:
            journal.close()
            return None
        return journal
    from pathlib import Path

    from diagnose.journal.store import Journal, inspect

    path = Path(target)
    if inspect(path) == 0:
        return None
    return Journal(path, readonly=True)


def label(target: str | os.PathLike[str]) -> str:
    """The journal as shown to a person (a URL's password masked)."""
    return journal_label(target)
