"""Safety by construction: hazards enforced by lint, phone mode safe on every unit, the
shorted-coil DANGER, steps withheld until the load is supported, acknowledgements per state."""

from __future__ import annotations

import copy
import itertools

import numpy as np
import pytest

from diagnose.kb.compiler import compile_sources
from diagnose.kb.loader import load_model, read_chain
from diagnose.reasoning.evidence import Evidence
from diagnose.reasoning.nameplate import matches, nameplate_value, squash
from diagnose.reasoning.planner import next_action
from diagnose.session import Session

SHIPPED = ("electrical-supply", "spring-applied-brake", "permanent-magnet-brake")


# --- lint enforces the hazards ----------------------------------------------------------------


def _hazardous_steps(sources):
    """(source index, document index, section, position, data) of every step with hazards."""
    for si, src in enumerate(sources):
        for di, doc in enumerate(src.documents):
            data = doc.data if isinstance(doc.data, dict) else {}
            for section in ("checks", "repairs"):
                for pos, item in enumerate(data.get(section) or []):
                    if isinstance(item, dict) and item.get("hazards"):
                        yield si, di, section, pos, item


def _errors_after(sources, si, di, section, pos, change):
    mutated = copy.deepcopy(sources)
    item = mutated[si].documents[di].data[section][pos]
    change(item)
    model, problems = compile_sources(mutated, schema=False)
    return [p for p in problems if p.level == "error"]


@pytest.mark.parametrize("pack", ["spring-applied-brake", "permanent-magnet-brake"])
def test_every_hazardous_step_loses_its_hazard_or_a_caution_and_lint_says_so(pack):
    sources, problems = read_chain(pack)
    assert not [p for p in problems if p.level == "error"]
    model = load_model(pack)
    steps = list(_hazardous_steps(sources))
    assert len(steps) >= 30  # every check and repair that acts on the unit declares them
    for si, di, section, pos, item in steps:
        sid = item["id"]
        if sid not in model.checks and sid not in model.repairs:
            continue  # replaced by a device check: it is not in the composed pack
        # 1. its hazards removed: the cautions it still shows name no hazard, or its wording does
        errors = _errors_after(sources, si, di, section, pos, lambda d: d.pop("hazards"))
        assert any(sid in p.message and p.code in ("undeclared-hazard", "hazard-wording")
                   for p in errors), (sid, [str(p) for p in errors])
        # 2. a caution its hazards require on every unit removed from its card
        required = [hc.caution for h in item["hazards"] for hc in model.hazards[h].cautions
                    if not hc.only_if and not hc.after and not hc.after_verdict
                    and not model.hazards[h].only_if]
        for caution in dict.fromkeys(required):
            def drop(d, c=caution):
                d["cautions"] = [x for x in d["cautions"] if x != c]
            errors = _errors_after(sources, si, di, section, pos, drop)
            assert any(p.code == "missing-caution" and sid in p.message and caution in p.message
                       for p in errors), (sid, caution)


def test_hazardous_wording_without_hazards_is_an_error_unless_a_reason_is_given(tmp_path):
    sources, _ = read_chain("spring-applied-brake")
    si, di, section, pos, item = next(
        x for x in _hazardous_steps(sources) if x[4]["id"] == "hub_spline_check")

    def bare(d):
        d.pop("hazards")
        d["cautions"] = []

    errors = _errors_after(sources, si, di, section, pos, bare)
    assert any(p.code == "hazard-wording" and "hub_spline_check" in p.message for p in errors)

    def silenced(d):
        bare(d)
        d["hazards"] = []
        d["hazards_note"] = "the brake is removed on the bench, away from the machine"

    errors = _errors_after(sources, si, di, section, pos, silenced)
    assert not any("hub_spline_check" in p.message for p in errors)


def test_a_caution_after_the_instruction_is_a_lint_error():
    sources, _ = read_chain("spring-applied-brake")
    si, di, section, pos, item = next(
        x for x in _hazardous_steps(sources) if x[4]["id"] == "caller_stop_click")

    def late(d):
        d["caller"] = "Listen when the machine stops. Do not go near or under the load."

    errors = _errors_after(sources, si, di, section, pos, late)
    assert any(p.code == "caution-last" and "caller_stop_click" in p.message for p in errors)


# --- phone mode is safe on every unit ---------------------------------------------------------


