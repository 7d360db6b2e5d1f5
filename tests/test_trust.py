"""Knowing when it does not know: all-normal answers, the nameplate, the open world, failed
repairs, physical signatures and the state of the unit."""

from __future__ import annotations

from dataclasses import replace

import pytest

from diagnose.kb.loader import load_model
from diagnose.kb.model import UNKNOWN_CAUSE, Cause, Check, StateVar
from diagnose.reasoning.evidence import Evidence
from diagnose.reasoning.nameplate import excluded_causes, parameter_needed
from diagnose.reasoning.openworld import supported_causes, unobservable_causes
from diagnose.reasoning.planner import next_action, plan
from diagnose.reasoning.posterior import posterior
from diagnose.reasoning.synthetic import tiny_model
from diagnose.reasoning.unitstate import setup_minutes, unit_state
from diagnose.session import Session

SHIPPED = ("electrical-supply", "spring-applied-brake", "permanent-magnet-brake")


@pytest.fixture(scope="module", params=SHIPPED)
def pack(request):
    return load_model(request.param)


def _normal_outcome(chk: Check) -> str:
    """What a unit with none of the check's listed causes most often shows."""
    return max(chk.outcomes, key=lambda o: chk.normal.get(o, 0.0))


def _walk_all_normal(model, complaint, mode):
    """Answer every check the planner proposes with its normal outcome; return the end."""
    s = Session(model, mode=mode)
    s.add_complaint(complaint)
    for _ in range(len(model.checks) + 2):
        action = s.next_action()
        assert action.kind != "repair", (complaint, mode, action)
        if action.kind != "check":
            return s, action
        s.answer(action.id, _normal_outcome(model.checks[action.id]))
    raise AssertionError(f"{complaint}: no end after every check")


def test_all_normal_answers_end_in_an_escalation_with_unknown_on_top(pack):
    # the acceptance test: for every complaint, a technician who finds everything
    # normal is told "none of the known causes", never sent to repair a guess
    for complaint in pack.complaints:
        s, action = _walk_all_normal(pack, complaint, "site")
        assert action.kind == "escalate", (complaint, action)
        top = s.ranking().top
        assert top.cause == UNKNOWN_CAUSE, (complaint, s.ranking().entries[:3])
        # within the checks worth their minutes: far fewer than every check of the pack
        assert len(s.evidence.findings) <= 16, (complaint, len(s.evidence.findings))


def test_all_normal_answers_by_phone_propose_no_repair(pack):
    # by phone nothing can be ruled out on site: the end is a visit or an escalation,
    # and no answer that points at nothing sends the caller to try a repair
    for complaint in pack.complaints:
        _, action = _walk_all_normal(pack, complaint, "phone")
        assert action.kind in ("visit", "escalate"), (complaint, action)


def test_a_cause_the_nameplate_rules_out_leaves_the_ranking():
    model = load_model("spring-applied-brake")
    ev = Evidence(complaints=("will_not_release",), nameplate={"supply_kind": "converter"})
    gone = excluded_causes(model, ev)
    assert {"rectifier_diode_open", "rectifier_shorted", "rectifier_wrong_type"} <= gone
    ranked = {e.cause for e in posterior(model, ev).ranking().entries}
    assert not ranked & gone
    # "unknown" keeps a cause in: the safe reading
    unsure = replace(ev, nameplate={"supply_kind": "converter", "overexcitation": "unknown"})
    assert "overexcitation_faulty" not in excluded_causes(model, unsure)
    assert "overexcitation_faulty" in excluded_causes(
        model, replace(ev, nameplate={"overexcitation": "no"}))
    rectified = replace(ev, nameplate={"supply_kind": "rectified"})
    assert "rectifier_diode_open" not in excluded_causes(model, rectified)


def test_questions_that_cannot_matter_are_not_asked():
    model = load_model("spring-applied-brake")
    converter = Evidence(nameplate={"supply_kind": "converter"})
    rectified = Evidence(nameplate={"supply_kind": "rectified"})
    for param in ("ac_volts", "rectifier_type"):
        assert not parameter_needed(model, converter, param)
        assert parameter_needed(model, rectified, param)
    s = Session(model)
    s.set_nameplate("supply_kind", "converter")
    assert "ac_volts" not in s.open_parameters() and "rated_voltage" in s.open_parameters()
    s.add_complaint("will_not_release")
    for chk in ("rectifier_output", "rectifier_diode_test", "rectifier_type_label"):
        assert dict((c.id, c.status) for c in s.plan().checks())[chk] == "not for this unit"


