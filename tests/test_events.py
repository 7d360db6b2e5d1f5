"""The events as code: one class per kind, one codec to and from the journal row, versioned.

What a user relies on: whatever the session recorded reads back as the same
event (nothing lost, nothing changed), a row altered by hand is named rather
than read wrongly, a row from a newer program is refused with a plain
reason, and a journal written before the format column existed is read and
upgraded with a copy kept.
"""

from __future__ import annotations

import dataclasses
import sqlite3
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from diagnose import events as ev_mod
from diagnose.errors import JournalError
from diagnose.events import (
    CLASSES,
    FORMAT,
    KINDS,
    Acknowledged,
    Ended,
    Event,
    EventError,
    IdentityGiven,
    Noted,
    Other,
    ReadingTaken,
    Row,
    Started,
    Undone,
    decode,
    encode,
    fold,
    problem,
)
from diagnose.journal import store as store_mod
from diagnose.journal.recorder import start_session
from diagnose.journal.store import Journal
from diagnose.kb.loader import load_model
from diagnose.session import Session
from diagnose.session import fold as session_fold

ROOT = Path(__file__).parent.parent
MINI = ROOT / "tests" / "fixtures" / "mini"
WHEN = "2025-01-14T09:00:00+01:00"


def test_every_kind_is_a_class_and_every_class_a_kind():
    assert set(KINDS) == {c.KIND for c in CLASSES}
    assert len(KINDS) == len(CLASSES) == 22
    for kind in KINDS.values():
        assert kind.cls.KIND == kind.name and kind.means
        assert dataclasses.is_dataclass(kind.cls)
        assert kind.cls.__dataclass_params__.frozen


def _recorded(tmp_path: Path) -> tuple[Session, list[Event]]:
    """A session with every kind the shell records, through a real journal."""
    model = load_model(str(MINI))
    with Journal(tmp_path / "journal.sqlite3") as journal:
        s = start_session(journal, model)
        s.set_identity(serial="SN-0042", site="Hall 3")
        s.set_nameplate("rated_voltage", "24")
        s.add_complaint("will_not_release")
        s.answer("fuse_state", "intact")
        s.answer("coil_resistance", "28.8 ohm")
        s.skip(next(c for c in model.checks if c not in s.evidence.done))
        s.note("customer reports a burnt smell")
        s.undo()
        s.set_mode("phone")
        s.acknowledge("lockout")
        s.repair(next(iter(model.repairs)), False)
        s.end("escalated", text="needs a new coil")
        return s, journal.load_events(s.session_id)


def test_what_the_session_recorded_reads_back_as_the_same_events(tmp_path):
    session, back = _recorded(tmp_path)
    assert back == list(session.events)
    assert {type(e) for e in back} >= {Started, IdentityGiven, ReadingTaken, Undone, Ended}
    for e in back:
        assert decode(encode(e)) == e
    assert session_fold(back) == session.evidence


def test_a_reading_keeps_its_figures_and_soft_weights(tmp_path):
    _, back = _recorded(tmp_path)
    reading = next(e for e in back if isinstance(e, ReadingTaken))
    assert reading.check == "coil_resistance" and reading.text == "28.8 ohm"
    assert reading.figures and all("value" in f for f in reading.figures.values())
    assert sum(reading.finding.values()) == pytest.approx(1.0)


@pytest.mark.parametrize(("row", "why"), [
    (("answer", {"check": "fuse_state"}, WHEN), "the answer event has no outcome"),
    (("repair", {"repair": "r", "cured": "yes"}, WHEN), "cured is not true or false"),
    (("undo", {"index": True}, WHEN), "index is not a whole number"),
    (("reading", {"check": "c"}, WHEN), "has no verdict"),
    (("reading", {"check": "c", "weights": {"ok": "most"}}, WHEN), "not numbers by outcome"),
    (("ack", {"caution": "lockout", "step": "2"}, WHEN), "step is not a whole number"),
    (("note", ["a", "list"], WHEN), "not a JSON object"),
    (("note", {"text": "x"}, 42), "time is not text"),
    (("end", {"parts": "fuse"}, WHEN), "parts is not a list"),
    (("complaint", {"complaint": {"id": "x"}}, WHEN), "complaint is not text"),
])
def test_a_row_altered_by_hand_is_named_not_read_wrongly(row, why):
    assert why in problem(row)
    with pytest.raises(EventError):
        decode(row)


def test_a_kind_from_a_newer_program_is_kept_and_changes_nothing():
    other = decode(("calibration", {"meter": "M-7"}, WHEN))
    assert isinstance(other, Other) and other.kind == "calibration"
    assert encode(other)[:3] == ("calibration", {"meter": "M-7"}, WHEN)
    assert session_fold([Started(), other]) == session_fold([Started()])
    assert not other.UNDOABLE and not other.STEP


def test_a_row_of_a_newer_format_is_refused_with_the_reason():
    why = problem(Row("note", {"text": "x"}, WHEN, FORMAT + 1))
    assert "newer diagnose" in why and "upgrade diagnose" in why


def test_an_older_format_is_brought_up_to_date_before_it_is_read(monkeypatch):
    """The path a future format change takes: format 1 rows upgraded, then read."""
    def rename(kind, data):
        if kind == "note" and "remark" in data:
            data["text"] = data.pop("remark")
        return data

    monkeypatch.setattr(ev_mod, "FORMAT", 2)
    monkeypatch.setattr(ev_mod, "UPGRADES", {1: rename})
    assert decode(Row("note", {"remark": "old"}, WHEN, 1)) == Noted("old", time=WHEN)
    assert decode(Row("note", {"text": "new"}, WHEN, 2)) == Noted("new", time=WHEN)


