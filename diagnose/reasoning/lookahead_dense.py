"""The look-ahead of a small model: every posterior after an outcome, written out in full.

For a model with few hypotheses (a shipped pack has about fifty) the
fewest numpy calls win. The likelihood of every (check, outcome) pair under
every hypothesis is one matrix ``L`` (built once per model), so that
``P(o) = L p`` for every pair at once, and the repairs' P(cure) after each
outcome is ``L ⊙ p`` summed by the repair serving each hypothesis (one
``bincount``) over ``P(o)``. The expected cost of repair after an outcome is
then the p/c order of that row's repairs (Kadane and Simon, 1977):

    ECR = Σ_i c_i · (1 − Σ_{j<i} p_j)  +  E · (1 − Σ_i p_i)

over the repairs worth trying (``p_i · E ≥ c_i``; Heckerman, Breese and
Rommelse, 1995). Few repairs are worth trying after any one outcome, so only
those entries are sorted, all rows in one ``lexsort``; the posterior now is
one more row of the same batch. The expected information is the mutual
information written the other way round,

    I(outcome; h) = H(outcome) − H(outcome | h)
                  = −Σ_o P(o) log P(o) − Σ_h P(h) H(L[·, h])

where ``H(L[·, h])``, the entropy of a check's outcome when ``h`` is the
truth, is one matrix (checks × hypotheses, built once), so that it is one
more product (Cover and Thomas, 2006, 2.3-2.4).
:mod:`diagnose.reasoning.lookahead` chooses this form or the merge over
moved repairs by the size of the model; both give the reference's values
to rounding.

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

_MEMO = 256  # entries of a memo of DenseRows before it starts afresh
_LEAST = float(np.nextafter(0.0, 1.0))  # the least positive float (5e-324)


class DenseRows:
    """The likelihood matrix ``rows`` (pairs × hypotheses) and ``entropy``, the entropy
    (bits) of each check's outcome under each hypothesis (checks × hypotheses).

    ``rows_now`` is ``rows`` with one more row of ones, the "pair" whose
    posterior is the posterior now, so that the ECR now is worked out in the
    same batch as the ECR after each outcome; ``pair_check_now`` gives it
    the check index ``n_checks``.
    """

    def __init__(self, rows: np.ndarray, pair_check: np.ndarray, n_checks: int,
                 n_repairs: int) -> None:
        n_pairs, n_hyp = rows.shape
        rows_log = rows * np.log2(np.where(rows > 0, rows, 1.0))  # 0 log 0 = 0
        # H(outcome of check k | hypothesis h) = −Σ_o L log L, checks × hypotheses
        self.entropy = -np.array([np.bincount(pair_check, weights=col, minlength=n_checks)
                                  for col in rows_log.T]).T.copy()
        # one product gives P(outcome) of every pair, Σ p, and H(outcome | h) averaged
        self._stacked = np.vstack([rows, np.ones((1, n_hyp)), self.entropy])
        self.rows_now = self._stacked[:n_pairs + 1]
        self.rows = self._stacked[:n_pairs]
        self.pair_check = pair_check
        self.pair_check_now = np.append(pair_check, n_checks)
        self.n_pairs, self.n_checks, self.n_repairs = n_pairs, n_checks, n_repairs
        for a in (self.rows, self.entropy, self.rows_now, self._stacked,
                  self.pair_check_now):
            a.flags.writeable = False
        self._served: dict[bytes, tuple[np.ndarray, np.ndarray, np.ndarray]] = {}
        self._costs: dict[bytes, np.ndarray] = {}

    def product(self, p: np.ndarray) -> np.ndarray:
        """``rows_now @ p`` then ``entropy @ p``, in one product."""
        return self._stacked @ p

    def costs(self, repair_cost: np.ndarray) -> np.ndarray:
        """The minutes of each repair, 1 where none are given (memoised: few sets of minutes
        occur, one per standing of the repairs)."""
        key = repair_cost.tobytes()
        found = self._costs.get(key)
        if found is None:
            if len(self._costs) >= _MEMO:
                self._costs.clear()
            found = self._costs[key] = np.where(repair_cost > 0, repair_cost, 1.0)
            found.flags.writeable = False
        return found

    def served(self, assign: np.ndarray, success: np.ndarray,
               ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """For a repair assignment (see :func:`~diagnose.reasoning.repair_cost.assign_repairs`):
        the repair serving each hypothesis (0 for none), its success (0 for none), and where
        the entry (row, hypothesis) of a batch goes in the flat (rows × repairs) array.

        Memoised: a session meets few assignments.
        """
        key = assign.tobytes()
        found = self._served.get(key)
        if found is None:
            if len(self._served) >= _MEMO:
                self._served.clear()
            served = assign >= 0
            to = np.where(served, assign, 0)
            at = np.arange(self.n_pairs + 1)[:, None] * self.n_repairs + to
            found = (to, np.where(served, success[to], 0.0), at)
            for a in found:
                a.flags.writeable = False
            self._served[key] = found
        return found


def dense_ecr(prob: np.ndarray, c: np.ndarray, escalation: float) -> np.ndarray:
    """ECR of each row of ``prob`` (P(repair cures), rows × repairs), repairs of ``c`` minutes.

    The repairs worth trying (``p · E ≥ c``, so p/c at least 1/E) in p/c
    order, each paid for while none before it cured, then an escalation.
    Only the entries worth trying are sorted (a few per row), row by row.

    >>> float(dense_ecr(np.array([[0.5, 0.3]]), np.array([10.0, 20.0]), 100.0)[0])
    40.0
    """
    G, R = prob.shape
    rho = prob / c
    flat = (rho >= 1.0 / escalation).ravel().nonzero()[0]
    if len(flat) == 0:
        out = np.empty(G)
        out.fill(escalation)
        return out
    g, r = np.divmod(flat, R)  # the row of each entry (ascending) and its repair
    by = np.lexsort((-rho.take(flat), g))  # within a row, by p/c, highest first
    ps = prob.take(flat[by])
    cs = c[r[by]]
    before = ps.cumsum()
    before -= ps
    before -= before[g.searchsorted(g)]  # Σ p of the entries before, in the same row
    # Σ_i c_i (1 − Σ_{j<i} p_j) + E (1 − Σ_i p_i)
    out = np.bincount(g, weights=cs * (1.0 - before) - escalation * ps, minlength=G)
    out += escalation
    return out


class DenseLookahead:
    """Information of every check and ECO on demand, from full rows (see the module).

    ``dense`` holds the model's matrices; ``cand`` the candidate checks;
    ``assign`` the repair serving each hypothesis (−1: none); ``success``
    and ``repair_cost`` per repair; ``escalation`` E.
    """

    def __init__(self, dense: DenseRows, p: np.ndarray, cand: np.ndarray, *,
                 assign: np.ndarray, success: np.ndarray, repair_cost: np.ndarray,
                 escalation: float) -> None:
        self._dense = d = dense
        # P(outcome) of every pair, Σ p (1 but for rounding) for "now", then H(outcome | h)
        # of each check averaged over the hypotheses
        both = d.product(p)
        z_now = both[:d.n_pairs + 1]
        self.z = z = z_now[:-1]
        # z where it is positive; where it is 0 (an outcome nothing still possible gives), the
        # least positive float: its posterior row is 0 all the same, and 0 · log 0 = 0
        self._safe_z = safe_z = np.maximum(z_now, _LEAST)
        # I(outcome; hypothesis) = H(outcome) − H(outcome | hypothesis)
        minus_bits = np.bincount(d.pair_check, weights=z * np.log2(safe_z[:-1]),
                                 minlength=d.n_checks)  # −H(outcome)
        minus_bits += both[d.n_pairs + 1:]  # + H(outcome | h)
        bits = np.negative(minus_bits[cand])
        self.bits = np.maximum(bits, 0.0, out=bits)
        self._E = escalation
        self._c = d.costs(repair_cost)
        # P(h) times the success of the repair serving h (0: none), summed by that repair
        _, success_h, self._at = d.served(assign, success)
        self._p_cure = p * success_h
        self._ecr_now: float | None = None

    @property
    def ecr_now(self) -> float:
        """The ECR of the posterior now (computed with the first :meth:`eco`)."""
        if self._ecr_now is None:
            self.eco(np.zeros(0, dtype=np.int64), np.zeros(0))
        assert self._ecr_now is not None
        return self._ecr_now

    def eco(self, checks: np.ndarray, check_cost: np.ndarray,
            neutral: np.ndarray | None = None) -> np.ndarray:
        """ECO of ``checks`` (``check_cost`` minutes each); ``neutral`` as for the look-ahead."""
        d, z = self._dense, self.z
        sel = np.zeros(d.n_checks + 1, dtype=bool)
        sel[checks] = True
        first = self._ecr_now is None  # the posterior now goes in the same batch, last
        sel[-1] = first
        pairs = sel[d.pair_check_now].nonzero()[0]
        G, R = len(pairs), d.n_repairs
        post = d.rows_now[pairs]
        post *= self._p_cure
        prob = np.bincount(self._at[:G].ravel(), weights=post.ravel(),
                           minlength=G * R).reshape(G, R)
        prob /= self._safe_z[pairs][:, None]
        ecr = dense_ecr(prob, self._c, self._E)
        if first:
            self._ecr_now, ecr, pairs = float(ecr[-1]), ecr[:-1], pairs[:-1]
        if neutral is not None:
            ecr[neutral[pairs]] = self._E
        per_check = np.bincount(d.pair_check[pairs], weights=z[pairs] * ecr,
                                minlength=d.n_checks)
        return check_cost + per_check[checks]
