"""Which checks and repairs can be proposed now, and what each costs with what must come first.

A check or a repair is offered unless (the reasons of :data:`CHECK_STATUS`
and :data:`REPAIR_STATUS`; where several hold, the one recorded last is said):

* its prerequisites (``needs``) cannot be done: one was skipped, or is
  site-only by phone (it is then "blocked"); prerequisites not yet done are
  proposed first, and their minutes count with the item's;
* it waits for a state of the unit (a hazard that needs the load supported):
  the preparation step that brings the state about comes first, or, with
  none, the item is "blocked" until the state is recorded;
* it is a preparation step, has one outcome, does not apply to this unit
  (``only_if`` against the nameplate), or needs a state no setup step can
  bring about in the present one (checks);
* by phone: it is not a ``where: phone`` item, or its hazards are not safe
  for a caller;
* it fixes no cause still possible (repairs);
* it was done, skipped or answered "unsure" already.

A check's minutes include the setup its state needs
(:mod:`diagnose.reasoning.unitstate`). Pure: no I/O.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from diagnose.kb.model import Check, Model
from diagnose.reasoning.evidence import Evidence
from diagnose.reasoning.nameplate import only_if_matches
from diagnose.reasoning.safety import caller_safe, missing_state, state_steps
from diagnose.reasoning.tables import Tables
from diagnose.reasoning.unitstate import setup_minutes, unit_state

__all__ = ["CHECK_STATUS", "EPS", "REPAIR_STATUS", "Standing", "check_base", "check_standing",
           "check_status", "mark_answered", "mark_repairs", "missing_prerequisites",
           "repair_base", "repair_standing", "standing_key"]

EPS = 1e-12  # a probability at or below this counts as "no longer possible"

#: Why a check cannot be proposed now, by code (0: it can; "blocked" says why in words).
CHECK_STATUS = ("", "done", "unsure", "skipped", "site only", "not for this unit",
                "preparation", "one outcome", "blocked", "not in this state",
                "not for a caller")
#: Why a repair cannot be proposed now, by code (0: it can; "blocked" says why in words).
REPAIR_STATUS = ("", "done", "site only", "blocked", "fixes nothing still possible",
                 "skipped", "not for this unit", "not for a caller")


def _satisfied(model: Model, evidence: Evidence, cid: str) -> bool:
    """A prerequisite is met when done, or when it does not apply to this unit."""
    if cid in evidence.done:
        return True
    check = model.checks.get(cid)
    return check is not None and not only_if_matches(model, evidence, check)


def missing_prerequisites(model: Model, evidence: Evidence, needs: tuple[str, ...],
                          ) -> tuple[tuple[str, ...], str]:
    """Unmet prerequisites of an item, deepest first, and why they cannot be done ("" if they can).

    A prerequisite blocks when it was skipped, or is site-only in phone mode.
    """
    out: list[str] = []
    seen: set[str] = set()
    blocked = ""

    def visit(cid: str) -> None:
        nonlocal blocked
        if cid in seen or _satisfied(model, evidence, cid):
            return
        seen.add(cid)
        check = model.checks.get(cid)
        if check is None:
            blocked = blocked or f"needs unknown check {cid}"
            return
        if cid in evidence.skipped:
            blocked = blocked or f"needs {cid} (skipped)"
        elif evidence.mode == "phone" and not check.phone_ok:
            blocked = blocked or f"needs {cid} (site only)"
        for sub in check.needs:
            visit(sub)
        out.append(cid)

    for cid in needs:
        visit(cid)
    return tuple(out), blocked


def check_status(model: Model, evidence: Evidence, check: Check) -> str:
    """Why ``check`` cannot be proposed now, or "" when it can."""
    if check.id in evidence.findings:
        return "done"
    if check.id in evidence.unsure:
        return "unsure"
    if check.id in evidence.skipped:
        return "skipped"
    if evidence.mode == "phone" and not check.phone_ok:
        return "site only"
    if not only_if_matches(model, evidence, check):
        return "not for this unit"
    if check.preparation:
        return "preparation"
    if len(check.outcomes) < 2:
        return "one outcome"
    _, blocked = missing_prerequisites(model, evidence, check.needs)
    if not blocked and setup_minutes(model, unit_state(model, evidence), check.requires) \
            == float("inf"):
        return "not in this state"
    return blocked



@dataclass(frozen=True)
class Standing:
    """The checks or the repairs as a plan weighs them; the arrays and dicts fill in place.

    ``code`` says why each cannot be proposed (an index into
    ``CHECK_STATUS`` or ``REPAIR_STATUS``; 0: it can), ``minutes`` include
    unmet prerequisites and setup, ``needs`` the unmet prerequisites in the
    order to do them, ``blocked`` why an item got ``blocked_code``. ``items``
    is ``model.checks`` or ``model.repairs``, keyed by ``ids``.
    """

    ids: tuple[str, ...]
    items: Mapping[str, Any]
    minutes: np.ndarray
    code: np.ndarray
    blocked_code: int
    needs: dict[int, tuple[str, ...]] = field(default_factory=dict)
    blocked: dict[int, str] = field(default_factory=dict)


def check_standing(model: Model, evidence: Evidence, tables: Tables) -> Standing:
    """Why each check cannot be proposed (codes of ``CHECK_STATUS``), minutes with setup."""
    st = check_base(model, evidence, tables)
    return replace(st, code=mark_answered(st.code, evidence, tables))


def check_base(model: Model, evidence: Evidence, tables: Tables) -> Standing:
    """:func:`check_standing` before the answers are marked (done, unsure, skipped).

    It depends on the evidence only through :func:`standing_key`.
    """
    st = Standing(tables.check_ids, model.checks, tables.check_minutes.copy(),
                   np.zeros(len(tables.check_ids), dtype=np.int8), 8)
    code, cmin = st.code, st.minutes
    _prerequisites(model, evidence, tables.checks_needing, tables.check_needs, st)
    code[tables.check_one_outcome] = 7
    code[tables.check_prep] = 6
    for i in tables.checks_only_if:
        if not only_if_matches(model, evidence, model.checks[tables.check_ids[i]]):
            code[i] = 5
    state = unit_state(model, evidence)
    for i in tables.checks_requiring:
        extra = setup_minutes(model, state, model.checks[tables.check_ids[i]].requires)
        if extra == float("inf"):
            code[i] = 9
        elif extra > 0:
            cmin[i] += extra
    _withhold(model, evidence, tables.checks_withheld, st)
    _by_phone(model, evidence, st, tables.check_phone, tables.checks_hazardous, (4, 10))
    return st


def mark_answered(code: np.ndarray, evidence: Evidence, tables: Tables) -> np.ndarray:
    """A copy of the check codes with those answered, unsure or skipped marked so."""
    code = code.copy()
    pos = tables.check_pos
    for ids, c in ((evidence.skipped, 3), (evidence.unsure, 2), (evidence.findings, 1)):
        for cid in ids:
            if cid in pos:
                code[pos[cid]] = c
    return code


def standing_key(model: Model, evidence: Evidence, prerequisites: frozenset[str],
                 state: Mapping[str, str] | None = None) -> tuple:
    """What :func:`check_base` and :func:`repair_base` depend on in ``evidence``.

    The mode, the nameplate, the state of the unit (``state``, when known
    already), and which of ``prerequisites`` (every check some item
    ``needs``) are done or skipped.
    """
    state = unit_state(model, evidence) if state is None else state
    done = prerequisites.intersection(evidence.findings) | (prerequisites & evidence.unsure)
    return (evidence.mode, tuple(sorted(evidence.nameplate.items())), tuple(state.items()),
            done, prerequisites & evidence.skipped)


def repair_standing(model: Model, evidence: Evidence, tables: Tables, p: np.ndarray,
                     ) -> tuple[Standing, np.ndarray]:
    """The repairs (codes of ``REPAIR_STATUS``, minutes with prerequisites) and P(fix)."""
    st = repair_base(model, evidence, tables)
    p_fix = np.bincount(tables.fix_repair, weights=p[tables.fix_hyp],
                        minlength=len(tables.repair_ids))
    return replace(st, code=mark_repairs(st.code, evidence, tables, p_fix)), p_fix


def repair_base(model: Model, evidence: Evidence, tables: Tables) -> Standing:
    """:func:`repair_standing` before what the posterior and the repairs done decide.

    It depends on the evidence only through :func:`standing_key`.
    """
    R = len(tables.repair_ids)
    st = Standing(tables.repair_ids, model.repairs, tables.minutes.copy(),
                   np.zeros(R, dtype=np.int8), 3)
    rcode = st.code
    _prerequisites(model, evidence, tables.repairs_needing, tables.repair_needs, st)
    _withhold(model, evidence, tables.repairs_withheld, st)
    for i in tables.repairs_only_if:
        if not only_if_matches(model, evidence, model.repairs[tables.repair_ids[i]]):
            rcode[i] = 6
    _by_phone(model, evidence, st, tables.repair_phone, tables.repairs_hazardous, (2, 7))
    return st


def mark_repairs(code: np.ndarray, evidence: Evidence, tables: Tables, p_fix: np.ndarray,
                 ) -> np.ndarray:
    """A copy of the repair codes with those that fix nothing still possible, skipped or done.

    "Fixes nothing still possible" goes only to a repair nothing else holds back.
    """
    code = code.copy()
    code[(p_fix <= EPS) & (code == 0)] = 4
    for rid in evidence.repairs_skipped:
        if rid in tables.repair_index:
            code[tables.repair_index[rid]] = 5
    for rid, _ in evidence.repairs:  # the repairs done
        code[tables.repair_index[rid]] = 1
    return code


def _by_phone(model: Model, evidence: Evidence, st: Standing, by_phone: np.ndarray,
              hazardous: tuple[int, ...], codes: tuple[int, int]) -> None:
    """In phone mode: items done on site only get ``codes[0]``; items whose hazards are not
    caller-safe for this unit get ``codes[1]`` (see :func:`diagnose.reasoning.safety.caller_safe`).
    """
    if evidence.mode != "phone":
        return
    site_only, unsafe = codes
    st.code[~by_phone] = site_only
    for i in hazardous:
        if st.code[i] != site_only and not caller_safe(model, evidence, st.items[st.ids[i]]):
            st.code[i] = unsafe


def _withhold(model: Model, evidence: Evidence, which: tuple[int, ...], st: Standing) -> None:
    """Items whose hazards wait for a state (the load supported): that step comes first.

    The preparation step that leaves the unit in that state is proposed first,
    even when it was done before and the state has changed since; with none,
    the item is blocked until the state is recorded (``state`` in the shell).
    """
    needs, blocked = st.needs, st.blocked
    for i in which:
        missing = missing_state(model, evidence, st.items[st.ids[i]])
        if not missing:
            continue
        steps = state_steps(model, missing)
        if not steps:
            blocked[i] = "waiting for " + ", ".join(f"{k}: {v}" for k, v in missing.items())
            st.code[i] = st.blocked_code
            continue
        first = steps[0]
        if evidence.mode == "phone" and not model.checks[first].phone_ok:
            blocked[i] = f"needs {first} (site only)"
            st.code[i] = st.blocked_code
            continue
        if first not in needs.get(i, ()):
            needs[i] = (first,) + needs.get(i, ())
            st.minutes[i] += model.checks[first].minutes


def _prerequisites(model: Model, evidence: Evidence, which: tuple[int, ...],
                   needs_of: tuple[tuple[str, ...], ...], st: Standing) -> None:
    """Unmet prerequisites of items ``which``: adds their minutes, marks the blocked ones."""
    for i in which:
        needs, blocked = missing_prerequisites(model, evidence, needs_of[i])
        if needs:
            st.needs[i] = needs
            st.minutes[i] += sum(model.checks[n].minutes for n in needs)
        if blocked:
            st.blocked[i] = blocked
            st.code[i] = st.blocked_code