def _nameplates(model):
    """Every combination of the safety-relevant nameplate answers the pack asks."""
    axes = []
    for pid in ("gravity_load", "pm_gravity_load", "supply_kind", "people_carrying"):
        p = model.parameters.get(pid)
        if p is None:
            continue
        values = list(p.choices) + (["unknown"] if p.unknown_allowed else [])
        axes.append([(pid, v) for v in values])
    return [dict(combo) for combo in itertools.product(*axes)]


def _known(model, evidence, condition):
    """The pack's caller-safe condition, judged only on values actually known."""
    for pid, wanted in condition.items():
        have = nameplate_value(model, evidence, pid)
        if have is None or squash(have) not in {squash(w) for w in wanted}:
            return False
    return True


def _caller_safe_by_the_pack(model, evidence, item):
    if item.where != "phone":
        return False
    for h in item.hazards:
        hz = model.hazards[h]
        if not matches(model, evidence, hz.only_if):  # not a hazard on this unit
            continue
        if hz.caller_safe is True:
            continue
        if isinstance(hz.caller_safe, dict) and hz.caller_safe and _known(
                model, evidence, hz.caller_safe):
            continue
        return False
    return True


@pytest.mark.parametrize("pack", SHIPPED)
def test_phone_mode_never_gives_a_caller_a_step_off_the_caller_safe_list(pack):
    model = load_model(pack)
    rng = np.random.default_rng(7)
    seen = 0
    for nameplate in _nameplates(model):
        for complaint in model.complaints:
            for _ in range(2):  # two walks with different answers
                ev = Evidence(complaints=(complaint,), mode="phone", nameplate=nameplate)
                for _ in range(20):
                    action = next_action(model, ev)
                    if action.kind not in ("check", "repair"):
                        break
                    item = model.checks.get(action.id) or model.repairs[action.id]
                    assert _caller_safe_by_the_pack(model, ev, item), (nameplate, complaint,
                                                                       action.id)
                    if (model.hazards.keys() & {"changes_drive_settings"}
                            and nameplate.get("gravity_load") != "no"):
                        assert "changes_drive_settings" not in item.hazards
                    seen += 1
                    if action.kind == "repair":
                        ev = ev.with_repair(action.id, False)
                        continue
                    chk = model.checks[action.id]
                    ev = ev.with_outcome(action.id, chk.outcomes[int(rng.integers(
                        len(chk.outcomes)))])
    assert seen > 50


def test_the_caller_is_walked_through_the_drive_setting_only_without_a_hanging_load():
    model = load_model("spring-applied-brake")
    ev = Evidence(complaints=("will_not_release",), mode="phone")
    ev = (ev.with_outcome("caller_brake_click", "no_click")
          .with_outcome("caller_history", "work_done")
          .with_outcome("caller_brake_output", "shown_off"))
    for gravity, allowed in (("no", True), ("yes", False)):
        action = next_action(model, ev.with_nameplate("gravity_load", gravity))
        assert (action.kind == "repair" and action.id == "enable_brake_output") == allowed, \
            (gravity, action)


# --- the shorted coil ----------------------------------------------------------------------


@pytest.mark.parametrize("reading", [("brake_coil_resistance", "0.3 ohm"),
                                     ("coil_insulation", "0.05 megaohm")])
def test_after_a_short_no_energising_step_comes_without_the_danger(reading):
    model = load_model("spring-applied-brake")
    energising = {"energises_coil", "machine_in_use"}
    rng = np.random.default_rng(3)
    shown = 0
    for complaint in ("will_not_release", "fuse_blows_brake", "releases_late_or_sometimes"):
        s = Session(model)
        s.set_nameplate("gravity_load", "no")
        s.add_complaint(complaint)
        f = s.answer(*reading)
        assert f.outcome in ("short", "failed")
        for _ in range(25):
            action = s.next_action()
            if action.kind not in ("check", "repair"):
                break
            item = model.checks.get(action.id) or model.repairs[action.id]
            if energising & set(item.hazards):
                cautions = s.card_cautions(action.id)
                assert "coil_shorted" in cautions, action.id
                assert model.cautions["coil_shorted"].level == "DANGER"
                assert "short" in model.cautions["coil_shorted"].text
                shown += 1
            if action.kind == "repair":
                s.repair(action.id, False)
            else:
                chk = model.checks[action.id]
                s.answer(action.id, chk.outcomes[int(rng.integers(len(chk.outcomes)))])
    # and before any such reading the DANGER is not shown
    fresh = Session(model)
    assert "coil_shorted" not in fresh.card_cautions("coil_voltage")