def test_an_event_under_only_if_takes_its_causes_out():
    m = tiny_model()
    events = dict(m.events)
    events["no_coil_power"] = replace(events["no_coil_power"],
                                      only_if={"gravity_load": ("no",)})
    m2 = replace(m, events=events)
    gone = excluded_causes(m2, Evidence(nameplate={"gravity_load": "yes"}))
    assert gone == {"fuse_blown", "cable_break"}
    assert not excluded_causes(m2, Evidence(nameplate={"gravity_load": "no"}))


def test_a_cause_no_check_can_observe_does_not_gain_from_elimination():
    # a cause with no check at all, under the same complaint: ruling the others out must
    # not make it the answer; what it would gain goes to "none of the known causes"
    m = tiny_model()
    causes = dict(m.causes)
    causes["mystery"] = Cause("mystery", "A cause nobody can check", 20)
    complaints = dict(m.complaints)
    k = complaints["will_not_release"]
    complaints["will_not_release"] = replace(k, gate=replace(k.gate, inputs=k.gate.inputs + (
        "mystery",)))
    m2 = replace(m, causes=causes, complaints=complaints)
    assert "mystery" in unobservable_causes(m2, Evidence())
    base = posterior(m2, Evidence(complaints=("will_not_release",)))
    ev = (Evidence(complaints=("will_not_release",), nameplate={"gravity_load": "no"})
          .with_outcome("fuse", "intact").with_outcome("coil_ohms", "ok")
          .with_outcome("continuity", "ok").with_outcome("gap", "ok"))
    bayes = posterior(m2, ev, open_world=False)
    rule = posterior(m2, ev)
    p_base = dict((e.cause, e.p) for e in base.ranking().entries)["mystery"]
    p_bayes = dict((e.cause, e.p) for e in bayes.ranking().entries)["mystery"]
    p_rule = dict((e.cause, e.p) for e in rule.ranking().entries)["mystery"]
    assert p_bayes > p_base + 0.2  # plain Bayes: elimination alone makes it likely
    assert p_rule == pytest.approx(p_base)  # the open-world rule: no gain
    assert rule.unknown == pytest.approx(bayes.unknown + p_bayes - p_base)
    assert rule.ranking().top.cause == UNKNOWN_CAUSE
    assert next_action(m2, ev).kind != "repair"


def test_support_is_an_answer_that_points_at_a_cause():
    m = tiny_model()
    # silent: 0.97 / 0.95 / 0.98 and a worn lining's 0.2 against 0.03 without them
    assert supported_causes(m, Evidence().with_outcome("listen_click", "silent")) == {
        "coil_open", "fuse_blown", "cable_break", "lining_worn"}
    # a click is what a unit without any of them does: it points at nothing
    assert not supported_causes(m, Evidence().with_outcome("listen_click", "click"))


def test_a_failed_repair_divides_each_cause_it_fixes_by_its_failure_rate():
    # P(not cured | a fixed cause) = 1 - success, from the pack (Heckerman et al. 1995)
    m = tiny_model()
    ev = Evidence(complaints=("slips",)).with_outcome("oil_traces", "oily")
    before = posterior(m, ev, open_world=False)
    after = posterior(m, ev.with_repair("replace_disc", False), open_world=False)
    s = m.repairs["replace_disc"].success
    t = before.tables
    for cause in ("lining_worn", "lining_oily"):
        i = t.cause_index[cause]
        ratio_before = before.p[i] / before.p[t.unknown]
        ratio_after = after.p[i] / after.p[t.unknown]
        assert ratio_after == pytest.approx(ratio_before * (1 - s))


def test_the_failed_disc_repair_offers_the_hub_in_plain_sight():
    model = load_model("spring-applied-brake")
    s = Session(model)
    s.set_nameplate("gravity_load", "no")
    s.add_complaint("will_not_hold")
    offered = {c.id for c in s.repair_observations("replace_friction_disc")}
    assert {"hub_spline_check", "lining_inspection"} <= offered
    s.answer("hub_spline_check", "good")  # answered on the repair card, no removal of its own
    s.repair("replace_friction_disc", False)
    assert "hub_spline_check" not in {c.id for c in s.repair_observations(
        "replace_friction_disc")}
    top = s.ranking().entries
    for cause in ("lining_worn", "lining_oily", "lining_glazed"):
        assert dict((e.cause, e.p) for e in top)[cause] < 0.2


def _stateful():
    m = tiny_model()
    states = {"power": StateVar("power", "Power", {"on": "on", "isolated": "isolated"}, "on",
                                {"on": 3.0, "isolated": 5.0}),
              "brake": StateVar("brake", "The brake", {"mounted": "mounted",
                                                       "removed": "removed"}, "mounted",
                                {"removed": 30.0})}
    checks = dict(m.checks)
    checks["fuse"] = replace(checks["fuse"], requires={"power": "isolated"})
    checks["coil_ohms"] = replace(checks["coil_ohms"], requires={"power": "isolated"})
    checks["gap"] = replace(checks["gap"], requires={"brake": "mounted"})
    checks["oil_traces"] = replace(checks["oil_traces"], requires={"brake": "removed"},
                                   leaves={"brake": "removed"})
    return replace(m, states=states, checks=checks)


