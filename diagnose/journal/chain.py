"""The hash chain of a session's events: an append-only record that shows any change.

Every event stored in a journal (SQLite or PostgreSQL, schema 4 on) carries
``prev_hash``, the hash of the event before it in its session (None for the
first), and ``hash``, its own. The hash of an event is the SHA-256 (FIPS
180-4), written as 64 lower-case hex digits, of the UTF-8 bytes of this
canonical JSON text::

    {"data":<data>,"format":<format>,"kind":<kind>,"prev":<prev_hash or null>,
     "seq":<seq>,"session":<session uid>,"time":<time>}

that is ``json.dumps(obj, sort_keys=True, separators=(",", ":"),
ensure_ascii=False)`` of the object with the keys

* ``session``: the session's UUID (text, lower case with hyphens), not its
  short id, so that a session copied to another journal keeps its chain;
* ``seq``: the event's number in its session, from 1 (an integer);
* ``kind``: the event's kind (text); ``format``: the format of its data
  (an integer, see :mod:`diagnose.events`); ``time``: its time as stored (text);
* ``data``: the event's data as the JSON object stored, parsed and written
  again canonically (keys sorted, no spaces), so that the way a database
  keeps the text does not matter;
* ``prev``: the previous event's ``hash`` (text), or ``null`` for event 1.

The ranking kept beside an event is a cache the repair log may recompute;
it is not part of the hash. :func:`check_chain` walks one session's events
and names the first one whose numbering, link or hash does not hold.

References:
    NIST FIPS 180-4, Secure Hash Standard (SHA-256). S. Haber and W. S.
    Stornetta, "How to time-stamp a digital document", J. Cryptology 3 (1991),
    the linked chain of hashes.

>>> h1 = event_hash("0b7d4f0e-7a0f-4c39-9d1f-5b2b2f0c1a10", 1, "note", fmt=3,
...                 time="2025-01-14T09:00:00+01:00", data={"text": "hello"}, prev=None)
>>> len(h1), h1 == event_hash("0b7d4f0e-7a0f-4c39-9d1f-5b2b2f0c1a10", 1, "note", fmt=3,
...                           time="2025-01-14T09:00:00+01:00", data={"text": "hello"})
(64, True)
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any


def canonical(session_uid: str, seq: int, kind: str, *, fmt: int, time: str, data: Any,
              prev: str | None = None) -> bytes:
    """The bytes an event's hash is taken of (the recipe in this module's docstring).

    >>> canonical("u", 1, "note", fmt=3, time="t", data={"b": 1, "a": "é"}).decode()
    '{"data":{"a":"é","b":1},"format":3,"kind":"note","prev":null,"seq":1,"session":"u","time":"t"}'
    """
    obj = {"session": str(session_uid), "seq": int(seq), "kind": str(kind),
           "format": int(fmt), "time": str(time), "data": data,
           "prev": None if prev is None else str(prev)}
    return json.dumps(obj, sort_keys=True, separators=(",", ":"),
                      ensure_ascii=False).encode("utf-8", "surrogatepass")


def event_hash(session_uid: str, seq: int, kind: str, *, fmt: int, time: str, data: Any,
               prev: str | None = None) -> str:
    """The SHA-256 of :func:`canonical`, as 64 hex digits."""
    return hashlib.sha256(canonical(session_uid, seq, kind, fmt=fmt, time=time, data=data,
                                    prev=prev)).hexdigest()


def hash_of_text(session_uid: str, seq: int, kind: str, *, fmt: int, time: str, text: str,
                 prev: str | None = None) -> str:
    """:func:`event_hash` of an event whose data is the stored JSON ``text``.

    Raises:
        ValueError: ``text`` is not JSON.
    """
    return event_hash(session_uid, seq, kind, fmt=fmt, time=time, data=json.loads(text),
                      prev=prev)


@dataclass(frozen=True)
class Break:
    """The first place a session's chain does not hold: the event and why."""

    session: str  # the short id
    seq: int
    why: str

    def __str__(self) -> str:
        return f"session {self.session}, event {self.seq}: {self.why}"


def check_chain(session_id: str, session_uid: str,
                rows: Iterable[tuple[Any, Any, Any, Any, Any, Any, Any]]) -> Break | None:
    """The first break in one session's chain, or None when every event holds.

    ``rows`` are ``(seq, kind, format, time, data text, prev_hash, hash)`` in
    the order of ``seq``. An event breaks the chain when its number is not
    the next one (an event taken out), its ``prev_hash`` is not the hash of
    the event before, its data is not JSON, or its ``hash`` is not the hash
    of what it holds (altered).

    >>> uid = "0b7d4f0e-7a0f-4c39-9d1f-5b2b2f0c1a10"
    >>> h = event_hash(uid, 1, "note", fmt=3, time="t", data={"text": "a"})
    >>> check_chain("250114-1", uid, [(1, "note", 3, "t", '{"text": "a"}', None, h)]) is None
    True
    >>> str(check_chain("250114-1", uid, [(1, "note", 3, "t", '{"text": "b"}', None, h)]))
    'session 250114-1, event 1: its hash does not match what it holds (altered?)'
    """
    prev: str | None = None
    expected = 1
    for seq, kind, fmt, time, text, prev_hash, stored in rows:
        if seq != expected:
            return Break(session_id, int(seq), f"it follows event {expected - 1} (an event "
                                               "is missing)" if seq > expected else
                         f"its number is out of order (expected {expected})")
        if prev_hash != prev:
            return Break(session_id, int(seq), "it does not link to the event before it "
                                               "(an event before it was changed or removed?)")
        if not stored:
            return Break(session_id, int(seq), "it has no hash")
        try:
            found = hash_of_text(session_uid, seq, kind, fmt=fmt, time=time, text=text,
                                 prev=prev_hash)
        except (TypeError, ValueError):
            return Break(session_id, int(seq), "its data is not JSON (altered?)")
        if found != stored:
            return Break(session_id, int(seq),
                         "its hash does not match what it holds (altered?)")
        prev = stored
        expected += 1
    return None


@dataclass(frozen=True)
class Verified:
    """What ``diagnose verify`` found: sessions and events checked, and the first break."""

    sessions: int
    events: int
    broken: Break | None = None
    session: str | None = None  # the one session checked (None: all of them)

    @property
    def ok(self) -> bool:
        return self.broken is None

    def __str__(self) -> str:
        if self.broken is not None:
            return f"the chain is broken at {self.broken}"
        if self.session is not None:
            return f"session {self.session}, {self.events} event(s): its chain is whole"
        return f"{self.sessions} session(s), {self.events} event(s): every chain is whole"
