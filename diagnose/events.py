"""The kinds of event a diagnosis is made of, as code: one table that every layer reads.

The session records them, the journal checks them when it reads them back,
the repair log and the statistics fold them. Each kind names the keys of its
``data`` that a replay needs (``needs``), the others it may hold (``may``),
and whether ``undo`` can take it back. Which events still count after undos
is :func:`effective_indices`, the one rule for the session's state, the
repair log and the step counts of every face.

``notice``, ``ack``, ``end`` and ``undo`` cannot be undone: a safety
acknowledgement stays on the record, and nothing is recorded after the end.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Any


@dataclass(frozen=True)
class Kind:
    """One kind of event: the keys of its data and whether it can be undone."""

    name: str
    needs: tuple[str, ...]
    may: tuple[str, ...]
    undoable: bool
    means: str


KINDS: dict[str, Kind] = {k.name: k for k in (
    Kind("notice", (), ("pack", "version", "content_hash", "packs", "text", "mode",
                        "max_faults", "path"), False,
         "the session starts: the pack and its knowledge, the mode; always first"),
    Kind("identity", (), (), True, "free keys about the unit and the call (serial, site, ...)"),
    Kind("nameplate", ("param", "value"), ("text",), True,
         "a nameplate value: as typed and normalised (\"24 V\", \"yes\", \"unknown\")"),
    Kind("complaint", ("complaint",), (), True, "a complaint reported"),
    Kind("answer", ("check", "outcome"), (), True, "the outcome of a check"),
    Kind("reading", ("check",), ("text", "verdict", "weights", "summary", "figures"), True,
         "a measurement, its verdict (or weights near a band edge) and figures"),
    Kind("unsure", ("check",), (), True, "a check done without a clear answer"),
    Kind("skip", ("check",), (), True, "a check that cannot be done now"),
    Kind("skip_repair", ("repair",), (), True, "a repair that cannot be done now"),
    Kind("ack", ("caution",), ("item", "step"), False,
         "a DANGER or WARNING acknowledged for the card of ``item``"),
    Kind("reminder", (), ("item", "cautions"), False,
         "cautions acknowledged earlier, shown again as one-line reminders"),
    Kind("repair", ("repair", "cured"), (), True, "a repair done, and whether it cured"),
    Kind("note", (), ("text",), True, "a note"),
    Kind("mode", ("mode",), (), True, "site or phone"),
    Kind("state", ("state", "value"), (), True, "the unit is now so (power restored, ...)"),
    Kind("end", (), ("result", "cause", "p", "repair", "parts", "text"), False,
         "the diagnosis ends: resolved, visit, escalated or abandoned"),
    Kind("undo", ("index",), ("kind",), False, "the event at ``index`` is taken back"),
)}

EVENT_KINDS: tuple[str, ...] = tuple(KINDS)
UNDOABLE: frozenset[str] = frozenset(k for k, v in KINDS.items() if v.undoable)
#: The keys of each kind's data that replaying it needs.
EVENT_KEYS: dict[str, tuple[str, ...]] = {k: v.needs for k, v in KINDS.items() if v.needs}
#: The kinds that are steps of the diagnosis (what "step N" counts).
STEP_KINDS = frozenset({"answer", "reading", "unsure", "skip", "skip_repair", "repair"})


def _kind(event: Any) -> str:
    return str(getattr(event, "kind", ""))


def _data(event: Any) -> Any:
    return getattr(event, "data", None)


def effective_indices(events: Sequence[Any]) -> tuple[list[int], int]:
    """The positions of the events that still count, and how many events were undone.

    An ``undo`` and the event it names are both left out.

    >>> from types import SimpleNamespace as E
    >>> effective_indices([E(kind="note", data={}), E(kind="undo", data={"index": 0}),
    ...                    E(kind="note", data={})])
    ([2], 1)
    """
    undone = {int(_data(e)["index"]) for e in events
              if _kind(e) == "undo" and "index" in (_data(e) or {})}
    keep = [i for i, e in enumerate(events) if i not in undone and _kind(e) != "undo"]
    return keep, len(undone)


def effective(events: Iterable[Any]) -> list[Any]:
    """The events that still count (:func:`effective_indices`), in order."""
    listed = list(events)
    keep, _ = effective_indices(listed)
    return [listed[i] for i in keep]


def steps_taken(events: Iterable[Any]) -> int:
    """How many steps of the diagnosis count (answers, readings, repairs, ...), undos applied."""
    return sum(1 for e in effective(events) if _kind(e) in STEP_KINDS)
