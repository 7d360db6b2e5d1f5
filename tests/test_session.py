"""The session API: events, the fold, undo, replay, validation without state change."""

from __future__ import annotations

import io
from pathlib import Path

import pytest

from diagnose.errors import InputError
from diagnose.events import UNDOABLE, Started
from diagnose.kb.model import UNKNOWN_CAUSE
from diagnose.reasoning.synthetic import tiny_model
from diagnose.session import (
    MemorySink,
    NullSink,
    Session,
    fold,
    normalise_parameter,
)

FIXTURES = Path(__file__).parent / "fixtures"


def fixed_clock():
    return "2026-01-01T00:00:00+00:00"


@pytest.fixture
def mini():
    from diagnose.kb.loader import load_model

    return load_model(str(FIXTURES / "mini"))


def test_a_new_session_records_the_notice_first():
    sink = MemorySink()
    s = Session(tiny_model(), sink=sink, session_id="s1", clock=fixed_clock)
    assert [e.kind for e in sink.events["s1"]] == ["notice"]
    assert sink.events["s1"][0].data["pack"] == "tiny-brake"
    assert s.events[0].time == "2026-01-01T00:00:00+00:00"


def test_each_method_writes_one_event_before_it_returns():
    sink = MemorySink()
    s = Session(tiny_model(), sink=sink, session_id="s1", clock=fixed_clock)
    s.add_complaint("will_not_release")
    s.answer("listen_click", "silent")
    s.unsure("coil_ohms")
    s.skip("continuity")
    s.acknowledge("lockout")
    s.repair("replace_fuse", False)
    s.note("customer says it worked yesterday")
    s.set_mode("phone")
    s.set_identity(serial="A123")
    kinds = [e.kind for e in sink.events["s1"]]
    assert kinds == ["notice", "complaint", "answer", "unsure", "skip", "ack", "repair", "note",
                     "mode", "identity"]
    assert list(s.events) == sink.events["s1"]


def test_state_is_a_pure_fold_of_the_events():
    s = Session(tiny_model(), clock=fixed_clock)
    s.add_complaint("will_not_release")
    s.answer("fuse", "blown")
    s.skip("gap")
    s.set_nameplate("gravity_load", "no")
    assert fold(s.events) == s.evidence
    ev = s.evidence
    assert ev.complaints == ("will_not_release",) and ev.findings == {"fuse": {"blown": 1.0}}
    assert ev.skipped == {"gap"} and ev.nameplate == {"gravity_load": "no"}


def test_bad_input_raises_and_changes_nothing():
    sink = MemorySink()
    s = Session(tiny_model(), sink=sink, session_id="s")
    before = (s.events, s.evidence)
    for call in (lambda: s.answer("fuse", "melted"), lambda: s.answer("nope", "x"),
                 lambda: s.add_complaint("smoke"), lambda: s.repair("nope", True),
                 lambda: s.set_nameplate("gravity_load", "maybe"),
                 lambda: s.set_nameplate("nope", "1"), lambda: s.acknowledge("nope"),
                 lambda: s.set_mode("moon"), lambda: s.note("  ")):
        with pytest.raises(InputError):
            call()
    assert (s.events, s.evidence) == before and len(sink.events["s"]) == 1


def test_a_failing_sink_leaves_the_state_unchanged():
    class Broken:
        fail = False

        def write(self, session_id, event):
            if self.fail:
                raise OSError("disk full")

    sink = Broken()
    s = Session(tiny_model(), sink=sink)
    sink.fail = True
    with pytest.raises(OSError):
        s.add_complaint("will_not_release")
    assert s.evidence.complaints == () and len(s.events) == 1


def test_undo_drops_the_last_undoable_event_and_refolds():
    sink = MemorySink()
    s = Session(tiny_model(), sink=sink, session_id="s")
    s.add_complaint("will_not_release")
    s.answer("fuse", "blown")
    s.acknowledge("lockout")  # a safety record: not undone
    undone = s.undo()
    assert undone is not None and undone.kind == "answer"
    assert s.evidence.findings == {} and "lockout" in s.evidence.acknowledged
    assert s.undo().kind == "complaint"
    assert s.undo() is None  # only the notice and the acknowledgement are left
    assert [e.kind for e in sink.events["s"]][-2:] == ["undo", "undo"]
    assert {"nameplate", "answer", "reading", "repair"} <= UNDOABLE


