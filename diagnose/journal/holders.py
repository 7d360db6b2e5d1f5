"""Who holds a session: one holder at a time, so that two places never write one session.

A session of a journal shared by a team (a phone call at the help desk, then
the visit at the site on another machine) has at most one **holder**: the
person, the machine and the process that writes it, kept with the session
as ``"R. Tester@laptop-7 pid 4242"``, and the time of the holder's last
write (``held``, UTC). Both stores keep them in the session's row (schema 5).

* Starting or resuming a session for writing takes it
  (``JournalStore.take``); every event its holder writes renews the hold;
  leaving (quitting the shell, the end of a scripted run: the journal is
  closed) releases it (``held`` cleared, the holder's name kept, so that the
  next one knows whom it takes it from).
* Taking a session that another holder holds is refused while that holder
  wrote within the **lease** (:data:`LEASE_MINUTES`, or the environment
  variable ``DIAGNOSE_LEASE_MINUTES``): the message names the holder and
  when they last wrote. A holder that crashed (or a laptop closed mid-call)
  stops writing, so its lease runs out and the session can be taken; on the
  holder's own machine a process that has ended holds nothing at all (a
  crashed shell is resumed at once). Before that, ``--take-over`` takes it
  anyway, and says whom from.
* A holder whose session was taken over is refused its next write, with
  the name of the one who has it now: nothing is written twice over.
* When the session passes to another person or machine (not merely another
  process of the same person on the same machine), the hand-off is
  recorded as an event (``handover``, from and to, see
  :class:`diagnose.events.HandedOver`) and shows in the repair log.

The times are the writing machines' clocks; clocks a minute or two apart do
not matter against a lease of minutes.

>>> h = Holding("Desk A@desk-1 pid 10", "2025-01-14T09:00:00+00:00")
>>> h.blocks("R. Tester@laptop pid 3", 600, now="2025-01-14T09:04:00+00:00")
True
>>> h.blocks("R. Tester@laptop pid 3", 600, now="2025-01-14T09:11:00+00:00")
False
>>> h.holds(600, now="2025-01-14T09:04:00+00:00"), h.place
(True, 'Desk A@desk-1')
>>> person("Desk A@desk-1 pid 10"), same_place("a@h pid 1", "a@h pid 2")
('Desk A', True)
"""

from __future__ import annotations

import os
import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from datetime import datetime, timezone
from typing import Any

from diagnose.errors import JournalError

#: How long a holder keeps a session without writing to it, in minutes.
LEASE_MINUTES = 10.0
ENV_LEASE = "DIAGNOSE_LEASE_MINUTES"
_FORM = re.compile(r"^(?P<person>.*)@(?P<host>[^@]*) pid (?P<pid>\d+)$", re.S)


class SessionHeld(JournalError):
    """Another holder holds the session and wrote to it within the lease."""


def utc_now() -> str:
    """The time now in UTC, to the second, as ``held`` keeps it."""
    return datetime.now(timezone.utc).isoformat(timespec="seconds")


def lease_seconds(env: Mapping[str, str] | None = None) -> float:
    """The lease: ``DIAGNOSE_LEASE_MINUTES`` when it is a number of 0 or more, else 10 minutes.

    >>> lease_seconds({"DIAGNOSE_LEASE_MINUTES": "0.5"}), lease_seconds({})
    (30.0, 600.0)
    """
    env = os.environ if env is None else env
    try:
        minutes = float(env.get(ENV_LEASE, "") or LEASE_MINUTES)
    except ValueError:
        minutes = LEASE_MINUTES
    return max(minutes, 0.0) * 60


def holder_name(who: str | None = None) -> str:
    """This process as a holder: ``who`` (else the login name) at this machine, with the pid."""
    import getpass
    import socket

    name = str(who or "").strip()
    if not name:
        try:
            name = getpass.getuser()
        except (OSError, KeyError):
            name = "someone"
    return f"{name}@{socket.gethostname() or 'localhost'} pid {os.getpid()}"


def person(holder: str | None) -> str | None:
    """The person of a holder's name (the whole text when it is not of the usual form)."""
    if holder is None:
        return None
    found = _FORM.match(holder)
    return found.group("person") if found else holder


def same_place(a: str | None, b: str | None) -> bool:
    """Whether two holders are the same person on the same machine (the process aside)."""
    if a is None or b is None:
        return False
    fa, fb = _FORM.match(a), _FORM.match(b)
    if fa is None or fb is None:
        return a == b
    return (fa.group("person"), fa.group("host")) == (fb.group("person"), fb.group("host"))


