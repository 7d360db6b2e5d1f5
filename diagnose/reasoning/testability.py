"""Testability of a complaint: which causes the checks detect, isolate or confuse.

The dependency matrix (IEEE Std 1522) here is the table of checks against
causes: the row of a cause on a check is the check's outcome distribution when
that cause is present (``Check.effects``, or ``normal`` for a cause the check
does not list). Two rows are told apart when their total-variation distance

    TV(p, r) = 1/2 * sum over outcomes of |p(o) - r(o)|

is more than a threshold (``THRESHOLD``, 0.1 unless asked otherwise).

* A cause is **detected** in a mode when some check available in that mode
  has a row for it that is told apart from ``normal``.
* Two causes of a complaint are **indistinguishable** when no available
  check tells their rows apart. The **ambiguity groups** are the classes of
  causes linked by chains of indistinguishable pairs (groups of two or more).
* A cause is **isolated** when it is detected and in no ambiguity group.
* The **closest pair** of a complaint is the pair of causes whose best
  check separates them least (its TV distance is the *separation*): the
  next ambiguity group if the threshold were raised.
* A check is **idle** (it never changes any ranking) when every row it lists
  is within the threshold of its ``normal``.

Checks available in the ``site`` mode: all of them; in the ``phone`` mode:
those with ``where: phone``. Shares are weighted by the causes' priors.

References:
    IEEE Std 1522-2004, IEEE Trial-Use Standard for Testability and
    Diagnosability Characteristics and Metrics (fault detection, fault
    isolation, ambiguity groups).
    W. R. Simpson, J. W. Sheppard, *System Test and Diagnosis*, Kluwer,
    1994 (dependency models, ambiguity groups).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

from diagnose.errors import InputError, Problem
from diagnose.kb.model import Check, Model

MODES = ("site", "phone")
THRESHOLD = 0.1  # total variation between two rows that counts as "told apart"


def total_variation(p: Mapping[str, float], r: Mapping[str, float]) -> float:
    """Total-variation distance between two outcome distributions.

    >>> total_variation({"click": 0.97, "silent": 0.03}, {"click": 0.03, "silent": 0.97})
    0.94
    """
    keys = set(p) | set(r)
    return round(0.5 * sum(abs(float(p.get(k, 0.0)) - float(r.get(k, 0.0))) for k in keys), 12)


def available_checks(model: Model, mode: str = "site") -> tuple[Check, ...]:
    """The checks that can be done in ``mode``: all on site, ``where: phone`` by phone.

    Raises:
        InputError: ``mode`` is not "site" or "phone".
    """
    if mode not in MODES:
        raise InputError("mode", f"unknown mode {mode!r}; use site or phone")
    return tuple(c for c in model.checks.values() if mode == "site" or c.phone_ok)


def row(check: Check, cause: str) -> Mapping[str, float]:
    """The outcome distribution of ``check`` when ``cause`` is present."""
    return check.effects.get(cause, check.normal)


def detection_strength(check: Check, cause: str) -> float:
    """TV distance of the cause's row from ``normal``: how strongly the check sees the cause."""
    return total_variation(row(check, cause), check.normal)