def test_replay_rebuilds_the_same_state_and_keeps_recording():
    sink = MemorySink()
    s = Session(tiny_model(), max_faults=2, mode="phone", sink=sink, session_id="s")
    s.add_complaint("will_not_release")
    s.answer("listen_click", "silent")
    s.undo()
    s.answer("listen_click", "click")
    dicts = [e.to_dict() for e in s.events]
    again = Session.replay(tiny_model(), dicts, sink=sink, session_id="s")
    assert again.evidence == s.evidence and again.max_faults == 2 and again.mode == "phone"
    assert again.ranking().to_list() == s.ranking().to_list()
    again.note("resumed")
    assert sink.events["s"][-1].kind == "note" and len(sink.events["s"]) == len(dicts) + 1


def test_replay_refuses_events_of_another_pack():
    events = [Started(pack="other")]
    with pytest.raises(InputError):
        Session.replay(tiny_model(), events)


def test_end_records_the_result_and_closes_the_session():
    s = Session(tiny_model())
    s.add_complaint("will_not_release")
    s.answer("fuse", "blown")
    s.repair("replace_fuse", True)
    end = s.end()
    assert end.data["result"] == "resolved" and end.data["repair"] == "replace_fuse"
    assert s.ended and s.next_action().kind == "done"
    with pytest.raises(InputError):
        s.answer("gap", "ok")
    assert s.undo() is None  # nothing before the end changes any more


def test_phone_session_ends_with_a_visit_and_the_parts():
    s = Session(tiny_model(), mode="phone")
    s.add_complaint("will_not_release")
    s.answer("listen_click", "silent")
    assert s.next_action().kind == "visit"
    end = s.end()
    assert end.data["result"] == "visit" and end.data["parts"]


def test_nameplate_values_are_checked_for_unit_range_choice_and_unknown(mini):
    s = Session(mini)
    assert s.set_nameplate("rated_voltage", "24V") == "24 V"
    assert s.set_nameplate("rated_voltage", "0.024 kV") == "24 V"
    assert s.set_nameplate("rated_power", "unknown") == "unknown"
    with pytest.raises(InputError, match="outside"):
        s.set_nameplate("rated_voltage", "400 V")  # max 250 V in the fixture pack
    with pytest.raises(InputError):
        s.set_nameplate("rated_voltage", "24 mm")
    with pytest.raises(InputError, match="unknown"):
        s.set_nameplate("rated_voltage", "unknown")
    p = tiny_model().parameters["gravity_load"]
    assert normalise_parameter(p, "YES") == "yes" and normalise_parameter(p, True) == "yes"


def test_a_reading_is_evaluated_at_once_with_nameplate_inputs(mini):
    s = Session(mini)
    s.set_nameplate("rated_voltage", "24 V")
    s.set_nameplate("rated_power", "20 W")
    s.add_complaint("will_not_release")
    f = s.answer("coil_resistance", "OL")
    assert f.outcome == "open" and f.verdict is not None and f.verdict.verdict == "open"
    ev = s.events[-1]
    assert ev.kind == "reading" and ev.data["verdict"] == "open" and ev.data["text"] == "OL"
    # R20 = V^2 / P = 24^2 / 20 = 28.8 ohm (Ohm's law, DOMAIN.md "The physics")
    ok = s.answer("coil_resistance", "28.8")
    assert ok.outcome == "ok"
    assert s.ranking().top.cause != "coil_open"


def test_a_bad_reading_changes_nothing(mini):
    s = Session(mini)
    n = len(s.events)
    with pytest.raises(InputError):
        s.answer("coil_resistance", "12 kg")
    with pytest.raises(InputError):
        s.answer("coil_resistance", ["1 ohm", "2 ohm"])
    assert len(s.events) == n


def test_soft_reading_near_a_band_edge_weighs_both_outcomes(mini):
    from dataclasses import replace

    chk = mini.checks["coil_resistance"]
    soft = replace(chk, measurement=replace(chk.measurement, accuracy=0.05))
    model = replace(mini, checks={**mini.checks, "coil_resistance": soft})
    s = Session(model)
    s.set_nameplate("rated_voltage", "24 V")
    s.set_nameplate("rated_power", "20 W")
    # 28.8 ohm expected, 10 % tolerance: 26.0 ohm is ~9.7 % low, within 5 % of the edge
    f = s.answer("coil_resistance", "26.0")
    assert f.soft and set(f.weights) == {"ok", "low"}
    assert sum(f.weights.values()) == pytest.approx(1.0)
    assert s.evidence.findings["coil_resistance"] == f.weights


