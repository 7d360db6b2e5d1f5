"""The look-ahead of a small model: every posterior after an outcome, written out in full.

For a model with few hypotheses (a shipped pack has about fifty) the
fewest numpy calls win. The likelihood of every (check, outcome) pair under
every hypothesis is one matrix ``L`` (built once per model), so that
``P(o) = L p`` for every pair at once, and the repairs' P(cure) after each
outcome is ``L ⊙ p / P(o)`` summed by the repair serving each hypothesis
(one ``bincount``). The expected cost of
repair after an outcome is then the p/c order of that row's repairs, sorted
row by row (Kadane and Simon, 1977):

    ECR = Σ_i c_i · (1 − Σ_{j<i} p_j)  +  E · (1 − Σ_i p_i)

over the repairs worth trying (``p_i · E ≥ c_i``; Heckerman, Breese and
Rommelse, 1995). The expected information uses

    Σ_o P(o) H(P | o) = Σ_o P(o) log P(o) − Σ_{o,h} P(o, h) log P(o, h)

and ``log P(o, h) = log P(o | h) + log P(h)``, so that with the matrix
``L ⊙ log L`` (also built once) it is two more products (Cover and Thomas,
2006, 2.4). :mod:`diagnose.reasoning.lookahead` chooses this form or the
merge over moved repairs by the size of the model; both give the
reference's values to rounding.

References:
    D. Heckerman, J. S. Breese, K. Rommelse, "Decision-theoretic
    troubleshooting", Communications of the ACM 38(3):49-57, 1995 (volume
    and pages from memory).
    J. B. Kadane, H. A. Simon, "Optimal strategies for a class of constrained
    sequential problems", Annals of Statistics 5(2):237-255, 1977 (from memory).
    T. M. Cover, J. A. Thomas, *Elements of Information Theory*, 2nd ed.,
    2006, 2.4 (mutual information; from memory).
"""

from __future__ import annotations

import numpy as np

__all__ = ["DenseLookahead", "DenseRows", "dense_ecr"]


class DenseRows:
    """The likelihood matrix ``rows`` (pairs × hypotheses) and ``rows ⊙ log2 rows``."""

    def __init__(self, rows: np.ndarray, pair_check: np.ndarray, n_checks: int,
                 n_repairs: int) -> None:
        self.rows = rows
        self.rows_log = rows * np.log2(np.where(rows > 0, rows, 1.0))  # 0 log 0 = 0
        self.pair_check = pair_check
        self.n_checks = n_checks
        rows_at = np.arange(len(rows) + 1)[:, None]  # a batch has at most every pair and "now"
        self.offsets = rows_at * n_repairs  # where each row starts, flat
        for a in (self.rows, self.rows_log, self.offsets):
            a.flags.writeable = False


_SORT_ALL = 64  # up to this many repairs every row is sorted whole


def dense_ecr(prob: np.ndarray, c: np.ndarray, escalation: float,
              dense: DenseRows | None = None) -> np.ndarray:
    """ECR of each row of ``prob`` (P(repair cures), rows × repairs), repairs of ``c`` minutes.

    The repairs worth trying (``p · E ≥ c``, so p/c at least 1/E) in p/c
    order, each paid for while none before it cured, then an escalation.
    ``dense`` gives where each row starts in the flat array (worked out here when
    not given).

    >>> float(dense_ecr(np.array([[0.5, 0.3]]), np.array([10.0, 20.0]), 100.0)[0])
    40.0
    """
    G, R = prob.shape
    offsets = (np.arange(G) * R)[:, None] if dense is None else dense.offsets[:G]
    rho = prob / c
    worth = rho >= 1.0 / escalation
    W = int(worth.sum(axis=1).max()) if R > _SORT_ALL and G else R
    if W == 0:
        return np.full(G, float(escalation))
    if W < R:  # many repairs, few worth trying: sort only the W best of each row
        keep = np.argpartition(-rho, W - 1, axis=1)[:, :W] + offsets
        top = np.take(rho, keep)
        order = np.take(keep, np.argsort(-top, axis=1, kind="stable")
                        + (np.arange(G) * W)[:, None]).ravel()
    else:
        order = (np.argsort(-rho, axis=1, kind="stable") + offsets).ravel()
    ps = np.take(prob * worth, order).reshape(G, W)
    cs = np.take(c * worth, order).reshape(G, W)
    # Σ_i c_i (1 − Σ_{j<i} p_j) + E (1 − Σ_i p_i)
    return (cs * (1.0 + ps - np.cumsum(ps, axis=1))).sum(axis=1) \
        + escalation * (1.0 - ps.sum(axis=1))


class DenseLookahead:
    """Information of every check and ECO on demand, from full rows (see the module).

    ``dense`` holds the model's matrices; ``cand`` the candidate checks;
    ``assign`` the repair serving each hypothesis (−1: none); ``success``
    and ``repair_cost`` per repair; ``escalation`` E.
    """

    def __init__(self, dense: DenseRows, p: np.ndarray, cand: np.ndarray, *,
                 assign: np.ndarray, success: np.ndarray, repair_cost: np.ndarray,
                 escalation: float) -> None:
        self._dense = dense
        plogp = p * np.log2(np.where(p > 0, p, 1.0))
        both = dense.rows @ np.array([p, plogp]).T
        self.z = z = both[:, 0]
        self._safe_z = safe_z = np.where(z > 0, z, 1.0)
        # Σ_h P(o, h) log P(o, h) = Σ_h L p (log L + log p)
        joint_log = dense.rows_log @ p + both[:, 1]
        inside = np.bincount(dense.pair_check, weights=z * np.log2(safe_z) - joint_log,
                             minlength=dense.n_checks)
        self.bits = np.maximum(-plogp.sum() - inside, 0.0)[cand]
        self._E = escalation
        self._c = np.where(repair_cost > 0, repair_cost, 1.0)
        self._R = len(success)
        # P(h) times the success of the repair serving h (0: none), summed by that repair
        served = assign >= 0
        self._to = np.where(served, assign, 0)
        self._p_cure = p * np.where(served, success[self._to], 0.0)
        self._ecr_now: float | None = None

    def _prob(self, post: np.ndarray) -> np.ndarray:
        """P(each repair cures), from ``post`` (rows × hypotheses) weighted as ``_p_cure``."""
        G, R = len(post), self._R
        at = (self._dense.offsets[:G] + self._to).ravel()
        return np.bincount(at, weights=post.ravel(), minlength=G * R).reshape(G, R)

    @property
    def ecr_now(self) -> float:
        """The ECR of the posterior now (computed with the first :meth:`ecr_after`)."""
        if self._ecr_now is None:
            prob = self._prob(self._p_cure[None, :])
            self._ecr_now = float(dense_ecr(prob, self._c, self._E, self._dense)[0])
        return self._ecr_now

    def ecr_after(self, checks: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(pairs, P(outcome), ECR after the outcome) for the pairs of ``checks``."""
        d = self._dense
        sel = np.zeros(d.n_checks, dtype=bool)
        sel[checks] = True
        pairs = np.nonzero(sel[d.pair_check])[0]
        post = d.rows[pairs] * (self._p_cure / self._safe_z[pairs, None])
        first = self._ecr_now is None  # the posterior now goes in the same batch, as row 0
        if first:
            post = np.concatenate([self._p_cure[None, :], post])
        ecr = dense_ecr(self._prob(post), self._c, self._E, d)
        if first:
            self._ecr_now, ecr = float(ecr[0]), ecr[1:]
        return pairs, self.z[pairs], ecr