@dataclass(frozen=True)
class AmbiguityGroup:
    """Causes of one complaint that no check available in ``mode`` can tell apart.

    ``action`` is "merge" (one repair fixes them all), "add-phone-check"
    (a site check splits them: ``split_on_site_by``) or "add-check".
    """

    complaint: str
    mode: str
    causes: tuple[str, ...]
    action: str
    hint: str
    split_on_site_by: tuple[str, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        return {
            "complaint": self.complaint,
            "mode": self.mode,
            "causes": list(self.causes),
            "action": self.action,
            "hint": self.hint,
            "split_on_site_by": list(self.split_on_site_by),
        }


@dataclass(frozen=True)
class Testability:
    """Detection and isolation of one complaint's causes in one mode."""

    complaint: str
    mode: str
    threshold: float
    causes: tuple[str, ...]
    detected: tuple[str, ...]
    isolated: tuple[str, ...]
    detection: float  # prior-weighted share of causes detected
    isolation: float  # prior-weighted share of causes isolated
    groups: tuple[AmbiguityGroup, ...] = ()
    checks: tuple[str, ...] = field(default=())  # available checks that see some cause
    closest: tuple[str, str, float] | None = None  # the pair hardest to tell apart, its best TV

    @property
    def undetected(self) -> tuple[str, ...]:
        return tuple(c for c in self.causes if c not in self.detected)

    def to_dict(self) -> dict[str, Any]:
        return {
            "mode": self.mode,
            "threshold": self.threshold,
            "detection": self.detection,
            "isolation": self.isolation,
            "detected": list(self.detected),
            "undetected": list(self.undetected),
            "isolated": list(self.isolated),
            "ambiguity_groups": [g.to_dict() for g in self.groups],
            "checks": list(self.checks),
            "closest_pair": None if self.closest is None else {
                "causes": list(self.closest[:2]), "separation": self.closest[2]},
        }


def testability(
    model: Model, complaint: str, *, mode: str = "site", threshold: float = THRESHOLD
) -> Testability:
    """Detection, isolation and ambiguity groups of ``complaint`` in ``mode``.

    Raises:
        InputError: unknown complaint or mode.
    """
    if complaint not in model.complaints:
        raise InputError("complaint", f"unknown complaint {complaint!r}")
    checks = available_checks(model, mode)
    causes = model.tree_causes(complaint)
    detected = tuple(c for c in causes if _detected(checks, c, threshold))
    sep = _separations(checks, causes)
    classes = _classes(causes, sep, threshold)
    closest = min(sep.items(), key=lambda kv: kv[1], default=None)
    in_group = {c for cls in classes if len(cls) > 1 for c in cls}
    isolated = tuple(c for c in detected if c not in in_group)
    groups = tuple(
        _group(model, complaint, mode, cls, detected, threshold) for cls in classes if len(cls) > 1
    )
    seeing = tuple(
        k.id for k in checks if any(detection_strength(k, c) > threshold for c in causes)
    )
    return Testability(
        complaint=complaint,
        mode=mode,
        threshold=threshold,
        causes=causes,
        detected=detected,
        isolated=isolated,
        detection=weighted_share(model, causes, detected),
        isolation=weighted_share(model, causes, isolated),
        groups=groups,
        checks=seeing,
        closest=(*closest[0], closest[1]) if closest else None,
    )


def dependency_matrix(
    model: Model, complaint: str, *, mode: str = "site"
) -> dict[str, dict[str, float]]:
    """Check id -> cause id -> TV distance of the cause's row from ``normal``.

    Only the checks available in ``mode`` that list some cause of the complaint.
    """
    causes = model.tree_causes(complaint)
    return {
        k.id: {c: detection_strength(k, c) for c in causes}
        for k in available_checks(model, mode)
        if any(c in k.effects for c in causes)
    }


def undetected_causes(
    model: Model, *, mode: str = "site", threshold: float = THRESHOLD
) -> tuple[str, ...]:
    """The causes of the pack that no check available in ``mode`` detects."""
    checks = available_checks(model, mode)
    return tuple(c for c in model.causes if not _detected(checks, c, threshold))


def idle_checks(model: Model, *, threshold: float = THRESHOLD) -> tuple[str, ...]:
    """Checks that list causes but whose every row is within ``threshold`` of ``normal``.

    Such a check never changes any ranking. Preparation steps and checks that
    list no cause at all are not reported; lint speaks of the latter.
    """
    return tuple(
        k.id
        for k in model.checks.values()
        if k.effects and not getattr(k, "preparation", False)
        and all(detection_strength(k, c) <= threshold for c in k.effects)
    )


def analysis_problems(model: Model, *, threshold: float = THRESHOLD) -> list[Problem]:
    """Lint warnings from the analysis, site mode: ambiguity groups, undetected causes,
    idle checks. Each points at the source of the entity concerned.

    Codes: "undetected-cause", "ambiguity-group" (at the first cause of the
    group, once for every complaint that has it), "idle-check".
    """
    problems = []
    for cid in undetected_causes(model, threshold=threshold):
        cause = model.causes[cid]
        problems.append(Problem(
            "warning",
            f"cause {cid} is detected by no check: no outcome likelihood differs from the "
            f"check's normal by more than {threshold:g} (total variation)",
            cause.source, "undetected-cause"))
    seen: dict[tuple[str, ...], list[str]] = {}
    hints: dict[tuple[str, ...], str] = {}
    for comp in model.complaints:
        for group in testability(model, comp, threshold=threshold).groups:
            seen.setdefault(group.causes, []).append(comp)
            hints.setdefault(group.causes, group.hint)
    for causes, comps in seen.items():
        problems.append(Problem(
            "warning",
            f"no check tells {', '.join(causes)} apart (ambiguity group of "
            f"{', '.join(comps)}): {hints[causes]}",
            model.causes[causes[0]].source, "ambiguity-group"))
    for kid in idle_checks(model, threshold=threshold):
        problems.append(Problem(
            "warning",
            f"check {kid} never changes any ranking: every effects row is within "
            f"{threshold:g} of normal (total variation)",
            model.checks[kid].source, "idle-check"))
    return problems


def weighted_share(model: Model, causes: Iterable[str], chosen: Iterable[str]) -> float:
    """The prior-weighted share of ``causes`` that are in ``chosen`` (1.0 for no causes)."""
    causes = tuple(causes)
    picked = set(chosen)
    total = sum(model.causes[c].prior for c in causes)
    if total <= 0:
        return 1.0
    return sum(model.causes[c].prior for c in causes if c in picked) / total


def _detected(checks: Iterable[Check], cause: str, threshold: float) -> bool:
    return any(cause in k.effects and detection_strength(k, cause) > threshold for k in checks)


def _apart(checks: Iterable[Check], a: str, b: str, threshold: float) -> tuple[str, ...]:
    """The checks whose rows for ``a`` and ``b`` are told apart."""
    return tuple(
        k.id
        for k in checks
        if (a in k.effects or b in k.effects)
        and total_variation(row(k, a), row(k, b)) > threshold
    )


def _separations(
    checks: tuple[Check, ...], causes: tuple[str, ...]
) -> dict[tuple[str, str], float]:
    """(a, b) -> the largest TV distance between their rows over ``checks``, a before b."""
    return {
        (a, b): max((total_variation(row(k, a), row(k, b)) for k in checks
                     if a in k.effects or b in k.effects), default=0.0)
        for i, a in enumerate(causes) for b in causes[i + 1:]
    }


def _classes(
    causes: tuple[str, ...], sep: Mapping[tuple[str, str], float], threshold: float
) -> list[tuple[str, ...]]:
    """Causes linked by chains of indistinguishable pairs, in listing order."""
    parent = {c: c for c in causes}

    def find(c: str) -> str:
        while parent[c] != c:
            parent[c] = parent[parent[c]]
            c = parent[c]
        return c

    for (a, b), distance in sep.items():
        if distance <= threshold and find(a) != find(b):
            parent[find(b)] = find(a)
    out: dict[str, list[str]] = {}
    for c in causes:
        out.setdefault(find(c), []).append(c)
    return [tuple(v) for v in out.values()]


def _group(
    model: Model,
    complaint: str,
    mode: str,
    causes: tuple[str, ...],
    detected: tuple[str, ...],
    threshold: float,
) -> AmbiguityGroup:
    names = ", ".join(causes)
    common = set(model.repairs_for(causes[0]))
    for c in causes[1:]:
        common &= set(model.repairs_for(c))
    split: tuple[str, ...] = ()
    if mode == "phone":
        site = available_checks(model, "site")
        split = tuple(dict.fromkeys(
            k for i, a in enumerate(causes) for b in causes[i + 1:]
            for k in _apart(site, a, b, threshold)
        ))
    if common:
        fix = ", ".join(r for r in model.repairs if r in common)
        action = "merge"
        hint = (f"one repair ({fix}) fixes {names}: merge them into one cause, "
                "or add a check that tells them apart")
    elif split:
        action = "add-phone-check"
        hint = (f"told apart on site by {', '.join(split)}; add a phone question "
                f"that tells {names} apart, or leave it to the visit")
    else:
        action = "add-check"
        if not any(c in detected for c in causes):
            hint = f"no check detects {names}: add a check that observes them"
        else:
            hint = (f"add a check whose outcomes differ between {names} "
                    "(they need different repairs)")
    return AmbiguityGroup(complaint, mode, causes, action, hint, split)
