"""The compiled model: typed, frozen entities and the fault-tree logic.

This is what the reasoning layer works on. Every entity keeps its
``source`` (file and line of its definition) so that messages can point
at the knowledge a trainer wrote. Mappings keep the pack's listing order.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Iterable, Mapping

from diagnose.errors import Source

SIGNAL_WORDS = ("DANGER", "WARNING", "CAUTION", "NOTICE")
GATE_KINDS = ("or", "and", "k_of_n")
WHERE = ("phone", "site")
UNKNOWN_CAUSE = "unknown"  # the id of the "none of the known causes" hypothesis
PER = 1000.0  # priors are relative frequencies per 1,000 service calls


@dataclass(frozen=True)
class Caution:
    id: str
    level: str  # one of SIGNAL_WORDS
    text: str
    source: Source | None = None

    @property
    def needs_acknowledgement(self) -> bool:
        return self.level in ("DANGER", "WARNING")


@dataclass(frozen=True)
class Parameter:
    """A nameplate value asked at the start of a session."""

    id: str
    prompt: str
    unit: str = ""
    min: float | None = None
    max: float | None = None
    default: str | None = None
    unknown_allowed: bool = False
    choices: tuple[str, ...] = ()
    source: Source | None = None
    only_if: Mapping[str, tuple[str, ...]] = field(default_factory=dict)


@dataclass(frozen=True)
class StateVar:
    """A part of the state of the unit (power, cover, brake mounted...).

    ``values`` maps each value to its title; ``setup[value]`` is the minutes a
    plain setup step takes to bring the unit to that value (a value missing
    from ``setup`` is reached only by a check or repair that leaves it).
    """

    id: str
    title: str
    values: Mapping[str, str]
    initial: str
    setup: Mapping[str, float] = field(default_factory=dict)
    source: Source | None = None
    renews: frozenset[str] = frozenset()  # moving into these values lapses acknowledgements


@dataclass(frozen=True)
class HazardCaution:
    """A caution a hazard requires: on units the nameplate allows, after some findings."""

    caution: str
    only_if: Mapping[str, tuple[str, ...]] = field(default_factory=dict)
    after: Mapping[str, tuple[str, ...]] = field(default_factory=dict)  # check -> outcomes
    after_verdict: Mapping[str, tuple[str, ...]] = field(default_factory=dict)  # evaluator ->


@dataclass(frozen=True)
class Hazard:
    """A kind of hazard a check or repair can bring, and what it requires.

    ``caller_safe`` is True, False, or a mapping (parameter -> values): safe for
    a caller only on a unit whose nameplate is known to match.
    """

    id: str
    title: str
    cautions: tuple[HazardCaution, ...] = ()
    only_if: Mapping[str, tuple[str, ...]] = field(default_factory=dict)
    withhold_until: Mapping[str, str] = field(default_factory=dict)
    caller_safe: bool | Mapping[str, tuple[str, ...]] = False
    words: tuple[str, ...] = ()
    source: Source | None = None


@dataclass(frozen=True)
class Cause:
    """A root cause. ``prior`` is a relative frequency per 1,000 service calls."""

    id: str
    title: str
    prior: float
    description: str = ""
    pack: str = ""
    source: Source | None = None
    only_if: Mapping[str, tuple[str, ...]] = field(default_factory=dict)

    @property
    def q(self) -> float:
        """The prior as a probability of presence (prior / 1000), for fault-tree use."""
        return self.prior / PER


@dataclass(frozen=True)
class Gate:
    """A fault-tree gate: an intermediate event or the top of a complaint's tree."""

    id: str
    title: str
    kind: str  # one of GATE_KINDS
    inputs: tuple[str, ...]
    k: int = 1
    source: Source | None = None
    only_if: Mapping[str, tuple[str, ...]] = field(default_factory=dict)

    def holds(self, states: Iterable[bool]) -> bool:
        n = sum(1 for s in states if s)
        if self.kind == "or":
            return n >= 1
        if self.kind == "and":
            return n == len(self.inputs)
        return n >= self.k


