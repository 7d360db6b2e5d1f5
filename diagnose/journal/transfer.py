"""One session carried from one journal to another: a phone call handed to a site visit.

``diagnose export ID`` writes a session as one JSON file: its metadata (with
its UUID), every event as the journal stores it (kind, data, time, format,
and its UUID), the ranking kept beside each, and the attached files. The
copy keeps the UUIDs, so its events have the same hashes and its chain is the
same chain (``diagnose verify`` in the receiving journal). ``diagnose import FILE`` reads it into
another journal. Importing is idempotent and resumable:

* the session is known by its **origin**, a key made from what never
  changes about it (its id, start time and the pack's content hash in the
  journal it started in), kept with the imported copy;
* the same file imported twice changes nothing; a file that holds more
  events than the copy (the session went on where it came from) adds the
  missing ones; an import cut off part-way is finished by importing again;
* a copy that went on differently here is never overwritten: the import is
  refused with the reason;
* the copy keeps its id when that id is free here, else it gets a new one
  (said in the result).

Every event is checked by the codec (``diagnose.events.decode``) and every
attached file by its SHA-256 before anything is written.
"""

from __future__ import annotations

import base64
import hashlib
import json
from dataclasses import dataclass
from typing import Any

from diagnose.errors import InputError, JournalError
from diagnose.events import EventError, Row, decode, encode

FORMAT = "diagnose-session"
VERSION = 1


def origin_key(session_id: str, started: str, content_hash: str) -> str:
    """The key of a session across journals (16 hex digits of a SHA-256).

    >>> origin_key("250114-1", "2025-01-14T09:00:00+01:00", "abc")
    'eb9732334b80fe83'
    """
    text = f"{session_id}\n{started}\n{content_hash}"
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:16]


def _origin_of(info: Any) -> str:
    return info.origin or origin_key(info.id, info.started, info.content_hash)


def export_session(journal: Any, session_id: str) -> dict[str, Any]:
    """The session as plain data, ready to be written as JSON.

    Raises:
        JournalError: no such session, or a damaged event.
    """
    from diagnose.journal.attachments import read

    info = journal.session(session_id)  # the short id, the UUID or a prefix of it
    session_id = info.id
    events = journal.load_events(session_id)  # checked: a damaged event is named, not carried
    rankings = journal.load_rankings(session_id)
    files = {}
    for e in events:
        if e.kind == "attachment":
            data = read(journal.path, e.sha256)
            if data is not None:
                files[e.sha256] = base64.b64encode(data).decode("ascii")
    # Each event as stored, with its UUID: the receiving journal then computes the same
    # hashes, and the session's chain is the same there as here.
    stored = journal.stored_events(session_id)
    return {"format": FORMAT, "version": VERSION, "origin": _origin_of(info),
            "session": info.to_dict(),
            "events": [{"kind": kind, "data": json.loads(text), "time": when, "format": fmt,
                        "ranking": r, "uid": uid}
                       for (_seq, uid, kind, text, when, _r, fmt, _h), r in zip(stored, rankings)],
            "attachments": files}


@dataclass(frozen=True)
class Imported:
    """What an import did: the session's id here, and how many events it added."""

    session_id: str
    added: int
    new: bool
    renamed_from: str | None = None

    def __str__(self) -> str:
        if not self.added:
            return f"session {self.session_id} is here already, as in the file: nothing changed"
        what = "imported" if self.new else "brought up to date"
        renamed = (f" (its id {self.renamed_from} is taken here)" if self.renamed_from else "")
        return f"session {self.session_id} {what}: {self.added} event(s){renamed}"


def read_export(text: str, source: str = "the file") -> dict[str, Any]:
    """The exported session in ``text``, checked: format, events, attached files.

    Raises:
        InputError: not an export of a session, or something in it is damaged.
    """
    try:
        data = json.loads(text)
    except ValueError as exc:
        raise InputError("import", f"{source} is not JSON: {exc}") from None
    if not isinstance(data, dict) or data.get("format") != FORMAT:
        raise InputError("import", f"{source} is not a session exported by diagnose")
    if not isinstance(data.get("version"), int) or data["version"] > VERSION:
        raise InputError("import", f"{source} was written by a newer diagnose; upgrade diagnose")
    info, events = data.get("session"), data.get("events")
    if not isinstance(info, dict) or not isinstance(events, list) or not events:
        raise InputError("import", f"{source} holds no session")
    for key in ("id", "pack_id", "pack_version", "content_hash", "mode", "started"):
        if not isinstance(info.get(key), str):
            raise InputError("import", f"{source}: the session has no {key}")
    for n, row in enumerate(events, 1):
        try:
            decode(Row(row["kind"], row["data"], row["time"], row.get("format", 1)))
        except (EventError, KeyError, TypeError) as exc:
            raise InputError("import", f"{source}: event {n} is damaged: {exc}") from None
    _check_files(data.get("attachments") or {}, source)
    return data