def test_the_fold_leaves_out_an_undo_and_what_it_took_back():
    events = [Noted("a"), Noted("b"), Undone(1, was="note"), Noted("c")]
    assert fold(events, lambda acc, e: acc + [e.text], []) == ["a", "c"]
    assert encode(events[2]).data == {"index": 1, "kind": "note"}


def test_an_old_acknowledgement_without_a_card_reads_back_as_one():
    ack = decode(("ack", {"caution": "lockout"}, WHEN))
    assert ack == Acknowledged("lockout", time=WHEN) and ack.item is None and ack.step is None
    assert encode(ack).data == {"caution": "lockout"}


_text = st.text(st.characters(blacklist_categories=("Cs",)), max_size=30)


@settings(max_examples=200, deadline=None)
@given(st.sampled_from([c for c in CLASSES if c is not IdentityGiven]), st.data())
def test_any_event_round_trips_through_the_row(cls, data):
    values = {}
    for f in dataclasses.fields(cls):
        if f.name == "time":
            continue
        t = f.type
        if t in ("str", "str | None"):
            values[f.name] = data.draw(_text)
        elif t in ("int", "int | None"):
            values[f.name] = data.draw(st.integers(0, 10_000))
        elif t == "float | None":
            values[f.name] = data.draw(st.floats(0, 1))
        elif t == "float":
            values[f.name] = data.draw(st.floats(0.01, 100))
        elif t == "bool":
            values[f.name] = data.draw(st.booleans())
        elif t in ("tuple[str, ...]", "str | tuple[str, ...]"):
            values[f.name] = tuple(data.draw(st.lists(_text, max_size=3)))
        elif t == "Mapping[str, float]":
            values[f.name] = data.draw(st.dictionaries(_text, st.floats(0, 1), max_size=3))
        elif t == "tuple[Mapping[str, Any], ...]":
            values[f.name] = tuple(data.draw(st.lists(st.fixed_dictionaries(
                {"part": _text, "qty": st.integers(1, 50), "number": _text}), max_size=3)))
        elif t == "Mapping[str, Mapping[str, Any]]":
            values[f.name] = data.draw(st.dictionaries(
                _text, st.fixed_dictionaries({"label": _text, "value": st.floats(-1e6, 1e6)}),
                max_size=2))
    event = cls(**values, time=data.draw(_text))
    assert decode(encode(event)) == event


# --- the journal's format column ---------------------------------------------------------------


def _schema_one_journal(path: Path) -> str:
    """A journal as a program that knew only schema 1 wrote it."""
    conn = sqlite3.connect(path)
    for statement in store_mod._MIGRATIONS[0]:
        conn.execute(statement)
    conn.execute(f"PRAGMA application_id = {store_mod.APPLICATION_ID}")
    conn.execute("PRAGMA user_version = 1")
    conn.execute("INSERT INTO session (id, pack_id, pack_version, content_hash, mode, started, "
                 "updated) VALUES ('250114-1', 'mini-brake', '1', 'h', 'site', ?, ?)",
                 (WHEN, WHEN))
    conn.execute("INSERT INTO event (session_id, seq, kind, time, data) VALUES "
                 "('250114-1', 1, 'note', ?, '{\"text\":\"written by schema 1\"}')", (WHEN,))
    conn.commit()
    conn.close()
    return "250114-1"


def test_a_schema_one_journal_is_read_as_it_is_when_only_read(tmp_path):
    path = tmp_path / "journal.sqlite3"
    sid = _schema_one_journal(path)
    before = path.read_bytes()
    with Journal(path, readonly=True) as j:
        assert j.load_events(sid) == [Noted("written by schema 1", time=WHEN)]
    assert path.read_bytes() == before


def test_a_schema_one_journal_is_upgraded_with_a_copy_kept(tmp_path):
    path = tmp_path / "journal.sqlite3"
    sid = _schema_one_journal(path)
    with Journal(path) as j:
        assert j.schema_version == store_mod.SCHEMA_VERSION >= 2
        j.write(sid, Noted("after the upgrade", time=WHEN))
        assert [e.text for e in j.load_events(sid)] == ["written by schema 1",
                                                        "after the upgrade"]
    formats = sqlite3.connect(path).execute("SELECT format FROM event ORDER BY seq").fetchall()
    assert formats == [(1,), (FORMAT,)]
    with Journal(tmp_path / "journal.sqlite3.schema1.bak", readonly=True) as old:
        assert len(old.load_events(sid)) == 1


def test_an_event_of_a_newer_format_in_the_journal_is_named(tmp_path):
    path = tmp_path / "journal.sqlite3"
    with Journal(path) as j:
        sid = j.new_session("mini-brake", "1", "h", "site")
        j.write(sid, Noted("fine", time=WHEN))
    conn = sqlite3.connect(path)
    conn.execute("UPDATE event SET format = ? WHERE seq = 1", (FORMAT + 1,))
    conn.commit()
    conn.close()
    with Journal(path, readonly=True) as j, pytest.raises(JournalError) as err:
        j.load_events(sid)
    assert f"session {sid}, event 1" in str(err.value) and "newer diagnose" in str(err.value)
