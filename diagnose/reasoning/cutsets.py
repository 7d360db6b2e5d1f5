"""Fault-tree analysis of one complaint: minimal cut sets and top-event probabilities.

A complaint is the top event of its own fault tree (IEC 61025); its gates are
``or``, ``and`` and ``k_of_n`` over causes (the basic events) and intermediate
events. Each cause is present independently with probability ``Cause.q``
(prior / 1,000).

Three figures for the top event, as in the Fault Tree Handbook:

* the exact probability, by Shannon decomposition on the causes shared between
  inputs of a gate, with independent modules combined directly (an ``or`` of
  independent inputs is ``1 - prod(1 - p)``, an ``and`` is ``prod(p)``, a
  ``k_of_n`` is a Poisson-binomial tail), memoised on the conditioned subtree;
* the rare-event approximation, the sum over minimal cut sets of the product
  of their ``q``;
* the min-cut upper bound, ``1 - prod(1 - P(cut set))``.

Pure functions on the compiled model; no I/O.

References:
    W. E. Vesely, F. F. Goldberg, N. H. Roberts, D. F. Haasl, *Fault Tree
    Handbook*, NUREG-0492, U.S. Nuclear Regulatory Commission, 1981,
    chapters VII (Boolean reduction, cut sets) and XI (quantification).
    J. B. Fussell, W. E. Vesely, "A new methodology for obtaining cut sets for
    fault trees", Trans. American Nuclear Society 15, 1972 (MOCUS).
    IEC 61025:2006, Fault tree analysis (FTA).
    A. Rauzy, "New algorithms for fault trees analysis", Reliability
    Engineering and System Safety 40, 1993 (Shannon decomposition, modules).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from itertools import combinations

from diagnose.errors import DiagnoseError, InputError
from diagnose.kb.model import Model

#: A tree as plain, hashable data: ``("c", cause_id)`` for a basic event,
#: ``("g", kind, k, inputs)`` for a gate, or a constant ``True`` / ``False``
#: once some causes are fixed. ``k`` is the number of inputs that must hold.
Expr = bool | tuple

#: Stop expanding cut sets past this many; no pack comes near it.
MAX_CUT_SETS = 200_000


# --- the tree as data ------------------------------------------------------------
def tree_expression(model: Model, node: str) -> Expr:
    """The fault tree below ``node`` (a complaint, an event or a cause) as plain data.

    Raises:
        InputError: ``node`` is no complaint, event or cause of the model.
    """
    if node not in model.complaints and node not in model.events and node not in model.causes:
        raise InputError("complaint", f"unknown complaint or event {node!r}")
    built: dict[str, Expr] = {}

    def build(name: str) -> Expr:
        if name in built:
            return built[name]
        if name in model.causes:
            expr: Expr = ("c", name)
        else:
            gate = model.complaints[name].gate if name in model.complaints else model.events[name]
            k = {"or": 1, "and": len(gate.inputs)}.get(gate.kind, gate.k)
            expr = _gate(k, [build(i) for i in gate.inputs])
        built[name] = expr
        return expr

    return build(node)


def _gate(k: int, inputs: Iterable[Expr]) -> Expr:
    """A gate "at least ``k`` of ``inputs``", reduced: constants folded, or/and flattened
    and their repeated inputs dropped."""
    rest: list[Expr] = []
    for item in inputs:
        if item is True:
            k -= 1
        elif item is not False:
            rest.append(item)
    if k <= 0:
        return True
    if k > len(rest):
        return False
    if len(rest) == 1:
        return rest[0]
    kind = "or" if k == 1 else "and" if k == len(rest) else "k_of_n"
    if kind != "k_of_n":  # or(or(a, b), c) is or(a, b, c): lets modules show
        flat: list[Expr] = []
        for item in rest:
            if item[0] == "g" and item[1] == kind:
                flat.extend(item[3])
            else:
                flat.append(item)
        rest = list(dict.fromkeys(flat))  # a + a = a, a a = a
        if len(rest) == 1:
            return rest[0]
        k = 1 if kind == "or" else len(rest)
    return ("g", kind, k, tuple(rest))


def condition(expr: Expr, cause: str, present: bool) -> Expr:
    """``expr`` with ``cause`` fixed present (``True``) or absent (``False``), reduced."""
    if isinstance(expr, bool):
        return expr
    if expr[0] == "c":
        return present if expr[1] == cause else expr
    return _gate(expr[2], [condition(i, cause, present) for i in expr[3]])


def causes_in(expr: Expr) -> frozenset[str]:
    """The causes that occur in a tree given as data."""
    if isinstance(expr, bool):
        return frozenset()
    if expr[0] == "c":
        return frozenset((expr[1],))
    return frozenset().union(*(causes_in(i) for i in expr[3]))


# --- minimal cut sets ------------------------------------------------------------
def minimal_cut_sets(model: Model, top: str) -> tuple[frozenset[str], ...]:
    """The minimal cut sets of the tree below ``top``: the smallest sets of causes that,
    present together, make the top event occur.

    Sorted by size, then by the pack's listing order of the causes.

    Raises:
        InputError: ``top`` is not in the model.
        DiagnoseError: the tree has more than ``MAX_CUT_SETS`` cut sets.

    References:
        Fussell and Vesely 1972 (MOCUS); NUREG-0492 (1981), chapter VII. The
        expansion runs bottom-up with absorption after every gate, which gives
        the same family as MOCUS followed by Boolean reduction.
    """
    sets = expression_cut_sets(tree_expression(model, top))
    order = {c: n for n, c in enumerate(model.causes)}
    return tuple(sorted(sets, key=lambda s: (len(s), sorted(order[c] for c in s))))


def expression_cut_sets(expr: Expr) -> list[frozenset[str]]:
    """The minimal cut sets of a tree given as data (see ``tree_expression``)."""
    memo: dict[Expr, list[frozenset[str]]] = {}

    def sets(e: Expr) -> list[frozenset[str]]:
        if e is True:
            return [frozenset()]
        if e is False:
            return []
        if e[0] == "c":
            return [frozenset((e[1],))]
        if e in memo:
            return memo[e]
        _, kind, k, inputs = e
        below = [sets(i) for i in inputs]
        if kind == "or":
            found = _minimise(s for family in below for s in family)
        else:
            found = []
            for chosen in combinations(below, k):
                found.extend(_product(chosen))
            found = _minimise(found)
        memo[e] = found
        return found

    return sets(expr)


def _product(families: Iterable[list[frozenset[str]]]) -> list[frozenset[str]]:
    out = [frozenset()]
    for family in families:
        out = _minimise(a | b for a in out for b in family)
        if not out:
            break
    return out


def _minimise(sets: Iterable[frozenset[str]]) -> list[frozenset[str]]:
    """Absorption: drop every set that holds another one (``a + a b = a``)."""
    kept: list[frozenset[str]] = []
    for s in sorted(set(sets), key=len):
        if not any(k <= s for k in kept):
            kept.append(s)
            if len(kept) > MAX_CUT_SETS:
                raise DiagnoseError(f"the fault tree has more than {MAX_CUT_SETS} cut sets")
    return kept


# --- probabilities ---------------------------------------------------------------
def cause_probabilities(model: Model) -> dict[str, float]:
    """``Cause.q`` (prior / 1,000) for every cause: the basic-event probabilities."""
    return {c.id: c.q for c in model.causes.values()}


def top_event_probability(model: Model, top: str, q: Mapping[str, float] | None = None) -> float:
    """The exact probability of ``top`` with causes present independently.

    ``q`` overrides some or all basic-event probabilities (default ``Cause.q``).

    >>> from diagnose.reasoning.cutsets import expression_probability
    >>> two_of_three = ("g", "k_of_n", 2, (("c", "a"), ("c", "b"), ("c", "c")))
    >>> round(expression_probability(two_of_three, {"a": 0.1, "b": 0.1, "c": 0.1}), 6)
    0.028

    References:
        NUREG-0492 (1981), chapter XI; Rauzy 1993 (Shannon decomposition).
    """
    probs = cause_probabilities(model)
    probs.update(q or {})
    return expression_probability(tree_expression(model, top), probs)


def expression_probability(expr: Expr, q: Mapping[str, float]) -> float:
    """The exact probability of a tree given as data, causes independent with ``q``."""
    return Quantifier(q).probability(expr)


class Quantifier:
    """Exact probabilities of trees over independent causes with fixed ``q``.

    Keeps what it has worked out, so that trees conditioned on one cause and
    then another (as for importance measures) reuse the subtrees they share.
    Not shared between threads; make one per analysis.
    """

    def __init__(self, q: Mapping[str, float]) -> None:
        self.q = q
        self._memo: dict[Expr, float] = {}
        self._causes: dict[Expr, frozenset[str]] = {}

    def probability(self, expr: Expr) -> float:
        """P(``expr`` holds)."""
        if expr is True:
            return 1.0
        if expr is False:
            return 0.0
        if expr[0] == "c":
            return float(self.q[expr[1]])
        found = self._memo.get(expr)
        if found is not None:
            return found
        _, kind, k, inputs = expr
        if kind == "k_of_n":
            if self._disjoint(inputs):
                p = _at_least(k, [self.probability(i) for i in inputs])
            else:
                p = self._shannon(expr)
        else:
            parts = []
            for group in self._modules(inputs):
                if len(group) == 1:
                    parts.append(self.probability(group[0]))
                else:
                    parts.append(self._shannon(_gate(1 if kind == "or" else len(group), group)))
            p = _combine(kind, parts)
        self._memo[expr] = p
        return p

    def _causes_of(self, expr: Expr) -> frozenset[str]:
        if isinstance(expr, bool) or expr[0] == "c":
            return causes_in(expr)
        found = self._causes.get(expr)
        if found is None:
            found = frozenset().union(*(self._causes_of(i) for i in expr[3]))
            self._causes[expr] = found
        return found

    def _disjoint(self, inputs: tuple) -> bool:
        seen: set[str] = set()
        for item in inputs:
            causes = self._causes_of(item)
            if seen & causes:
                return False
            seen |= causes
        return True

    def _modules(self, inputs: tuple) -> list[list[Expr]]:
        """The inputs grouped so that no cause is shared between groups."""
        groups: list[tuple[set[str], list[Expr]]] = []
        for item in inputs:
            causes = set(self._causes_of(item))
            members = [item]
            keep = []
            for g_causes, g_members in groups:
                if g_causes & causes:
                    causes |= g_causes
                    members = g_members + members
                else:
                    keep.append((g_causes, g_members))
            groups = keep + [(causes, members)]
        return [members for _, members in groups]

    def _shannon(self, expr: Expr) -> float:
        """Shannon decomposition on the cause shared by the most inputs of ``expr``."""
        counts: dict[str, int] = {}
        for item in expr[3]:
            for c in self._causes_of(item):
                counts[c] = counts.get(c, 0) + 1
        pivot = max(sorted(counts), key=lambda c: counts[c])
        qx = float(self.q[pivot])
        p1 = self.probability(condition(expr, pivot, True))
        p0 = self.probability(condition(expr, pivot, False))
        return qx * p1 + (1.0 - qx) * p0


def _combine(kind: str, parts: list[float]) -> float:
    prod = 1.0
    if kind == "and":
        for p in parts:
            prod *= p
        return prod
    for p in parts:
        prod *= 1.0 - p
    return 1.0 - prod


def _at_least(k: int, probs: list[float]) -> float:
    """P(at least ``k`` of independent events with ``probs``): the Poisson-binomial tail."""
    dist = [1.0]  # dist[j] = P(exactly j so far)
    for p in probs:
        nxt = [0.0] * (len(dist) + 1)
        for j, d in enumerate(dist):
            nxt[j] += d * (1.0 - p)
            nxt[j + 1] += d * p
        dist = nxt
    return sum(dist[k:])


def rare_event_approximation(cut_sets: Iterable[Iterable[str]], q: Mapping[str, float]) -> float:
    """Sum over the minimal cut sets of the product of their probabilities.

    An upper bound of the exact figure when the causes are independent; close
    to it when every ``q`` is small. NUREG-0492 (1981), chapter XI.

    >>> round(rare_event_approximation([{"a", "b"}, {"a", "c"}, {"b", "c"}],
    ...                                {"a": 0.1, "b": 0.1, "c": 0.1}), 6)
    0.03
    """
    return sum(_product_q(s, q) for s in cut_sets)


def min_cut_upper_bound(cut_sets: Iterable[Iterable[str]], q: Mapping[str, float]) -> float:
    """``1 - prod(1 - P(cut set))`` over the minimal cut sets (the min-cut upper bound).

    NUREG-0492 (1981), chapter XI; exact when no cause is shared between cut sets.

    >>> round(min_cut_upper_bound([{"a", "b"}, {"a", "c"}, {"b", "c"}],
    ...                           {"a": 0.1, "b": 0.1, "c": 0.1}), 6)
    0.029701
    """
    prod = 1.0
    for s in cut_sets:
        prod *= 1.0 - _product_q(s, q)
    return 1.0 - prod


def cut_sets_expression(cut_sets: Iterable[Iterable[str]]) -> Expr:
    """The ``or`` of the ``and`` of each cut set, as tree data (for union probabilities)."""
    return _gate(1, [_gate(len(s), [("c", c) for c in sorted(s)]) for s in cut_sets])


def _product_q(causes: Iterable[str], q: Mapping[str, float]) -> float:
    prod = 1.0
    for c in causes:
        prod *= float(q[c])
    return prod