def _check_files(files: Any, source: str) -> None:
    if not isinstance(files, dict):
        raise InputError("import", f"{source}: the attachments are damaged")
    for digest, text in files.items():
        try:
            raw = base64.b64decode(str(text), validate=True)
        except ValueError:
            raise InputError("import", f"{source}: attachment {digest[:12]} is damaged") from None
        if hashlib.sha256(raw).hexdigest() != digest:
            raise InputError("import", f"{source}: attachment {digest[:12]} does not match "
                                       "its digest")


def import_session(journal: Any, data: dict[str, Any]) -> Imported:
    """Bring the exported session ``data`` (from :func:`read_export`) into ``journal``.

    Raises:
        JournalError: the copy here went on differently from the file.
    """
    info, rows = data["session"], data["events"]
    origin = str(data.get("origin") or origin_key(info["id"], info["started"],
                                                  info["content_hash"]))
    here = _find(journal, origin) or _with_uid(journal, _uid(info.get("uid")))
    _keep_files(journal, data.get("attachments") or {})
    if here is None:
        sid = journal.new_session(info["pack_id"], info["pack_version"], info["content_hash"],
                                  info["mode"], info.get("who"), started=info["started"],
                                  learned=info.get("learned"), wanted=info["id"], origin=origin,
                                  uid=_uid(info.get("uid")))
        return _append(journal, sid, rows, [], renamed_from=None if sid == info["id"]
                       else info["id"])
    local = [encode(e) for e in journal.load_events(here.id)]
    return _append(journal, here.id, rows, local, renamed_from=None)


def _uid(value: Any) -> str | None:
    """A UUID from the file, kept across journals (None: a file without one)."""
    from diagnose.journal.tables import normal_uid

    try:
        return normal_uid(value) if value else None
    except JournalError:
        return None


def _with_uid(journal: Any, uid: str | None) -> Any:
    """The session here with the UUID ``uid`` (synced or imported before), or None."""
    try:
        return journal.session(uid) if uid else None
    except JournalError:
        return None


def _find(journal: Any, origin: str) -> Any:
    """The session here that came from ``origin`` (imported, or started here)."""
    for info in journal.sessions():
        if _origin_of(info) == origin:
            return info
    return None


def _append(journal: Any, sid: str, rows: list[dict[str, Any]], local: list[Row], *,
            renamed_from: str | None) -> Imported:
    theirs = [Row(r["kind"], r["data"], r["time"], r.get("format", 1)) for r in rows]
    shared = min(len(local), len(theirs))
    if [_same(a) for a in local[:shared]] != [_same(b) for b in theirs[:shared]]:
        raise JournalError(f"session {sid} went on differently here than in the file; "
                           "nothing was imported (export it from here to carry it on)")
    for row, raw in zip(theirs[shared:], rows[shared:]):
        # As it was stored, with its UUID when the file has one (an export of an older
        # diagnose has none: the event gets a new one), so that the hash is the same.
        journal.write(sid, row._asdict(), ranking=raw.get("ranking"), uid=_uid(raw.get("uid")))
    return Imported(sid, len(theirs) - shared, new=not local, renamed_from=renamed_from)


def _same(row: Row) -> tuple[str, str, str]:
    row = encode(decode(row))  # both sides as this diagnose writes them
    return row.kind, json.dumps(row.data, sort_keys=True), row.time


def _keep_files(journal: Any, files: dict[str, str]) -> None:
    from diagnose.journal.attachments import folder_of, read
    from diagnose.paths import replace_atomically

    for digest, text in files.items():
        if read(journal.path, digest) is None:
            folder = folder_of(journal.path)
            folder.mkdir(parents=True, exist_ok=True)
            raw = base64.b64decode(text)
            replace_atomically(folder / digest, lambda tmp, raw=raw: tmp.write_bytes(raw),
                               field="import")
