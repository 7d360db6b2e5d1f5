"""The repair log says what the session knows: both come from the same events by one rule.

Sessions are recorded through the session API into a real journal (the three
example answers files, and sessions with undos of every undoable kind); then
the repair log (``session_record``) and the session rebuilt from the journal
(``Session.replay``) are compared: complaints, nameplate, identity, the
checks with their outcomes, unsure and skipped checks, repairs with their
results, notes, the end, and the final ranking.
"""

from __future__ import annotations

import random
from pathlib import Path

import pytest
import yaml

from diagnose.commands.run import play, read_answers
from diagnose.events import STEP_KINDS, steps_taken
from diagnose.journal.record import session_record
from diagnose.journal.recorder import start_session
from diagnose.journal.store import Journal
from diagnose.kb.loader import load_model
from diagnose.session import Session

ROOT = Path(__file__).parent.parent
EXAMPLES = sorted((ROOT / "examples").glob("*.yaml"))
MINI = ROOT / "tests" / "fixtures" / "mini"


def _compare(journal: Journal, sid: str, model) -> None:
    record = session_record(journal, sid, model)
    session = Session.replay(model, journal.load_events(sid))
    ev = session.evidence
    assert tuple(c["id"] for c in record.complaints) == ev.complaints
    assert {p["id"]: p["value"] for p in record.nameplate} == dict(ev.nameplate)
    assert dict(record.identity) == dict(ev.identity)
    # The log keeps every step in order; the state is where the last step on a check left it.
    last = {s.id: s for s in record.steps if s.kind in ("answer", "reading", "unsure", "skip")}
    checks = [s for s in last.values() if s.kind in ("answer", "reading")]
    assert {s.id for s in checks} == set(ev.findings)
    for s in checks:
        weights = ev.findings[s.id]
        if s.weights and len(s.weights) > 1:
            assert dict(s.weights) == pytest.approx(dict(weights))
        else:
            assert max(weights, key=weights.get) == s.outcome
    assert {s.id for s in last.values() if s.kind == "unsure"} == set(ev.unsure)
    assert {s.id for s in last.values() if s.kind == "skip"} == set(ev.skipped)
    assert [(s.id, s.cured) for s in record.steps if s.kind == "repair"] == list(ev.repairs)
    assert [n["text"] for n in record.notes] == list(ev.notes)
    assert len(record.steps) == steps_taken(session.events)
    assert all(s.kind in STEP_KINDS for s in record.steps)
    assert (record.end or {}).get("result") == (ev.end or {}).get("result")
    final = [(e["cause"], round(e["p"], 6)) for e in record.final_ranking]
    now = [(e.cause, round(e.p, 6)) for e in session.ranking().entries]
    assert final[:5] == now[:5]


@pytest.mark.parametrize("example", EXAMPLES, ids=lambda p: p.stem)
def test_the_log_of_each_example_is_the_sessions_fold(example, tmp_path):
    data = read_answers(str(example))
    model = load_model("spring-applied-brake")
    with Journal(tmp_path / "journal.sqlite3") as journal:
        session = start_session(journal, model, mode=str(data.get("mode", "site")))
        play(session, data)
        _compare(journal, session.session_id, model)


def _random_session(session: Session, rng: random.Random) -> None:
    """Complaint, nameplate, answers, notes, repairs and undos in a random order."""
    model = session.model
    session.add_complaint("will_not_release")
    fresh = list(model.checks)  # each check gets one step (an undo may free it again)
    rng.shuffle(fresh)
    for _ in range(14):
        if session.ended:
            return
        move = rng.choice(["answer", "answer", "unsure", "skip", "note", "repair", "undo",
                           "nameplate"])
        try:
            if move in ("answer", "unsure", "skip") and not fresh:
                continue
            if move == "answer":
                check = model.checks[fresh[-1]]
                if check.measurement is None:
                    session.answer(fresh.pop(), rng.choice(list(check.outcomes)))
            elif move == "unsure":
                session.unsure(fresh.pop())
            elif move == "skip":
                session.skip(fresh.pop())
            elif move == "note":
                session.note(f"note {rng.randrange(1000)}")
            elif move == "repair":
                session.repair(rng.choice(list(model.repairs)), rng.random() < 0.3)
            elif move == "nameplate":
                session.set_nameplate("rated_voltage", rng.choice(["24 V", "48 V"]))
            else:
                session.undo()
        except Exception as exc:  # a refused step (already answered, ...) is not a test failure
            if type(exc).__name__ not in ("InputError",):
                raise


@pytest.mark.parametrize("seed", range(12))
def test_the_log_with_undos_is_the_sessions_fold(seed, tmp_path):
    model = load_model(str(MINI))
    rng = random.Random(seed)
    with Journal(tmp_path / "journal.sqlite3") as journal:
        session = start_session(journal, model)
        _random_session(session, rng)
        _compare(journal, session.session_id, model)


def test_an_answers_file_round_trip_is_the_same_fold(tmp_path):
    """The same answers file played twice (with and without a journal) folds alike."""
    data = yaml.safe_load((ROOT / "examples" / "worn-lining.yaml").read_text(encoding="utf-8"))
    model = load_model("spring-applied-brake")
    memory = Session(model)
    play(memory, data)
    with Journal(tmp_path / "journal.sqlite3") as journal:
        recorded = start_session(journal, model)
        play(recorded, data)
        replayed = Session.replay(model, journal.load_events(recorded.session_id))
    assert replayed.evidence.findings == memory.evidence.findings
    assert replayed.evidence.repairs == memory.evidence.repairs


def test_the_statistics_count_what_the_sessions_fold(tmp_path):
    """``stats`` reads sessions through the same fold: its counts are the replayed sessions'."""
    from collections import Counter

    from diagnose.journal.stats import stats

    model = load_model(str(MINI))
    with Journal(tmp_path / "journal.sqlite3") as journal:
        for seed in range(10):
            session = start_session(journal, model)
            _random_session(session, random.Random(100 + seed))
            if not session.ended and seed % 2:
                session.end("abandoned" if seed % 3 else None)
        folded = [Session.replay(model, journal.load_events(i.id)).evidence
                  for i in journal.sessions()]
        figures = stats(journal, model_for=lambda _pid: model, top=100)
    assert figures.sessions == len(folded) == 10
    assert figures.closed == sum(ev.end is not None for ev in folded)
    assert figures.results == dict(Counter(str(ev.end["result"]) for ev in folded if ev.end))
    assert figures.with_repair == sum(bool(ev.repairs) for ev in folded)
    assert figures.first_repair_cured == sum(bool(ev.repairs and ev.repairs[0][1])
                                             for ev in folded)
    counted = Counter(c for ev in folded for c in ev.done)
    assert {c: n for c, _title, n in figures.checks} == dict(counted)