@dataclass(frozen=True)
class Complaint:
    """A symptom as first reported; the top event of its own fault tree."""

    id: str
    title: str
    gate: Gate
    caller_title: str = ""
    description: str = ""
    source: Source | None = None
    hidden: bool = False  # a device pack's `hide`: not in the complaint menus


@dataclass(frozen=True)
class Reading:
    """One named reading of a measurement: the evaluator input it fills, its unit, the ask."""

    name: str
    unit: str
    ask: str = ""


@dataclass(frozen=True)
class Measurement:
    """How a numeric reading becomes an outcome: a registered evaluator and its inputs.

    ``inputs`` maps evaluator input names to a constant (text with unit, number,
    choice) or to a nameplate parameter written ``$parameter_id``.
    """

    evaluator: str
    reading: str
    unit: str
    inputs: Mapping[str, Any] = field(default_factory=dict)
    accuracy: float = 0.0  # relative meter accuracy, for soft evidence at band edges
    many: bool = False
    at: str = ""  # where the reading is taken; one quantity at one place is one reading
    also: tuple[Reading, ...] = ()  # further named readings taken on the same card

    @property
    def readings(self) -> tuple[Reading, ...]:
        """Every reading the card takes, the main one first."""
        return (Reading(self.reading, self.unit), *self.also)


@dataclass(frozen=True)
class Check:
    """A question or a test at the unit, with its outcomes and their likelihoods.

    ``effects[cause][outcome]`` is P(outcome | cause present), complete over
    ``outcomes``; ``normal`` is the distribution under a cause the check does
    not list; ``unknown`` under "none of the known causes".
    """

    id: str
    title: str
    minutes: float
    outcomes: tuple[str, ...]
    effects: Mapping[str, Mapping[str, float]]
    normal: Mapping[str, float]
    unknown: Mapping[str, float]
    where: str = "site"  # "phone": safe for a caller; "site": on site only
    tools: tuple[str, ...] = ()
    cautions: tuple[str, ...] = ()
    ask: str = ""
    caller: str = ""
    needs: tuple[str, ...] = ()
    measurement: Measurement | None = None
    outcome_titles: Mapping[str, str] = field(default_factory=dict)
    source: Source | None = None
    only_if: Mapping[str, tuple[str, ...]] = field(default_factory=dict)  # parameter -> values
    preparation: bool = False  # a step that secures or prepares; observes no cause
    requires: Mapping[str, str] = field(default_factory=dict)  # state -> value while done
    leaves: Mapping[str, str] = field(default_factory=dict)  # state -> value after
    replaces: str = ""  # the base pack's check this one took the place of
    hazards: tuple[str, ...] = ()
    hazards_declared: bool = False  # `hazards:` given (an empty list says: none)
    hazards_note: str = ""
    hidden: bool = False  # a device pack's `hide`: never offered (not for this unit)

    @property
    def phone_ok(self) -> bool:
        return self.where == "phone"

    def likelihood(self, outcome: str, cause: str) -> float:
        table = self.effects.get(cause, self.normal)
        return float(table.get(outcome, 0.0))


@dataclass(frozen=True)
class Repair:
    """An action that removes causes; ``success`` is P(cured | a fixed cause present)."""

    id: str
    title: str
    minutes: float
    fixes: tuple[str, ...]
    parts: tuple[str, ...] = ()
    success: float = 0.95
    cautions: tuple[str, ...] = ()
    confirm: str | None = None
    needs: tuple[str, ...] = ()
    ask: str = ""
    where: str = "site"
    source: Source | None = None
    only_if: Mapping[str, tuple[str, ...]] = field(default_factory=dict)
    observes: tuple[str, ...] = ()  # checks answered in plain sight during the repair
    leaves: Mapping[str, str] = field(default_factory=dict)  # default: the unit as found
    requires: Mapping[str, str] = field(default_factory=dict)  # the state during the repair
    hazards: tuple[str, ...] = ()
    hazards_declared: bool = False
    hazards_note: str = ""


