"""The past jobs on a unit, and a recurrence of what was found on it.

A unit is known by its serial number; without one, by its site, machine and
axis together. At the start of a diagnosis the faces show the closed
sessions of the same unit (date, complaint, what was found, the repair),
newest first.

**Recurrence.** When a cause was found on this unit (the finding the
technician confirmed, else the cause a cure confirmed) in a session closed
within :data:`RECENT_DAYS`, the new diagnosis starts with that cause's prior
odds multiplied by :data:`RECURRENCE_FACTOR`: a fault that came back soon
is more likely to be the same fault (its cause was not removed, or the
repair did not last). The step is recorded as an event (``history``), shown
in ``why`` as "found on this unit before", and ``undo`` takes it back when
the technician judges the earlier job unrelated. The factor 3 is our own
choice, a moderate one: it moves a 10 % cause to 25 % and never makes a cause
the answers rule out come back (common practice is to suspect a repeat
first; the figure is not from a published source).
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from typing import Any

RECENT_DAYS = 90
RECURRENCE_FACTOR = 3.0


@dataclass(frozen=True)
class Job:
    """One earlier closed session on the unit."""

    session_id: str
    started: str
    complaints: tuple[str, ...]
    finding: str | None  # cause id
    finding_title: str
    repair: str  # the title of the repair that cured, "" if none
    days_ago: int | None


def unit_filter(identity: dict[str, str]) -> dict[str, str] | None:
    """The filter that finds the same unit (None when the identity does not tell it).

    >>> unit_filter({"serial": "SN-7", "site": "Depot"})
    {'serial': 'SN-7'}
    >>> unit_filter({"site": "Depot", "machine": "Hoist 2", "axis": "Z"})
    {'site': 'Depot', 'machine': 'Hoist 2', 'axis': 'Z'}
    >>> unit_filter({"site": "Depot"}) is None
    True
    """
    if identity.get("serial", "").strip():
        return {"serial": identity["serial"]}
    keys = ("site", "machine", "axis")
    if all(identity.get(k, "").strip() for k in keys):
        return {k: identity[k] for k in keys}
    return None


def jobs_on_unit(journal: Any, identity: dict[str, str], model: Any, *,
                 now: str, exclude: str = "", limit: int = 5) -> list[Job]:
    """The closed sessions of the unit ``identity`` names, newest first (at most ``limit``)."""
    from diagnose.journal.record import session_record

    wanted = unit_filter(identity)
    if wanted is None:
        return []
    out = []
    for info in journal.sessions("closed", **wanted):
        if info.id == exclude or len(out) >= limit:
            continue
        rec = session_record(journal, info.id, model)
        end = dict(rec.end or {})
        finding = end.get("finding") or (rec.cause or {}).get("id")
        finding = None if finding == "unknown" else finding
        cure = next((s.title for s in rec.repairs if s.cured), "")
        title = model.causes[finding].title if finding in model.causes else (finding or "")
        started = rec.started or info.started  # the first event's time: when it happened
        out.append(Job(info.id, started, tuple(c["title"] for c in rec.complaints),
                       finding, title, cure, _days(started, now)))
    return out


def history(journal_path: Any, identity: dict[str, str], model: Any, session: Any
            ) -> list[Job]:
    """The earlier jobs on the unit of ``identity`` in the journal at ``journal_path``.

    A journal that cannot be read gives none: the history helps, it never stops a
    diagnosis.
    """
    from diagnose.errors import DiagnoseError
    from diagnose.journal.stores import open_journal

    now = session.events[-1].time if session.events else ""
    try:
        with open_journal(journal_path, readonly=True) as journal:
            return jobs_on_unit(journal, identity, model, now=now, exclude=session.session_id)
    except DiagnoseError:
        return []


def recurrences(jobs: list[Job], model: Any, days: int = RECENT_DAYS
                ) -> dict[str, tuple[int, tuple[str, ...]]]:
    """cause -> (days since it was last found, the sessions): findings within ``days``."""
    out: dict[str, tuple[int, tuple[str, ...]]] = {}
    for job in jobs:
        if job.finding not in model.causes or job.days_ago is None or job.days_ago > days:
            continue
        since, ids = out.get(job.finding, (job.days_ago, ()))
        out[job.finding] = (min(since, job.days_ago), ids + (job.session_id,))
    return out


def _days(started: str, now: str) -> int | None:
    try:
        a, b = datetime.fromisoformat(started), datetime.fromisoformat(now)
        return max((b - a).days, 0)
    except (TypeError, ValueError):
        return None