def gone(holder: str | None) -> bool:
    """Whether ``holder`` is a process of this machine that has ended (crashed, killed).

    Such a holder holds nothing: on its own machine a crash is seen at once; on
    another, its lease runs out.
    """
    import socket

    found = _FORM.match(holder or "")
    if found is None or found.group("host") != (socket.gethostname() or "localhost"):
        return False
    pid = int(found.group("pid"))
    if pid == os.getpid():
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return True
    except (PermissionError, OSError):
        return False
    try:  # a child killed but not yet waited for is a zombie: ended all the same
        with open(f"/proc/{pid}/stat", encoding="ascii", errors="replace") as fh:
            return fh.read().rsplit(")", 1)[-1].split()[0] in ("Z", "X")
    except (OSError, IndexError):
        return False


def _seconds_between(a: str, b: str) -> float:
    try:
        return (datetime.fromisoformat(b) - datetime.fromisoformat(a)).total_seconds()
    except (TypeError, ValueError):
        return float("inf")  # a time that cannot be read holds nothing


@dataclass(frozen=True)
class Holding:
    """A session's holder and the time of their last write (None: released, or never held)."""

    holder: str | None = None
    held: str | None = None

    def blocks(self, me: str, lease: float, *, now: str | None = None) -> bool:
        """Whether the holding keeps ``me`` out: another holder, who wrote within ``lease`` s."""
        if self.holder is None or self.held is None or self.holder == me:
            return False
        return _seconds_between(self.held, now or utc_now()) < lease and not gone(self.holder)

    def holds(self, lease: float, *, now: str | None = None) -> bool:
        """Whether someone holds the session now: they wrote within ``lease`` s, and have not
        left it or ended."""
        return self.blocks("", lease, now=now)

    @property
    def place(self) -> str:
        """The holder as a person at a machine, without the process (``Desk A@desk-1``)."""
        found = _FORM.match(self.holder or "")
        return f"{found.group('person')}@{found.group('host')}" if found else str(self.holder)

    def ago(self, now: str | None = None) -> str:
        """How long ago the holder last wrote, in words."""
        seconds = _seconds_between(self.held or "", now or utc_now())
        if seconds == float("inf"):
            return "at an unknown time"
        minutes = max(int(seconds // 60), 0)
        return "less than a minute ago" if minutes < 1 else f"{minutes} min ago"


def refusal(session_id: str, holding: Holding, lease: float) -> str:
    """The one line that refuses to take a held session."""
    return (f"session {session_id} is held by {holding.holder} (last write {holding.ago()}); "
            f"it can be taken when they leave it, after {lease / 60:g} min without a write, "
            "or now with --take-over")


def take_row(cur: Any, q: Callable[[str], str], session_id: str, me: str, *,
             force: bool = False, lease: float | None = None) -> Holding:
    """Take session ``session_id`` for ``me`` inside a store's write transaction ``cur``.

    ``q`` turns this module's ``?`` placeholders into the store's (and may
    lock the row). Returns the holding before.

    Raises:
        SessionHeld: another holder wrote within the lease and ``force`` is not given.
    """
    row = cur.execute(q("SELECT holder, held FROM session WHERE id = ?"),
                      (session_id,)).fetchone()
    if row is None:
        raise JournalError(f"no session {session_id} in the journal")
    before = Holding(row[0], row[1])
    lease = lease_seconds() if lease is None else lease
    if not force and before.blocks(me, lease):
        raise SessionHeld(refusal(session_id, before, lease))
    cur.execute(q("UPDATE session SET holder = ?, held = ? WHERE id = ?"),
                (me, utc_now(), session_id))
    return before


def check_holder(session_id: str, me: str, holder: str | None) -> None:
    """Refuse ``me``'s write when another holder (``holder``, in the row) took the session.

    Raises:
        JournalError: the session was taken over (the message names by whom).
    """
    if holder is not None and holder != me:
        raise JournalError(f"session {session_id} was taken over by {holder}; nothing more "
                           "is written from here (the answers given before are kept)")


def renew_row(cur: Any, q: Callable[[str], str], session_id: str, me: str,
              holder: str | None) -> None:
    """:func:`check_holder`, then renew ``me``'s hold (the time of the last write).

    Raises:
        JournalError: the session was taken over (the message names by whom).
    """
    check_holder(session_id, me, holder)
    cur.execute(q("UPDATE session SET holder = ?, held = ? WHERE id = ?"),
                (me, utc_now(), session_id))
