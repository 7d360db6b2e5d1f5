"""Importance of each cause to a complaint's top event.

Four measures, all from exact probabilities (see ``cutsets``), for a cause
``i`` with probability ``q_i`` and the top event ``T``:

* Birnbaum: ``P(T | i present) - P(T | i absent)``, how much the top event
  hangs on the cause;
* Fussell-Vesely: ``P(some minimal cut set holding i occurs) / P(T)``, the
  share of the top event's probability that involves the cause;
* risk achievement worth (RAW): ``P(T | i present) / P(T)``;
* risk reduction worth (RRW): ``P(T) / P(T | i absent)``; infinite when the
  top event cannot occur without the cause (``math.inf``).

References:
    Z. W. Birnbaum, "On the importance of different components in a
    multicomponent system", Multivariate Analysis II, Academic Press, 1969.
    W. E. Vesely et al., *Fault Tree Handbook*, NUREG-0492, 1981, chapter XI
    (Fussell-Vesely importance from cut sets).
    M. van der Borst, H. Schoonakker, "An overview of PSA importance
    measures", Reliability Engineering and System Safety 72, 2001 (RAW, RRW).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from diagnose.kb.model import Model
from diagnose.reasoning.cutsets import (
    Quantifier,
    cause_probabilities,
    causes_in,
    condition,
    cut_sets_expression,
    minimal_cut_sets,
    tree_expression,
)


@dataclass(frozen=True)
class Importance:
    """The importance measures of one cause for one top event."""

    cause: str
    q: float
    birnbaum: float
    fussell_vesely: float
    risk_achievement_worth: float
    risk_reduction_worth: float  # math.inf: the top event needs this cause

    def to_dict(self) -> dict[str, Any]:
        """Plain data; an infinite risk reduction worth is written ``None``."""
        rrw = self.risk_reduction_worth
        return {
            "cause": self.cause,
            "q": self.q,
            "birnbaum": self.birnbaum,
            "fussell_vesely": self.fussell_vesely,
            "risk_achievement_worth": self.risk_achievement_worth,
            "risk_reduction_worth": None if math.isinf(rrw) else rrw,
        }


def importances(
    model: Model,
    top: str,
    *,
    cut_sets: Sequence[frozenset[str]] | None = None,
    q: Mapping[str, float] | None = None,
) -> tuple[Importance, ...]:
    """The importance measures of every cause below ``top``, in the pack's listing order.

    ``cut_sets`` may pass the minimal cut sets already found; ``q`` overrides
    basic-event probabilities (default ``Cause.q``).

    Raises:
        InputError: ``top`` is not in the model.
    """
    probs = cause_probabilities(model)
    probs.update(q or {})
    expr = tree_expression(model, top)
    sets = minimal_cut_sets(model, top) if cut_sets is None else cut_sets
    return expression_importances(expr, sets, probs, order=tuple(model.causes))


def expression_importances(
    expr: Any,
    cut_sets: Sequence[frozenset[str]],
    q: Mapping[str, float],
    *,
    order: Sequence[str] = (),
) -> tuple[Importance, ...]:
    """The importance measures of every cause of a tree given as data.

    A cause in no minimal cut set scores Birnbaum 0, Fussell-Vesely 0 and
    both worths 1.

    >>> tree = ("g", "k_of_n", 2, (("c", "a"), ("c", "b"), ("c", "c")))
    >>> sets = [frozenset("ab"), frozenset("ac"), frozenset("bc")]
    >>> a = expression_importances(tree, sets, {"a": 0.1, "b": 0.1, "c": 0.1})[0]
    >>> round(a.birnbaum, 6), round(a.fussell_vesely, 6), round(a.risk_reduction_worth, 6)
    (0.18, 0.678571, 2.8)
    """
    quant = Quantifier(q)
    top = quant.probability(expr)
    rank = {c: n for n, c in enumerate(order)}
    out = []
    for cause in sorted(causes_in(expr), key=lambda c: (rank.get(c, len(rank)), c)):
        p_on = quant.probability(condition(expr, cause, True))
        p_off = quant.probability(condition(expr, cause, False))
        involving = quant.probability(cut_sets_expression(s for s in cut_sets if cause in s))
        out.append(Importance(
            cause=cause,
            q=float(q[cause]),
            birnbaum=p_on - p_off,
            fussell_vesely=_ratio(involving, top),
            risk_achievement_worth=_ratio(p_on, top),
            risk_reduction_worth=_ratio(top, p_off),
        ))
    return tuple(out)


def _ratio(num: float, den: float) -> float:
    if den > 0.0:
        return num / den
    return 0.0 if num <= 0.0 else math.inf