@dataclass(frozen=True)
class Step:

    """One scripted step: a check answer, a repair with its result, or a skip."""

    check: str | None = None
    answer: Any = None
    repair: str | None = None
    cured: bool | None = None
    skip: bool = False
    source: Source | None = None
    parts: tuple[Any, ...] = ()  # of a repair: the parts fitted (names or {part, qty, number})


@dataclass(frozen=True)
class Case:
    """A knowledge test case: a scripted session and the expected top cause(s)."""

    id: str
    complaints: tuple[str, ...]
    steps: tuple[Step, ...]
    expect_top: tuple[str, ...]
    nameplate: Mapping[str, Any] = field(default_factory=dict)
    mode: str = "site"
    max_faults: int = 1
    title: str = ""
    source: Source | None = None
    expect_below: Mapping[str, float] = field(default_factory=dict)
    expect_absent: tuple[str, ...] = ()
    expect_not_asked: tuple[str, ...] = ()
    expect_offered: tuple[str, ...] = ()


@dataclass(frozen=True)
class Model:
    """A compiled, validated pack with everything it builds on.

    ``graph`` is a networkx DiGraph whose nodes are ``"kind:id"`` with
    attributes ``kind``, ``id``, ``title`` and the entity's fields; see
    DEVELOPERS.md for the edge kinds.
    """

    id: str
    title: str
    version: str
    packs: tuple[str, ...]  # this pack and everything it builds on, base first
    notice: str
    parameters: Mapping[str, Parameter]
    complaints: Mapping[str, Complaint]
    events: Mapping[str, Gate]
    causes: Mapping[str, Cause]
    checks: Mapping[str, Check]
    repairs: Mapping[str, Repair]
    cautions: Mapping[str, Caution]
    cases: Mapping[str, Case]
    states: Mapping[str, StateVar] = field(default_factory=dict)
    hazards: Mapping[str, Hazard] = field(default_factory=dict)
    unknown_prior: float = 5.0  # "none of the known causes", per 1,000 service calls
    leak: float = 0.01  # P(complaint | a hypothesis whose tree does not produce it)
    content_hash: str = ""
    path: str = ""
    #: The device's terms (``diagnose.kb.terms``: device, Device, switch_on, ...).
    terms: Mapping[str, str] = field(default_factory=dict, compare=False)
    #: Listing position of each cause, built when the pack is compiled (empty: worked out).
    cause_order: Mapping[str, int] = field(default_factory=dict, repr=False, compare=False)

    # --- fault-tree logic (pure) -------------------------------------------------
    def holds(self, node: str, faults: frozenset[str] | set[str]) -> bool:
        """True when ``node`` (complaint, event or cause id) occurs given the present ``faults``."""
        if node in self.causes:
            return node in faults
        gate = self.complaints[node].gate if node in self.complaints else self.events[node]
        return gate.holds(self.holds(i, faults) for i in gate.inputs)

    def tree_causes(self, node: str) -> tuple[str, ...]:
        """The causes below ``node`` in its fault tree, in listing order of the pack."""
        found: set[str] = set()
        seen: set[str] = set()
        stack = [node]
        while stack:
            cur = stack.pop()
            if cur in seen:
                continue
            seen.add(cur)
            if cur in self.causes:
                found.add(cur)
                continue
            gate = self.complaints[cur].gate if cur in self.complaints else self.events.get(cur)
            if gate is not None:
                stack.extend(gate.inputs)
        order = self._cause_order()
        return tuple(sorted(found, key=order.__getitem__))

    def _cause_order(self) -> Mapping[str, int]:
        """Listing position of each cause: built at compile time, else worked out now."""
        return self.cause_order or {c: i for i, c in enumerate(self.causes)}

    def repairs_for(self, cause: str) -> tuple[str, ...]:
        return tuple(r.id for r in self.repairs.values() if cause in r.fixes)

    def checks_for(self, cause: str) -> tuple[str, ...]:
        return tuple(c.id for c in self.checks.values() if cause in c.effects)