def test_missing_nameplate_input_is_a_clear_error(mini):
    from dataclasses import replace

    chk = mini.checks["coil_resistance"]
    m = replace(chk.measurement, inputs={"rated_voltage": "$rated_voltage"})
    model = replace(mini, checks={**mini.checks, "coil_resistance": replace(chk, measurement=m)},
                    parameters={**mini.parameters, "rated_voltage": replace(
                        mini.parameters["rated_voltage"], default=None, unknown_allowed=True)})
    s = Session(model)
    s.set_nameplate("rated_voltage", "unknown")
    with pytest.raises(InputError, match="set it first"):
        s.answer("coil_resistance", "20")


def test_steps_in_the_test_case_format():
    s = Session(tiny_model())
    s.add_complaint("will_not_release")
    s.apply_step({"check": "listen_click", "answer": "silent"})
    s.apply_step({"check": "gap", "skip": True})
    s.apply_step({"check": "coil_ohms", "answer": "unsure"})
    s.apply_step({"repair": "replace_fuse", "cured": False})
    assert [e.kind for e in s.events[2:]] == ["answer", "skip", "unsure", "repair"]
    for bad in ({"check": "fuse"}, {"repair": "replace_fuse"}, {"bogus": 1}, "text"):
        with pytest.raises(InputError):
            s.apply_step(bad)


def test_evidence_that_fits_nothing_puts_unknown_on_top_or_escalates():
    from dataclasses import replace

    base = tiny_model()
    model = replace(base, checks={k: replace(c, unknown=c.normal) for k, c in base.checks.items()})
    s = Session(model)
    s.add_complaint("will_not_release")
    while s.next_action().kind == "check":  # every answer the normal one
        chk = model.checks[s.next_action().id]
        s.answer(chk.id, max(chk.normal, key=chk.normal.get))
    assert s.ranking().top.cause == UNKNOWN_CAUSE
    assert s.next_action().kind == "escalate"


def test_reasoning_views_render_in_80_columns():
    from rich.console import Console

    s = Session(tiny_model())
    s.add_complaint("will_not_release")
    s.answer("listen_click", "silent")
    out = io.StringIO()
    con = Console(file=out, width=80, color_system=None)
    from diagnose.views_reasoning import (
        ActionView,
        CheckExplanationView,
        ChecksTableView,
        RankingExplanationView,
        RankingTableView,
    )

    for thing in (RankingTableView(s.ranking()), ActionView(s.next_action()),
                  ChecksTableView(s.checks_table()), RankingExplanationView(s.explain_ranking()),
                  CheckExplanationView(s.explain_check("fuse"))):
        con.print(thing)
    text = out.getvalue()
    assert all(len(line) <= 80 for line in text.splitlines())
    assert "fuse" in text and "bits" in text


def test_pending_cautions_lists_unacknowledged_dangers():
    s = Session(tiny_model())
    assert [c.id for c in s.pending_cautions("fuse")] == ["lockout"]
    s.acknowledge("lockout", "fuse")
    assert s.pending_cautions("fuse") == ()


def test_a_danger_is_acknowledged_once_per_state_and_reminded_on_later_cards():
    sink = MemorySink()
    s = Session(tiny_model(), sink=sink, session_id="s")
    s.acknowledge("lockout", "fuse")
    assert s.pending_cautions("fuse") == ()
    # the same caution on another card, the unit in the same state: a reminder, no new ack
    assert s.pending_cautions("coil_ohms") == ()
    assert [c.id for c in s.reminders("coil_ohms")] == ["lockout"]
    s.remind("coil_ohms", ["lockout"])
    assert [e.data for e in sink.events["s"] if e.kind in ("ack", "reminder")] == [
        {"caution": "lockout", "item": "fuse", "step": 0},
        {"item": "coil_ohms", "cautions": ["lockout"]}]
    assert fold(s.events) == s.evidence
    with pytest.raises(InputError, match="does not carry"):
        s.acknowledge("lockout", "listen_click")
    with pytest.raises(InputError):
        s.acknowledge("lockout", "no_such_card")


def test_an_acknowledgement_lapses_when_power_is_restored():
    from dataclasses import replace as dc_replace

    from diagnose.kb.model import StateVar

    m = tiny_model()
    power = StateVar("power", "Power", {"on": "switched on", "isolated": "isolated"}, "on",
                     {"on": 3.0, "isolated": 5.0}, renews=frozenset({"on"}))
    checks = dict(m.checks)
    checks["fuse"] = dc_replace(checks["fuse"], requires={"power": "isolated"})
    checks["coil_ohms"] = dc_replace(checks["coil_ohms"], requires={"power": "isolated"})
    checks["listen_click"] = dc_replace(checks["listen_click"], requires={"power": "on"})
    m = dc_replace(m, states={"power": power}, checks=checks)
    s = Session(m)
    s.acknowledge("lockout", "fuse")
    s.answer("fuse", "intact")            # isolated for it: the acknowledgement stands
    assert s.pending_cautions("coil_ohms") == ()
    s.answer("listen_click", "click")     # power restored for this one
    assert [c.id for c in s.pending_cautions("coil_ohms")] == ["lockout"]  # asked again
    s.acknowledge("lockout", "coil_ohms")
    assert s.pending_cautions("coil_ohms") == ()


