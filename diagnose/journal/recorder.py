"""The journal as a session's sink, keeping the ranking after each step beside its event.

A face starts or resumes a diagnosis through :func:`start_session` and
:func:`resume_session`; both return a :class:`diagnose.session.Session`
whose sink is a :class:`Recorder`. The recorder writes each event in its own
committed transaction (before the session method returns) together with the
ranking of the causes after it, computed exactly as the session computes it
(same model, same priors, same number of faults), so that the repair log
shows the ranking that was on screen.
"""

from __future__ import annotations

from typing import Any

from diagnose.errors import JournalError
from diagnose.events import started

#: Events after which the ranking is kept: the steps of a diagnosis.
RANKED_KINDS = frozenset({"complaint", "answer", "reading", "unsure", "skip", "repair",
                          "skip_repair", "undo", "end"})


class Recorder:
    """A sink: ``write(session_id, event)`` stores the event and the ranking after it.

    ``events`` are the session's events so far (for a resumed session).
    A ranking that cannot be computed is left out; the event is always stored.
    """

    def __init__(self, journal: Any, model: Any, *, max_faults: int = 1,
                 events: list[Any] | None = None) -> None:
        self.journal = journal
        self.model = model
        self.max_faults = max_faults
        self._events: list[Any] = list(events or [])

    def ranking_after(self, event: Any) -> list[dict[str, Any]] | None:
        """The ranking once ``event`` is added to the events so far (None if not a step)."""
        if event.kind not in RANKED_KINDS:
            return None
        from diagnose.reasoning.posterior import posterior
        from diagnose.session import fold

        try:
            evidence = fold(self._events + [event])
            post = posterior(self.model, evidence, max_faults=self.max_faults)
            return post.ranking().to_list()
        except Exception:  # noqa: BLE001 (the event counts; the log recomputes the ranking)
            return None

    def write(self, session_id: str, event: Any) -> None:
        ranking = self.ranking_after(event)
        self.journal.write(session_id, event, ranking=ranking)
        self._events.append(event)


def learned_label(overlay: Any) -> str | None:
    """How a session's priors were learned, for the journal (None: the pack's own)."""
    if overlay is None:
        return None
    return f"{overlay.path} ({overlay.sessions} closed session(s))"


def start_session(journal: Any, model: Any, *, mode: str = "site", max_faults: int = 1,
                  who: str | None = None, overlay: Any = None, **options: Any) -> Any:
    """A new session recorded in ``journal``; its first event (the notice) is stored already.

    ``overlay`` is the learned-priors overlay the model was loaded with (or None);
    ``options`` go to ``Session`` (``clock``, ``settings``).
    """
    from diagnose.session import Session

    sid = journal.new_session(model.id, model.version, model.content_hash, mode, who,
                              learned=learned_label(overlay))
    recorder = Recorder(journal, model, max_faults=max_faults)
    return Session(model, mode=mode, max_faults=max_faults, sink=recorder, session_id=sid,
                   **options)


def ensure_open(info: Any) -> None:
    """Refuse a closed session (``info`` is its ``SessionInfo``): it cannot take more steps.

    Raises:
        JournalError: one line that says it is closed and how to see its repair log.
    """
    if not info.is_open:
        raise JournalError(f"session {info.id} is closed ({info.outcome or 'ended'}); "
                           f"`diagnose report {info.id}` shows its repair log")


def resume_session(journal: Any, session_id: str, model: Any, *, closed_ok: bool = False,
                   **options: Any) -> Any:
    """The session ``session_id`` rebuilt from its events, recording on into ``journal``.

    ``closed_ok``: a closed session is rebuilt too (to be taken up again for a site visit).

    Raises:
        JournalError: no such session, or it is closed.
        InputError: it was recorded with another pack.
    """
    from diagnose.session import Session

    if not closed_ok:
        ensure_open(journal.session(session_id))
    events = journal.load_events(session_id)
    recorder = Recorder(journal, model, max_faults=started(events).max_faults, events=events)
    return Session.replay(model, events, sink=recorder, session_id=session_id, **options)
