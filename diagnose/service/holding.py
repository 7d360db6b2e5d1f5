"""Taking a session to write it: one holder at a time, the hand-off recorded.

:func:`hold` is what `diagnose resume`, `diagnose run --resume` and the shell
do before they write to a recorded session (see
:mod:`diagnose.journal.holders` for the holder, the lease and the refusal).
When the session passes to another person, or to the same person on
another machine, a ``handover`` event says from whom to whom, and the
repair log shows it ("handed over from Desk A to R. Tester at 10:42").
"""

from __future__ import annotations

from typing import Any

from diagnose.events import HandedOver


def hold(journal: Any, info: Any, who: str | None, *, take_over: bool = False) -> Any:
    """Take session ``info`` (its ``SessionInfo``) of ``journal`` for ``who`` on this machine.

    ``who`` None: the person who recorded the session goes on (else the login name).

    Returns the ``handover`` event recorded, or None when the session stays in
    the same hands (or had none named).

    Raises:
        SessionHeld: another holder wrote to it within the lease, and not ``take_over``.
    """
    from diagnose.journal.holders import holder_name, lease_seconds, person, same_place
    from diagnose.journal.store import now

    me = holder_name(who or info.who)
    before = journal.take(info.id, me, force=take_over)
    if before.holder is not None:
        if same_place(before.holder, me):
            return None
        giver, taker = person(before.holder), person(me)
        if giver == taker:  # the same person on another machine: say which
            giver, taker = _place(before.holder), _place(me)
    else:
        giver, taker = info.who, person(me)
        if not giver or giver == taker:
            return None
    event = HandedOver(taker=str(taker), giver=giver,
                       forced=take_over and before.blocks(me, lease_seconds()), time=now())
    journal.write(info.id, event)
    return event


def _place(holder: str) -> str:
    """``person@host`` of a holder's name (the process left out)."""
    return holder.rsplit(" pid ", 1)[0]


def handover_line(session_id: str, event: Any) -> str:
    """The line a face prints when it took a session from other hands."""
    giver = event.giver or "nobody named"
    if event.forced:
        return (f"session {session_id} taken over from {giver} (who still held it) by "
                f"{event.taker}; their next write is refused")
    return f"session {session_id} handed over from {giver} to {event.taker}"
