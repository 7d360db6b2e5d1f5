"""A laptop's journal and the team's: push every session, pull the closed ones.

``diagnose sync`` copies sessions between two journals (an SQLite file on a
laptop and the team journal on a PostgreSQL server, or any two journals):

* **Push**: every session of the local journal, open or closed, with its
  events, to the team journal. A session is known in both by its UUID; its
  events keep their UUIDs, times, data, format and ranking, and so their
  numbers and hashes: a chain that holds here holds there (``diagnose
  verify``). A session the team journal has already gets the events it lacks
  (the local copy went on); one that went on in the team journal (taken up
  at the site) and not here needs nothing. One that went on differently in
  both is not touched and is named ("went on differently").
* **Pull** (``--pull``): the closed sessions of the team journal that the
  local one lacks, the same way, so that a laptop offline still has the
  history of every unit (:mod:`diagnose.service.history`) and ``diagnose
  learn`` counts the team's confirmed repairs. Open sessions are not pulled:
  they are taken up from the team journal itself (``diagnose resume ID
  --journal URL``), which keeps one holder at a time.
* **Idempotent**: running it again sends nothing ("nothing to send").
* **Resumable**: each session row and each event is copied in its own
  transaction, in order; a copy cut off at any point (a lost network, a
  killed process) leaves a prefix of the session there, which the next run
  completes.
* **Order-independent**: what lands in the team journal depends only on the
  sessions, not on the order in which laptops sync: the team journal's
  short ids are made from the UUIDs (:class:`diagnose.journal.pgstore.PgJournal`)
  and its listing breaks ties by UUID.

Attached files (photos) go along, checked by their SHA-256, to the folder
beside the receiving journal.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from typing import Any

from diagnose.errors import JournalError


@dataclass
class Synced:
    """What a sync did, in counts; ``str`` is the one line ``diagnose sync`` prints."""

    sent: int = 0  # sessions that got at least one event (or were created) there
    sent_events: int = 0
    already: int = 0  # sessions the other journal had as they are here (or further)
    pulled: int | None = None  # None: not asked to pull
    pulled_events: int = 0
    diverged: list[str] = field(default_factory=list)  # short ids here

    def __str__(self) -> str:
        if self.sent:
            text = (f"sent {self.sent} session(s) ({self.sent_events} event(s)), "
                    f"{self.already} already there")
        else:
            text = f"nothing to send ({self.already} session(s) already there)"
        if self.pulled is not None:
            text += (f"; pulled {self.pulled} session(s) ({self.pulled_events} event(s))"
                     if self.pulled else "; nothing to pull")
        if self.diverged:
            shown = ", ".join(self.diverged[:3]) + (", ..." if len(self.diverged) > 3 else "")
            text += (f"; {len(self.diverged)} went on differently there and were left as they "
                     f"are: {shown}")
        return text

    @property
    def ok(self) -> bool:
        return not self.diverged


def sync(local: Any, team: Any, *, pull: bool = False) -> Synced:
    """Push every session of ``local`` to ``team``; with ``pull``, bring back its closed ones.

    Both are journal stores (:mod:`diagnose.journal.stores`) open for writing
    (``local`` may be open for reading only when ``pull`` is not asked).

    Raises:
        JournalError: either journal cannot be read or written (what was copied stays).
    """
    result = Synced()
    for info in _oldest_first(local.sessions()):
        added = copy_session(local, team, info)
        if added is None:
            result.diverged.append(info.id)
        elif added:
            result.sent += 1
            result.sent_events += added
        else:
            result.already += 1
    if pull:
        result.pulled = 0
        have = {i.uid for i in local.sessions()}
        for info in _oldest_first(team.sessions("closed")):
            if info.uid in have:
                continue
            added = copy_session(team, local, info)
            if added:
                result.pulled += 1
                result.pulled_events += added
    return result


def _oldest_first(infos: list[Any]) -> list[Any]:
    return sorted(infos, key=lambda i: (i.started, i.uid or ""))


def copy_session(source: Any, target: Any, info: Any) -> int | None:
    """Copy session ``info`` of ``source`` into ``target``; the number of events added.

    0: ``target`` has it as it is here, or further on; None: it went on
    differently there (nothing is written).
    """
    if not info.uid:
        raise JournalError(f"session {info.id} has no UUID: open the journal {source} for "
                           "writing once to upgrade it, then sync")
    rows = source.stored_events(info.id)
    there = _find(target, info.uid)
    theirs = [] if there is None else target.stored_events(there)
    mine = [(r[1], r[7]) for r in rows]
    shared = [(r[1], r[7]) for r in theirs]
    if mine[:len(shared)] != shared[:len(mine)]:
        return None
    if len(shared) >= len(mine) and there is not None:
        return 0
    _keep_files(source, target, rows[len(shared):])
    if there is None:
        there = target.new_session(info.pack_id, info.pack_version, info.content_hash, info.mode,
                                   info.who, started=info.started, learned=info.learned,
                                   wanted=info.id, origin=info.origin, uid=info.uid)
    for _seq, uid, kind, text, when, ranked, fmt, _hash in rows[len(shared):]:
        event = {"kind": kind, "data": json.loads(text), "time": when, "format": fmt}
        target.write(there, event, ranking=None if ranked is None else json.loads(ranked),
                     uid=uid)
    return len(rows) - len(shared)


def _find(journal: Any, uid: str) -> str | None:
    """The short id of the session with UUID ``uid`` in ``journal`` (None: not there)."""
    try:
        return str(journal.resolve(uid))
    except JournalError:
        return None


def _keep_files(source: Any, target: Any, rows: list[tuple[Any, ...]]) -> None:
    """Copy the files attached by the events ``rows`` to the folder beside ``target``."""
    from diagnose.journal.attachments import folder_of, read
    from diagnose.paths import replace_atomically

    for row in rows:
        if row[2] != "attachment":
            continue
        digest = str(json.loads(row[3]).get("sha256") or "")
        if not digest or read(target.path, digest) is not None:
            continue
        raw = read(source.path, digest)
        if raw is None:
            continue  # the file never reached this machine: the event still says what it was
        folder = folder_of(target.path)
        folder.mkdir(parents=True, exist_ok=True)
        replace_atomically(folder / digest, lambda tmp, raw=raw: tmp.write_bytes(raw),
                           field="sync")