# --- withheld until the load is supported ----------------------------------------------------


def test_a_release_on_a_gravity_axis_waits_for_the_load_support_again_after_a_repair():
    model = load_model("spring-applied-brake")
    s = Session(model)
    s.set_nameplate("gravity_load", "yes")
    s.add_complaint("will_not_release")
    s.answer("coil_voltage", "23.9 V")
    s.answer("brake_coil_resistance", "29 ohm")
    scores = {c.id: c for c in s.plan().checks()}
    assert scores["rotate_released"].needs[:1] == ("secure_load",)
    s.answer("secure_load", "done")
    assert s.unit_state()["load"] == "supported"
    assert "secure_load" not in {c.id: c for c in s.plan().checks()}["rotate_released"].needs
    s.repair("readjust_worn_brake", False)  # the repair puts the unit back: load hanging
    assert s.unit_state()["load"] == "hanging"
    assert {c.id: c for c in s.plan().checks()}["rotate_released"].needs[:1] == ("secure_load",)
    # without a gravity load nothing waits
    t = Session(model)
    t.set_nameplate("gravity_load", "no")
    t.add_complaint("will_not_release")
    assert "secure_load" not in {c.id: c for c in t.plan().checks()}["rotate_released"].needs


def test_the_load_danger_is_a_reminder_right_after_the_load_was_supported():
    model = load_model("spring-applied-brake")
    s = Session(model)
    s.set_nameplate("gravity_load", "yes")
    s.add_complaint("will_not_release")
    assert "load_falls" in [c.id for c in s.pending_cautions("secure_load")]
    for c in s.pending_cautions("secure_load"):
        s.acknowledge(c.id, "secure_load")
    s.answer("secure_load", "done")
    pending = [c.id for c in s.pending_cautions("rotate_released")]
    assert "load_falls" not in pending  # supported since: no second acknowledgement
    assert "load_falls" in [c.id for c in s.reminders("rotate_released")]
    # the acknowledgement lapses once the load support is removed (a repair puts it back)
    s.repair("readjust_worn_brake", False)
    assert "load_falls" in [c.id for c in s.pending_cautions("rotate_released")]


def test_the_load_support_card_says_how_many_steps_wait_for_it():
    model = load_model("spring-applied-brake")
    s = Session(model)
    s.set_nameplate("gravity_load", "yes")
    s.add_complaint("will_not_release")
    waiting = s.waiting_for("secure_load")
    assert "rotate_released" in waiting and "replace_friction_disc" in waiting
    assert all(("secure_load" in {c.id: c for c in s.plan().checks()}[w].needs)
               for w in waiting if w in model.checks)


# --- a new person acknowledges afresh ---------------------------------------------------------


def _phone_session_with_acks():
    """A phone session on the spring-applied pack whose agent acknowledged a card's cautions."""
    model = load_model("spring-applied-brake")
    s = Session(model, mode="phone")
    for pid in list(s.open_parameters()):
        default = model.parameters[pid].default
        s.set_nameplate(pid, "yes" if pid == "gravity_load" else
                        "unknown" if default is None else str(default))
    s.add_complaint("will_not_release")
    card = next(c for c in model.checks.values()
                if c.phone_ok and s.pending_cautions(c.id))
    for caution in s.pending_cautions(card.id):
        s.acknowledge(caution.id, card.id)
    assert not s.pending_cautions(card.id)  # the agent's acknowledgement stands for them
    return s, card


def test_the_site_visit_asks_every_caution_again():
    s, card = _phone_session_with_acks()
    s.end("visit")
    s.reopen_for_visit("R. Tester")
    # the technician at the site never read what the help-desk agent acknowledged
    assert s.pending_cautions(card.id)
    assert not s.reminders(card.id)


def test_a_hand_off_to_another_person_asks_every_caution_again():
    from diagnose.events import HandedOver
    from diagnose.session import apply

    s, card = _phone_session_with_acks()
    before = s.evidence
    assert before.acks
    after = apply(before, HandedOver(taker="R. Tester", giver="Desk A"))
    assert after.acks == () and after.steps == before.steps  # only the acknowledgements go