def test_setup_is_charged_only_when_the_state_must_change():
    m = _stateful()
    ev = Evidence(complaints=("will_not_release",))
    minutes = {c.id: c.minutes for c in plan(m, ev).checks()}
    assert minutes["fuse"] == 3 + 5  # isolate first
    after = ev.with_outcome("fuse", "intact")
    assert unit_state(m, after)["power"] == "isolated"
    minutes = {c.id: c.minutes for c in plan(m, after).checks()}
    assert minutes["coil_ohms"] == 10  # already isolated: one isolation serves both
    assert setup_minutes(m, unit_state(m, after), {"power": "on"}) == 3


def test_a_check_the_state_makes_meaningless_is_not_proposed():
    # an air gap on a brake that is off the motor: no setup step puts it back by itself
    m = _stateful()
    ev = Evidence(complaints=("will_not_release",), nameplate={"gravity_load": "no"}) \
        .with_outcome("oil_traces", "dry")
    assert unit_state(m, ev)["brake"] == "removed"
    status = {c.id: c.status for c in plan(m, ev).checks()}
    assert status["gap"] == "not in this state"
    # a repair leaves the unit put back as it was found
    back = ev.with_repair("replace_cable", False)
    assert unit_state(m, back)["brake"] == "mounted"
    assert {c.id: c.status for c in plan(m, back).checks()}["gap"] == ""


def test_the_technician_can_say_what_state_the_unit_is_in():
    m = _stateful()
    s = Session(m)
    s.set_state("brake", "removed")
    assert s.unit_state()["brake"] == "removed"
    s.undo()
    assert s.unit_state()["brake"] == "mounted"
    from diagnose.errors import InputError

    with pytest.raises(InputError):
        s.set_state("brake", "floating")


def test_a_low_reading_that_may_hide_a_signature_counts_for_both():
    # no machine supply voltage known: 16 V on a 24 V coil may be a low supply or a coil
    # for another voltage; the finding counts as "low or coil_mismatch"
    model = load_model("spring-applied-brake")
    s = Session(model)
    s.set_nameplate("supply_kind", "converter")
    s.add_complaint("will_not_release")
    f = s.answer("coil_voltage", "16 V")
    assert set(f.weights) == {"low", "coil_mismatch"}
    # with the supply voltage given, the same reading is plainly low
    s2 = Session(model)
    s2.set_nameplate("supply_kind", "converter")
    s2.set_nameplate("supply_voltage", "24 V")
    s2.add_complaint("will_not_release")
    assert s2.answer("coil_voltage", "16 V").weights == {"low": 1.0}
    # on a converter supply a half-wave pattern is impossible, so it is never weighed
    assert "half_wave" not in f.weights


def test_half_wave_volts_behind_a_bridge_blame_the_rectifier_not_the_supply():
    model = load_model("spring-applied-brake")
    s = Session(model)
    for k, v in {"rated_voltage": "205 V", "rated_power": "40 W", "supply_kind": "rectified",
                 "ac_volts": "230 V", "rectifier_type": "bridge"}.items():
        s.set_nameplate(k, v)
    s.add_complaint("will_not_release")
    f = s.answer("coil_voltage", "103 V")  # 0.45 x 230 V: half-wave (Rashid, textbook)
    assert f.outcome == "half_wave"
    assert s.ranking().top.cause == "rectifier_diode_open"


def test_why_says_a_failed_repair_and_the_open_world_rule_moved_the_ranking():
    model = load_model("spring-applied-brake")
    s = Session(model)
    s.set_nameplate("gravity_load", "no")
    s.add_complaint("will_not_hold")
    s.answer("static_torque_test", "slips")
    s.repair("replace_friction_disc", False)
    x = s.explain_ranking(leading=8)
    notes = {lead.cause: lead.notes for lead in x.leading}
    fixed = set(model.repairs["replace_friction_disc"].fixes)
    assert any("replace_friction_disc did not cure: ×0.07" in n
               for cause, ns in notes.items() if cause in fixed for n in ns)
    # the ranking in `why` is the ranking on screen
    shown = [e.cause for e in s.ranking().entries[:8]]
    assert [lead.cause for lead in x.leading] == shown


def test_a_question_whose_own_default_would_rule_its_uses_out_is_still_asked():
    # "over-excitation module fitted?" defaults to no, which rules out everything that
    # uses it; the question must still be asked, since the answer can be yes
    model = load_model("spring-applied-brake")
    assert "overexcitation" in Session(model).open_parameters()