def test_an_old_acknowledgement_without_item_covers_no_card():
    """Older journals recorded ``ack`` with the caution only: resumed, the shell asks again."""
    events = [Session(tiny_model()).events[0].to_dict(),
              {"kind": "ack", "data": {"caution": "lockout"}, "time": "2025-01-14T09:00:00+00:00"}]
    s = Session.replay(tiny_model(), events)
    assert "lockout" in s.evidence.acknowledged  # still on the record
    assert [c.id for c in s.pending_cautions("fuse")] == ["lockout"]
    assert [c.id for c in s.pending_cautions("coil_ohms")] == ["lockout"]


def test_a_repair_that_cannot_be_done_now_is_not_proposed_again():
    sink = MemorySink()
    s = Session(tiny_model(), sink=sink, session_id="s")
    s.set_nameplate("gravity_load", "no")
    s.add_complaint("will_not_release")
    s.answer("listen_click", "silent")
    s.answer("fuse", "blown")
    assert s.next_action().id == "replace_fuse"
    event = s.skip_repair("replace_fuse")
    assert (event.kind, event.data) == ("skip_repair", {"repair": "replace_fuse"})
    assert s.evidence.repairs_skipped == {"replace_fuse"} and fold(s.events) == s.evidence
    assert s.next_action().id != "replace_fuse"
    status = {r.id: r.status for r in s.plan().repairs()}
    assert status["replace_fuse"] == "skipped"
    assert s.undo().kind == "skip_repair"
    assert s.next_action().id == "replace_fuse"
    with pytest.raises(InputError):
        s.skip_repair("nope")
    # a scripted step says the same; old `skip` steps of checks still work
    s.apply_step({"repair": "replace_fuse", "skip": True})
    s.apply_step({"check": "gap", "skip": True})
    assert "replace_fuse" in s.evidence.repairs_skipped and "gap" in s.evidence.skipped
    with pytest.raises(InputError, match="no `cured`"):
        s.apply_step({"repair": "replace_coil", "skip": True, "cured": False})
    # done after all: it counts as done, and is no longer skipped
    s.repair("replace_fuse", True)
    assert s.evidence.repairs_skipped == frozenset()


def test_end_with_a_result_does_not_need_the_planner(monkeypatch):
    import diagnose.session as session_module

    s = Session(tiny_model())
    s.add_complaint("will_not_release")
    s.repair("replace_fuse", True)

    def broken(*args, **kwargs):
        raise RuntimeError("planning failed")

    monkeypatch.setattr(session_module, "plan", broken)
    end = s.end("resolved")
    assert s.ended and end.data["result"] == "resolved" and end.data["repair"] == "replace_fuse"


def test_a_cured_session_ends_without_the_planner(monkeypatch):
    import diagnose.session as session_module

    s = Session(tiny_model())
    s.add_complaint("will_not_release")
    s.repair("replace_fuse", True)
    monkeypatch.setattr(session_module, "plan", lambda *a, **k: 1 / 0)
    assert s.end().data["result"] == "resolved"


def test_end_checks_the_result_before_anything_and_keeps_given_parts():
    s = Session(tiny_model(), mode="phone")
    s.add_complaint("will_not_release")
    with pytest.raises(InputError):
        s.end("finished")
    assert not s.ended
    end = s.end("visit", parts=["fuse", "magnet body"])
    assert end.data["parts"] == ["fuse", "magnet body"]


def test_a_note_after_the_end_is_refused_in_one_line():
    s = Session(tiny_model())
    s.end("abandoned")
    with pytest.raises(InputError) as caught:
        s.note("too late")
    assert "closed" in str(caught.value) and "\n" not in str(caught.value)
    assert [e.kind for e in s.events] == ["notice", "end"]


def test_the_notice_records_the_folder_of_the_pack(mini):
    s = Session(mini)
    path = s.events[0].data["path"]
    assert Path(path).is_absolute() and Path(path) == (FIXTURES / "mini").resolve()
    assert Session(tiny_model()).events[0].data["path"] == ""  # a model built in code


def test_null_sink_and_defaults():
    s = Session(tiny_model())
    assert isinstance(s.sink, NullSink) and len(s.session_id) == 32
    with pytest.raises(InputError):
        Session(tiny_model(), max_faults=3)
