"""Expected cost of repair: the order to try repairs in, and what it costs in expectation.

A repair ``r`` cures the unit with probability ``p_r`` (the success of the
repair times the probability of the hypotheses it serves, see
:func:`assign_repairs`) and takes ``c_r`` minutes. With one fault present,
the events "repair ``r`` cures" are disjoint, and doing the repairs in
decreasing order of the ratio

    p_r / c_r

until one cures minimises the expected minutes (the "P-over-C" rule of
Kadane and Simon, 1977; the same exchange argument as Gluss, 1959, for
the order of inspections). The expected cost of repair (ECR) of that
order, with ``E`` the minutes of an escalation when none cures, is

    ECR = Σ_i c_i · (1 − Σ_{j<i} p_j)  +  E · (1 − Σ_i p_i)

(Heckerman, Breese and Rommelse, 1995, the expected cost of a repair
sequence): repair ``i`` is paid for when every repair before it failed to
cure. Only the repairs with ``p_i · E ≥ c_i`` are worth trying before an
escalation; they are a prefix of the p/c order.

References:
    J. B. Kadane, H. A. Simon, "Optimal strategies for a class of constrained
    sequential problems", Annals of Statistics 5(2):237-255, 1977 (journal
    details from memory; the P-over-C rule is attributed to them in the later
    troubleshooting literature, e.g. arXiv:1203.3502).
    D. Heckerman, J. S. Breese, K. Rommelse, "Decision-theoretic
    troubleshooting", Communications of the ACM 38(3):49-57, 1995 (volume
    and pages from memory).
    J. S. Breese, D. Heckerman, "Decision-theoretic troubleshooting: a
    framework for repair and experiment", Proc. 12th Conference on
    Uncertainty in Artificial Intelligence, 1996 (arXiv:1302.3563).
    B. Gluss, "An optimum policy for detecting a fault in a complex system",
    Operations Research 7(4):468-477, 1959 (from memory).
"""

from __future__ import annotations

from typing import Any, NamedTuple

import numpy as np

from diagnose.reasoning.tables import Tables

__all__ = ["PcOrder", "assign_repairs", "expected_cost_of_repair", "pc_order", "repair_order",
           "sequence_cost"]


def repair_order(p: np.ndarray, c: np.ndarray) -> np.ndarray:
    """Indices of the repairs with p > 0 by p/c, highest first (Kadane and Simon, 1977)."""
    live = np.flatnonzero(p > 0)
    return live[np.argsort(-(p[live] / c[live]), kind="stable")]


def sequence_cost(p: np.ndarray, c: np.ndarray, order: Any, escalation: float = 0.0) -> float:
    """Expected minutes of doing the repairs in ``order`` until one cures, then escalating.

    ``p[i]`` is the probability that repair ``i`` cures (disjoint events, Σ p ≤ 1).

    >>> sequence_cost(np.array([0.5, 0.3]), np.array([10.0, 10.0]), [0, 1])
    15.0
    """
    order = np.asarray(order, dtype=np.int64)
    ps, cs = p[order], c[order]
    reach = 1.0 - np.concatenate([[0.0], np.cumsum(ps)])[: len(ps)]
    return float(cs @ reach + escalation * (1.0 - ps.sum()))


def expected_cost_of_repair(p: np.ndarray, c: np.ndarray, escalation: float | None = None,
                            ) -> float:
    """ECR of the p/c order (Heckerman, Breese and Rommelse, 1995, eq. 2).

    With ``escalation`` (E minutes), only the repairs worth trying enter the
    sequence, those with ``p·E ≥ c`` (a prefix of the p/c order), and what
    none of them cures costs E; without it, every repair with p > 0 is done.
    """
    order = repair_order(p, c)
    if escalation is None:
        return sequence_cost(p, c, order, 0.0)
    order = order[p[order] * escalation >= c[order]]
    return sequence_cost(p, c, order, escalation)


def assign_repairs(tables: Tables, usable: np.ndarray, costs: np.ndarray) -> np.ndarray:
    """For each hypothesis, the usable repair with the best success/minutes fixing it (−1: none)."""
    keep = usable[tables.fix_repair]
    fr, fh = tables.fix_repair[keep], tables.fix_hyp[keep]
    out = np.full(tables.n_hyp, -1, dtype=np.int64)
    if len(fr) == 0:
        return out
    score = tables.success[fr] / costs[fr]
    order = np.lexsort((-score, fh))
    fh_s = fh[order]
    first = np.ones(len(fh_s), dtype=bool)
    first[1:] = fh_s[1:] != fh_s[:-1]
    out[fh_s[first]] = fr[order][first]
    return out



class PcOrder(NamedTuple):
    """The repairs in the p/c order now (Kadane and Simon, 1977), with its prefix sums.

    Per repair: ``mass`` (P of the hypotheses it serves), ``prob`` (P it
    cures), ``c`` (minutes, 1 where none are given) and ``rank`` (its place
    in the order, −1 when it cures nothing). Along the order: ``rhos`` (p/c),
    ``p_before`` (Σ p before a place), ``c_from`` (Σ c from a place on) and
    ``g_cum`` (Σ p · c of the repairs after, up to a place). The look-ahead
    merges the repairs an outcome moves into this order
    (:mod:`diagnose.reasoning.lookahead`).
    """

    mass: np.ndarray
    prob: np.ndarray
    c: np.ndarray
    rank: np.ndarray
    rhos: np.ndarray
    p_before: np.ndarray
    c_from: np.ndarray
    g_cum: np.ndarray

    def ecr(self, escalation: float) -> float:
        """ECR of the order: the repairs worth trying (p/c at least 1/E), then an escalation.

        The sum of Heckerman, Breese and Rommelse (1995, eq. 2) from the prefix sums:
        Σ_{i<n} c_i − Σ_{j<i<n} p_j c_i + E · (1 − Σ_{i<n} p_i), ``n`` the repairs worth trying.
        """
        p_before, c_from, g_cum = self.p_before, self.c_from, self.g_cum
        n0 = int(np.searchsorted(-self.rhos, -1.0 / escalation, side="right"))
        return float((c_from[0] - c_from[n0]) - (g_cum[n0] - p_before[n0] * c_from[n0])
                     + escalation * (1.0 - p_before[n0]))


def pc_order(tables: Tables, p: np.ndarray, assign: np.ndarray, repair_cost: np.ndarray,
             ) -> PcOrder:
    """The p/c order of the repairs for posterior ``p`` (see :class:`PcOrder`).

    ``assign`` maps each hypothesis to the repair that serves it (see
    :func:`assign_repairs`); ``repair_cost`` is the minutes of each repair.
    """
    R = len(tables.repair_ids)
    c = np.where(repair_cost > 0, repair_cost, 1.0)
    served = assign >= 0
    mass = np.bincount(assign[served], weights=p[served], minlength=R)
    prob = tables.success * mass
    order = repair_order(prob, c)
    ps, cs = prob[order], c[order]
    rhos = ps / cs
    p_before = np.concatenate([[0.0], np.cumsum(ps)])
    c_from = np.concatenate([np.cumsum(cs[::-1])[::-1], [0.0]])
    g_cum = np.concatenate([[0.0], np.cumsum(ps * c_from[1:])])
    rank = np.full(R, -1, dtype=np.int64)
    rank[order] = np.arange(len(order))
    return PcOrder(mass, prob, c, rank, rhos, p_before, c_from, g_cum)
