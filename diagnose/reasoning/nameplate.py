"""What the nameplate says about this unit: which causes, checks, repairs and questions apply.

A pack conditions an entity on the nameplate with ``only_if`` (parameter ->
value, or a list of values). The same rule serves causes, events, checks,
repairs and nameplate questions:

* the entity applies when every listed parameter has one of the listed values;
* a parameter not answered yet, or answered ``unknown``, never rules it out
  (the safe reading: a cause stays in until the nameplate excludes it);
* the pack's default counts as the answer until one is given, as it does for
  the evaluators.

A cause whose ``only_if`` does not match, or that sits only under events whose
``only_if`` do not match, is *excluded*: it leaves the ranking (its prior is
taken as 0). A nameplate question is *needed* while something that still
applies uses it (a measurement input ``$param``, an ``only_if``); a question
that nothing uses at all (an identity question) is always asked.

>>> from diagnose.reasoning.synthetic import tiny_model
>>> from diagnose.reasoning.evidence import Evidence
>>> m = tiny_model()
>>> matches(m, Evidence(nameplate={"gravity_load": "no"}), {"gravity_load": ("yes",)})
False
>>> matches(m, Evidence(nameplate={"gravity_load": "unknown"}), {"gravity_load": ("yes",)})
True
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from diagnose.kb.model import Model
from diagnose.reasoning.evidence import Evidence


def squash(value: Any) -> str:
    """A value as compared: "yes"/"no" for booleans, lower case, no spaces or hyphens."""
    if isinstance(value, bool):
        return "yes" if value else "no"
    return str(value).strip().lower().replace("-", "_").replace(" ", "_")


def nameplate_value(model: Model, evidence: Evidence, param: str,
                    _seen: frozenset[str] = frozenset()) -> str | None:
    """The nameplate value in use (the answer, else the pack default); None when unknown.

    A parameter that does not apply to this unit (its own ``only_if`` does not
    match, e.g. AC volts on a converter supply) has no value.
    """
    value = evidence.nameplate.get(param)
    p = model.parameters.get(param)
    if value is None:
        value = p.default if p is not None else None
        if p is not None and p.only_if and param not in _seen and not matches(
                model, evidence, p.only_if, _seen | {param}):
            return None
    if value is None or squash(value) == "unknown":
        return None
    return str(value)


def _wanted(value: Any) -> tuple[str, ...]:
    if isinstance(value, (tuple, list, frozenset, set)):
        return tuple(str(v) for v in value)
    return (str(value),)


def matches(model: Model, evidence: Evidence, only_if: Mapping[str, Any] | None,
            _seen: frozenset[str] = frozenset()) -> bool:
    """Whether the nameplate allows something conditioned by ``only_if`` (unknown allows)."""
    for param, wanted in (only_if or {}).items():
        if param in _seen:  # a circle of parameters: the value cannot rule anything out
            continue
        have = nameplate_value(model, evidence, param, _seen)
        if have is not None and squash(have) not in {squash(w) for w in _wanted(wanted)}:
            return False
    return True


def only_if_matches(model: Model, evidence: Evidence, item: Any) -> bool:
    """Whether the nameplate allows ``item`` (a check, repair, cause, event or parameter).

    A check a device pack hides (``hide``) is allowed for no unit.
    """
    if getattr(item, "hidden", False):
        return False
    return matches(model, evidence, getattr(item, "only_if", None))


def excluded_causes(model: Model, evidence: Evidence) -> frozenset[str]:
    """The causes the nameplate rules out: their own ``only_if``, or every event above them.

    A cause is kept while some path from it to a complaint passes only events
    that the nameplate allows.
    """
    if not _conditioned(model):
        return frozenset()
    allowed_events = {e for e, g in model.events.items() if matches(model, evidence, g.only_if)}
    parents: dict[str, list[str]] = {}
    for gate in list(model.events.values()) + [c.gate for c in model.complaints.values()]:
        for x in gate.inputs:
            parents.setdefault(x, []).append(gate.id)
    memo: dict[str, bool] = {}

    def reaches(node: str, trail: frozenset[str]) -> bool:
        """True when ``node`` reaches a complaint through allowed events only."""
        if node in model.complaints:
            return True
        if node in memo:
            return memo[node]
        ok = False
        for up in parents.get(node, ()):
            if up in trail:
                continue
            if up in model.events and up not in allowed_events:
                continue
            if reaches(up, trail | {up}):
                ok = True
                break
        memo[node] = ok
        return ok

    out = set()
    for cid, cause in model.causes.items():
        if not matches(model, evidence, cause.only_if) or not reaches(cid, frozenset({cid})):
            out.add(cid)
    return frozenset(out)


def _conditioned(model: Model) -> bool:
    """Whether any cause or event of ``model`` depends on the nameplate."""
    return any(c.only_if for c in model.causes.values()) or any(
        e.only_if for e in model.events.values())


def parameter_uses(model: Model, param: str) -> tuple[Any, ...]:
    """The checks, repairs, causes, events and parameters that use ``param``."""
    out: list[Any] = []
    for chk in model.checks.values():
        m = chk.measurement
        uses_input = m is not None and any(
            isinstance(v, str) and v == f"${param}" for v in m.inputs.values())
        if uses_input or param in chk.only_if:
            out.append(chk)
    groups: tuple[Any, ...] = (model.repairs.values(), model.causes.values(),
                               model.events.values(), model.parameters.values())
    for group in groups:
        out += [x for x in group if param in getattr(x, "only_if", {}) and x.id != param]
    return tuple(out)


def parameter_needed(model: Model, evidence: Evidence, param: str) -> bool:
    """Whether the nameplate question ``param`` is worth asking now.

    False when its own ``only_if`` does not match, or when everything that
    uses it no longer applies (no AC volts after "converter"). A parameter that
    nothing uses is always asked (it is for the log).
    """
    p = model.parameters.get(param)
    if p is None:
        return False
    if not matches(model, evidence, p.only_if):
        return False
    uses = parameter_uses(model, param)
    if not uses:
        return True
    # whether the answer can still matter: judge its uses with this value open
    evidence = evidence.with_nameplate(param, "unknown")
    excluded = excluded_causes(model, evidence)
    for x in uses:
        if x.id in model.causes and x.id in excluded:
            continue
        if matches(model, evidence, getattr(x, "only_if", None)):
            if x.id in model.checks and not _observes_any(x, excluded):
                continue
            return True
    return False


def _observes_any(check: Any, excluded: frozenset[str]) -> bool:
    """A check still matters when it observes a cause that is not excluded (or is a step)."""
    if check.preparation or not check.effects:
        return True
    return any(c not in excluded for c in check.effects)
