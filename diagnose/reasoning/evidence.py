"""What is known about one unit so far: the evidence the reasoner works on.

An :class:`Evidence` is a plain, immutable value. The session builds it as a
fold over its events (``diagnose.session``); the simulator and the knowledge
tests build it step by step with the ``with_*`` methods, which return a new
value and never change the old one.

A *finding* is the answer to a check as outcome weights: a hard answer is
``{"silent": 1.0}``; a reading near a band edge is soft evidence such as
``{"ok": 0.6, "low": 0.4}`` (the weights sum to 1). "Unsure" is recorded but
carries no evidence.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

MODES = ("site", "phone")


@dataclass(frozen=True)
class Evidence:
    """The state of one diagnosis.

    Attributes:
        complaints: complaint ids as reported, in order.
        findings: check id -> outcome weights (summing to 1).
        unsure: checks answered "unsure" (done, but no evidence).
        skipped: checks that cannot be done now (not offered again).
        repairs: (repair id, cured) in the order done.
        repairs_skipped: repairs that cannot be done now (no part on the van, no
            access): not proposed again, until undone or done after all.
        nameplate: parameter id -> value as text ("24 V", "yes", "unknown").
        mode: "site" or "phone".
        acknowledged: caution ids acknowledged for any card (or, in older
            journals, for no card in particular).
        acknowledged_for: (check or repair id, caution id) pairs: the caution was
            acknowledged before the instructions of that card.
        notes: free-text notes, in order.
        identity: facts about the unit and the call (serial number, customer, ...).
        end: the closing record, or None while the diagnosis is open.
        steps: ("check" | "repair" | "state", id) in the order done: what the
            state of the unit follows (see :mod:`diagnose.reasoning.unitstate`);
            for "state" the id is ``"var=value"`` (the technician says so).
        acks: (caution, item, step) for each acknowledgement, ``step`` being
            the number of steps done when it was given (None in older journals).
        assumed: nameplate values taken from the pack's defaults, not read off
            the unit (a verdict that uses one says so).
        history: cause -> factor: a cause found on this very unit in a recent
            session (a recurrence); its prior odds are multiplied by the factor.
        pending_repair: a repair begun and not yet done or set aside (a session
            left during it takes it up again on resume).
    """

    complaints: tuple[str, ...] = ()
    findings: Mapping[str, Mapping[str, float]] = field(default_factory=dict)
    unsure: frozenset[str] = frozenset()
    skipped: frozenset[str] = frozenset()
    repairs: tuple[tuple[str, bool], ...] = ()
    repairs_skipped: frozenset[str] = frozenset()
    nameplate: Mapping[str, str] = field(default_factory=dict)
    mode: str = "site"
    acknowledged: frozenset[str] = frozenset()
    acknowledged_for: frozenset[tuple[str, str]] = frozenset()
    notes: tuple[str, ...] = ()
    identity: Mapping[str, str] = field(default_factory=dict)
    end: Mapping[str, object] | None = None
    steps: tuple[tuple[str, str], ...] = ()
    acks: tuple[tuple[str, str | None, int | None], ...] = ()
    assumed: frozenset[str] = frozenset()
    history: Mapping[str, float] = field(default_factory=dict)
    pending_repair: str | None = None

    # --- questions --------------------------------------------------------------------
    @property
    def done(self) -> frozenset[str]:
        """Checks answered or answered "unsure": not offered again, count as done for ``needs``."""
        return frozenset(self.findings) | self.unsure

    @property
    def repairs_done(self) -> frozenset[str]:
        return frozenset(r for r, _ in self.repairs)

    @property
    def cured(self) -> bool:
        """True when a repair cured the unit."""
        return any(c for _, c in self.repairs)

    # --- new values -------------------------------------------------------------------
    def _but(self, **changes: object) -> Evidence:
        """This value with ``changes``: ``dataclasses.replace`` without its cost per field
        (the planner and the simulator make one per answer; no field is derived)."""
        out = object.__new__(type(self))
        out.__dict__.update(self.__dict__, **changes)
        return out

    def with_complaint(self, complaint: str) -> Evidence:
        if complaint in self.complaints:
            return self
        return self._but(complaints=self.complaints + (complaint,))

    def with_finding(self, check: str, weights: Mapping[str, float]) -> Evidence:
        """The answer to ``check`` (a later answer replaces an earlier one)."""
        findings = dict(self.findings)
        findings[check] = dict(weights)
        return self._but(findings=findings, unsure=self.unsure - {check},
                       skipped=self.skipped - {check}, steps=self.steps + (("check", check),))

    def with_outcome(self, check: str, outcome: str) -> Evidence:
        return self.with_finding(check, {outcome: 1.0})

    def with_unsure(self, check: str) -> Evidence:
        findings = {k: v for k, v in self.findings.items() if k != check}
        return self._but(findings=findings, unsure=self.unsure | {check},
                       skipped=self.skipped - {check}, steps=self.steps + (("check", check),))

    def with_skip(self, check: str) -> Evidence:
        return self._but(skipped=self.skipped | {check})

    def with_repair(self, repair: str, cured: bool) -> Evidence:
        return self._but(repairs=self.repairs + ((repair, bool(cured)),),
                       repairs_skipped=self.repairs_skipped - {repair},
                       steps=self.steps + (("repair", repair),),
                       pending_repair=None if self.pending_repair == repair
                       else self.pending_repair)

    def with_state(self, var: str, value: str) -> Evidence:
        """The technician says the unit is now ``var = value`` (power restored, brake refitted)."""
        return self._but(steps=self.steps + (("state", f"{var}={value}"),))

    def with_skipped_repair(self, repair: str) -> Evidence:
        """``repair`` cannot be done now: not proposed again."""
        return self._but(repairs_skipped=self.repairs_skipped | {repair},
                       pending_repair=None if self.pending_repair == repair
                       else self.pending_repair)

    def with_acknowledgement(self, caution: str, item: str | None = None,
                             step: int | None = None) -> Evidence:
        """``caution`` acknowledged before the instructions of ``item`` (None: of no card).

        ``step``: how many steps were done when it was given (None: not recorded).
        """
        pairs = self.acknowledged_for | ({(item, caution)} if item else set())
        return self._but(acknowledged=self.acknowledged | {caution}, acknowledged_for=pairs,
                       acks=self.acks + ((caution, item, step),))

    def with_nameplate(self, param: str, value: str, assumed: bool = False) -> Evidence:
        """``param`` is ``value``; ``assumed``: taken from a default, not read off the unit."""
        marked = self.assumed | {param} if assumed else self.assumed - {param}
        return self._but(nameplate={**self.nameplate, param: value}, assumed=marked)

    def with_history(self, cause: str, factor: float) -> Evidence:
        """``cause`` was found on this unit recently: its prior odds × ``factor`` (1: none)."""
        history = {k: v for k, v in self.history.items() if k != cause}
        if factor != 1.0:
            history[cause] = float(factor)
        return self._but(history=history)

    def with_mode(self, mode: str) -> Evidence:
        return self._but(mode=mode)
