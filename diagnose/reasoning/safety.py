"""Safety by construction: the hazards of a step, the cautions they require, who may do it.

A pack declares hazard kinds (energises the coil, releases the brake, works
near a suspended load...). Checks and repairs declare their hazards. From
them, for this unit and this session:

* :func:`card_cautions`: the cautions a card shows, its own and those its
  hazards require here (a suspended load only where the nameplate says the
  axis carries one or does not know; the shorted-coil DANGER only after a
  reading found the coil shorted);
* :func:`caller_safe`: whether a caller may be guided through it: every
  hazard of the step must be on the pack's caller-safe list for this unit,
  and a condition on the nameplate counts only when its value is known;
* :func:`withheld_until`: the state the unit must be in first (the load
  supported before anything releases the brake on a gravity-loaded axis);
* :func:`lapsed_since`: whether an acknowledgement has lapsed, because the
  unit moved since into a state that renews cautions (power restored, load
  support removed). A DANGER or WARNING is acknowledged once per hazard and
  state: while nothing lapses, the same caution on a later card is a
  one-line reminder.

An unknown nameplate value never makes a step safer: a hazard whose
``only_if`` cannot be judged applies, and a caller-safe condition that cannot
be judged does not hold.

References:
    ANSI Z535.6 and ISO 3864-2 (signal words DANGER, WARNING, CAUTION, NOTICE
    and placing the safety message before the hazardous step; from memory).
    ISO 12100:2010, 6.4 (information for use; from memory).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from diagnose.kb.model import Hazard, Model
from diagnose.reasoning.evidence import Evidence
from diagnose.reasoning.nameplate import matches, nameplate_value, squash
from diagnose.reasoning.unitstate import initial_state, unit_state


def applicable_hazards(model: Model, evidence: Evidence, item: Any) -> tuple[Hazard, ...]:
    """The hazards of ``item`` that exist on this unit (unknown nameplate values: they do)."""
    out = []
    for h in getattr(item, "hazards", ()):
        hz = model.hazards.get(h)
        if hz is not None and matches(model, evidence, hz.only_if):
            out.append(hz)
    return tuple(out)


def _found(model: Model, evidence: Evidence, after: Mapping[str, tuple[str, ...]],
           after_verdict: Mapping[str, tuple[str, ...]]) -> bool:
    """True when a finding has one of the outcomes (as its main weight) that ``after`` names
    for its check, or ``after_verdict`` for its check's evaluator."""
    for check, weights in evidence.findings.items():
        if not weights:
            continue
        main = max(weights, key=weights.__getitem__)
        if main in after.get(check, ()):
            return True
        chk = model.checks.get(check)
        m = chk.measurement if chk is not None else None
        if m is not None and main in after_verdict.get(m.evaluator, ()):
            return True
    return False


def _applies(model: Model, evidence: Evidence, hz: Hazard, hc: Any) -> bool:
    """Whether hazard ``hz`` requires caution ``hc`` on this unit now."""
    if not matches(model, evidence, hz.only_if) or not matches(model, evidence, hc.only_if):
        return False
    if hc.after or hc.after_verdict:
        return _found(model, evidence, hc.after, hc.after_verdict)
    return True


def card_cautions(model: Model, evidence: Evidence, item: Any) -> tuple[str, ...]:
    """The caution ids a card shows now.

    A caution the card lists that one of its hazards requires is shown when
    that requirement holds here (a suspended load's DANGER only where the
    axis carries one, or the nameplate does not say); a caution no hazard of
    the card requires is always shown; a caution a hazard requires only after
    an answer (the shorted coil) is added once that answer was given.
    """
    reqs: dict[str, list[tuple[Hazard, Any]]] = {}
    for h in getattr(item, "hazards", ()):
        hz = model.hazards.get(h)
        for hc in (hz.cautions if hz is not None else ()):
            reqs.setdefault(hc.caution, []).append((hz, hc))
    out = []
    for c in item.cautions:
        owners = reqs.get(c)
        if owners and not any(_applies(model, evidence, hz, hc) for hz, hc in owners):
            continue
        out.append(c)
    for c, owners in reqs.items():
        if c not in out and c not in item.cautions and any(
                _applies(model, evidence, hz, hc) for hz, hc in owners):
            out.append(c)
    return tuple(c for c in out if c in model.cautions)


