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

from typing import Any

import numpy as np

from diagnose.reasoning.tables import Tables

__all__ = ["assign_repairs", "expected_cost_of_repair", "repair_order", "sequence_cost"]


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