def _known_match(model: Model, evidence: Evidence, only_if: Mapping[str, Any]) -> bool:
    """Like ``matches``, but a value that is not known does not match (the cautious reading)."""
    for param, wanted in only_if.items():
        have = nameplate_value(model, evidence, param)
        values = wanted if isinstance(wanted, (tuple, list)) else (wanted,)
        if have is None or squash(have) not in {squash(v) for v in values}:
            return False
    return True


def caller_safe(model: Model, evidence: Evidence, item: Any) -> bool:
    """Whether a caller may be guided through ``item``: each of its hazards is caller-safe here.

    A step with no hazards is safe as far as the hazards go (``where: phone``
    still decides whether it is worded for a caller).
    """
    for hz in applicable_hazards(model, evidence, item):
        safe = hz.caller_safe
        if safe is True:
            continue
        if isinstance(safe, Mapping) and safe and _known_match(model, evidence, safe):
            continue
        return False
    return True


def withheld_until(model: Model, evidence: Evidence, item: Any) -> dict[str, str]:
    """The state the unit must be in before ``item``.

    That is, its applicable hazards' ``withhold_until``.
    """
    out: dict[str, str] = {}
    for hz in applicable_hazards(model, evidence, item):
        out.update(hz.withhold_until)
    return out


def missing_state(model: Model, evidence: Evidence, item: Any) -> dict[str, str]:
    """The part of :func:`withheld_until` that the unit is not in now."""
    want = withheld_until(model, evidence, item)
    if not want:
        return {}
    now = unit_state(model, evidence)
    return {k: v for k, v in want.items() if now.get(k) != v}


def state_steps(model: Model, missing: Mapping[str, str]) -> tuple[str, ...]:
    """Preparation checks that leave the unit in the ``missing`` state (to do first)."""
    out = []
    for chk in model.checks.values():
        if chk.preparation and missing and all(chk.leaves.get(k) == v
                                               for k, v in missing.items()):
            out.append(chk.id)
    return tuple(out)


def renewals(model: Model, evidence: Evidence) -> tuple[tuple[int, str, str], ...]:
    """(step index, state, value) where the unit moved into a value that renews cautions."""
    renewing = {sid for sid, s in model.states.items() if s.renews}
    if not renewing:
        return ()
    out = []
    before = initial_state(model)
    for n, (kind, ident) in enumerate(evidence.steps):
        item = model.checks.get(ident) if kind == "check" else (
            model.repairs.get(ident) if kind == "repair" else None)
        during = {**before, **{k: v for k, v in getattr(item, "requires", {}).items()
                               if k in model.states}}
        after = unit_state(model, _prefix(evidence, n + 1))
        for a, b in ((before, during), (during, after)):  # into its state, then out of it
            for sid in sorted(renewing):
                value = b.get(sid)
                if value is not None and value != a.get(sid) and \
                        value in model.states[sid].renews:
                    out.append((n, sid, value))
        before = after
    return tuple(out)


def _prefix(evidence: Evidence, n: int) -> Evidence:
    from dataclasses import replace

    return replace(evidence, steps=evidence.steps[:n])


def lapsed_since(model: Model, evidence: Evidence, step: int, item: str | None = None,
                 renewed: tuple[tuple[int, str, str], ...] | None = None) -> bool:
    """Whether an acknowledgement given before step ``step``, for ``item``, has lapsed.

    It lapses when the unit moved since into a value that renews cautions
    (power restored, load support removed). The one move it covers is its own
    card's setup: a check that needs the power on moves the unit there with
    the acknowledgement given for it. A repair that puts the unit back, or a
    later step, does not.
    """
    marks = renewals(model, evidence) if renewed is None else renewed
    chk = model.checks.get(item) if item else None
    for n, var, value in marks:
        if n > step:
            return True
        if n == step and not (chk is not None and chk.requires.get(var) == value):
            return True
    return False
