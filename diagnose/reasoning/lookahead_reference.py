"""The reference look-ahead: information and ECO of every candidate check, on padded arrays.

This is the planner's first, straightforward version, kept as the reference
that the fast look-ahead (:mod:`diagnose.reasoning.lookahead`) is tested
against, choice for choice; ``plan(..., reference=True)`` and the
simulator's ``reference`` policy run it. It gives the same quantities (see
there): the expected cost of observation ``ECO(k) = c_k + Σ_o P(o) ·
ECR(after o)`` (Heckerman, Breese and Rommelse, 1995) and the expected
information, the mutual information between a check's outcome and the
hypothesis (Cover and Thomas, 2006, 2.4), but for every candidate check and
outcome at once. Hypotheses that a check does not list all scale by the same
factor ``alpha`` after an outcome, so only the repairs serving a listed
hypothesis change place in the p/c order; they are taken out and merged back
into the unchanged order of the rest with prefix sums, vectorised over
checks × outcomes × those repairs, padded to the widest check of a batch
(:func:`lookahead_reference`).

References:
    D. Heckerman, J. S. Breese, K. Rommelse, "Decision-theoretic
    troubleshooting", Communications of the ACM 38(3):49-57, 1995 (volume
    and pages from memory).
    T. M. Cover, J. A. Thomas, *Elements of Information Theory*, 2nd ed.,
    2006, 2.4 (mutual information; from memory).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from diagnose.reasoning.repair_cost import PcOrder, pc_order
from diagnose.reasoning.tables import Tables

__all__ = ["lookahead_reference"]

_BATCH = 2_000_000  # largest (checks × outcomes × m × m) array of one look-ahead batch


def _entropy_terms(x: np.ndarray) -> np.ndarray:
    """x · log2(x), with 0 · log 0 = 0."""
    out = np.zeros_like(x)
    pos = x > 0
    out[pos] = x[pos] * np.log2(x[pos])
    return out


def lookahead_reference(tables: Tables, p: np.ndarray, cand: np.ndarray,
                        check_cost: np.ndarray, assign: np.ndarray, repair_cost: np.ndarray, *,
                        escalation: float, detail: list[np.ndarray] | None = None,
                        ) -> tuple[np.ndarray, np.ndarray, float]:
    """Expected information (bits) and ECO of each candidate check, and ECR now.

    ``cand`` indexes ``tables.check_ids``; ``check_cost`` is per candidate;
    ``assign`` maps hypotheses to repairs (see
    :func:`~diagnose.reasoning.repair_cost.assign_repairs`); ``escalation``
    is E, the minutes of an escalation. When ``detail`` is a list, P(outcome)
    and the ECR after each outcome (both candidates × outcomes) are appended
    to it.
    """
    order = pc_order(tables, p, assign, repair_cost)
    ecr_now = order.ecr(escalation)
    if len(cand) == 0:
        if detail is not None:
            detail += [np.zeros((0, 1)), np.zeros((0, 1))]
        return np.zeros(0), np.zeros(0), ecr_now
    split = _split(tables, p, cand)
    bits = _information(p, split)
    touched = _touched(tables, assign, order, split)
    ecr_after = _ecr_after(touched, order, split.alpha, escalation)
    eco = check_cost + (split.z * ecr_after).sum(axis=1)
    if detail is not None:
        detail += [split.z, ecr_after]
    return bits, eco, ecr_now


class _Split(NamedTuple):
    """How the outcomes of each candidate check split the posterior.

    One row per (candidate, hypothesis it lists): ``ek`` the candidate,
    ``eh`` the hypothesis, ``el`` its outcome row, ``pe`` its probability and
    ``new_ex`` its posterior after each outcome. Per candidate: ``p_exc``, the
    mass it lists. Per candidate × outcome: ``z`` = P(outcome), ``safe_z`` (1
    where z is 0) and ``alpha``, the factor the hypotheses it does not list
    scale by.
    """

    ek: np.ndarray
    eh: np.ndarray
    el: np.ndarray
    pe: np.ndarray
    new_ex: np.ndarray
    p_exc: np.ndarray
    z: np.ndarray
    safe_z: np.ndarray
    alpha: np.ndarray


def _split(tables: Tables, p: np.ndarray, cand: np.ndarray) -> _Split:
    """P(outcome) of each candidate and the posterior after it (see :class:`_Split`)."""
    K = len(cand)
    remap = np.full(len(tables.check_ids), -1, dtype=np.int64)
    remap[cand] = np.arange(K)
    sel = remap[tables.ex_check] >= 0
    ek = remap[tables.ex_check[sel]]
    eh = tables.ex_hyp[sel]
    el = tables.ex_rows[sel]
    normal = tables.check_normal[cand]
    n_out = normal.shape[1]
    pe = p[eh]
    p_exc = np.bincount(ek, weights=pe, minlength=K)
    z = normal * (1.0 - p_exc)[:, None]
    for o in range(n_out):
        z[:, o] += np.bincount(ek, weights=pe * el[:, o], minlength=K)
    z = np.clip(z, 0.0, None)
    live = z > 0
    safe_z = np.where(live, z, 1.0)
    alpha = np.where(live, normal / safe_z, 0.0)
    new_ex = pe[:, None] * el / safe_z[ek]
    return _Split(ek, eh, el, pe, new_ex, p_exc, z, safe_z, alpha)


def _information(p: np.ndarray, split: _Split) -> np.ndarray:
    """Mutual information (bits) between each candidate's outcome and the hypothesis."""
    K, n_out = split.z.shape
    ek, eh, alpha = split.ek, split.eh, split.alpha
    pl = _entropy_terms(p)
    s_non = pl.sum() - np.bincount(ek, weights=pl[eh], minlength=K)
    m_non = np.clip(1.0 - split.p_exc, 0.0, None)
    t_ex = np.zeros((K, n_out))
    nl = _entropy_terms(split.new_ex)
    for o in range(n_out):
        t_ex[:, o] = np.bincount(ek, weights=nl[:, o], minlength=K)
    h_post = -(alpha * s_non[:, None] + _entropy_terms(alpha) * m_non[:, None] + t_ex)
    return np.clip(-pl.sum() - (split.z * h_post).sum(axis=1), 0.0, None)


class _Touched(NamedTuple):
    """The (candidate, repair) pairs where the repair serves a hypothesis the candidate lists.

    Sorted by candidate: ``uk`` the candidate, ``ur`` the repair, ``slot``
    its place among the pairs of that candidate, ``p_new`` (pairs × outcomes)
    P(the repair cures) after each outcome; ``counts`` the pairs per candidate.
    """

    uk: np.ndarray
    ur: np.ndarray
    slot: np.ndarray
    p_new: np.ndarray
    counts: np.ndarray


def _touched(tables: Tables, assign: np.ndarray, order: PcOrder, split: _Split) -> _Touched:
    """The repairs whose place an outcome moves, with P(cure) after each outcome."""
    R = len(tables.repair_ids)
    K, n_out = split.z.shape
    er = assign[split.eh]
    v = er >= 0
    key = split.ek[v] * R + er[v]
    uniq, inv = np.unique(key, return_inverse=True)
    uk, ur = uniq // R, uniq % R
    U = len(uniq)
    ex_mass = np.bincount(inv, weights=split.pe[v], minlength=U)
    new_mass = np.empty((U, n_out))
    for o in range(n_out):
        new_mass[:, o] = np.bincount(inv, weights=split.new_ex[v, o], minlength=U)
    new_mass += split.alpha[uk] * np.clip(order.mass[ur] - ex_mass, 0.0, None)[:, None]
    p_new = tables.success[ur][:, None] * new_mass
    counts = np.bincount(uk, minlength=K)
    start = np.cumsum(counts) - counts
    slot = np.arange(U) - start[uk]
    return _Touched(uk, ur, slot, p_new, counts)


def _ecr_after(touched: _Touched, order: PcOrder, alpha: np.ndarray, escalation: float,
               ) -> np.ndarray:
    """ECR after each outcome (candidates × outcomes): the touched repairs move, the rest scale.

    Checks go in batches of like width, so that the (checks × outcomes × m ×
    m) arrays stay below ``_BATCH`` elements.
    """
    counts = touched.counts
    K, n_out = alpha.shape
    ecr_after = np.empty((K, n_out))
    by_width = np.argsort(counts, kind="stable")
    lo = 0
    while lo < K:
        hi = lo + 1
        while hi < K:
            width = max(int(counts[by_width[hi]]), 1)
            if (hi + 1 - lo) * n_out * width * width > _BATCH:
                break
            hi += 1
        batch = by_width[lo:hi]
        ecr_after[batch] = _ecr_batch(batch, alpha[batch], touched, order, escalation)
        lo = hi
    return ecr_after


def _ecr_batch(batch: np.ndarray, alpha: np.ndarray, touched: _Touched, order: PcOrder,
               escalation: float) -> np.ndarray:
    """ECR after each outcome for the checks in ``batch`` (see :func:`lookahead_reference`).

    The repairs of the global p/c order that a check's outcome does not touch
    keep their order and scale by ``alpha`` (the batch's rows); those worth
    trying (ratio at least 1/E) are a prefix of that order, cut at ``n_cut``.
    The touched repairs (at most ``m`` per check) are taken out and merged
    back at their new place.
    """
    rhos, p_before, c_from, g_cum = order.rhos, order.p_before, order.c_from, order.g_cum
    m = max(int(touched.counts[batch].max()), 1)
    a_pn, a_c, a_po, a_rank = _batch_slots(batch, m, touched, order)
    live = alpha > 0
    safe_alpha = np.where(live, alpha, 1.0)
    n_cut = np.where(live, np.searchsorted(-rhos, -(1.0 / (safe_alpha * escalation)).ravel(),
                                           side="right").reshape(alpha.shape), 0)
    pre = _TouchedPrefix(a_po, a_c, a_rank, order)
    at = pre.at
    i_cut = pre.below(n_cut)
    g_b = (g_cum[n_cut] - p_before[n_cut] * c_from[n_cut]
           - (at(pre.cpc, i_cut) - c_from[n_cut] * at(pre.cp, i_cut) + at(pre.ccp, i_cut))
           + at(pre.ct, i_cut))
    p_b = p_before[n_cut] - at(pre.cp, i_cut)
    c_b = c_from[0] - c_from[n_cut] - at(pre.cc, i_cut)

    rho = a_pn / np.where(a_c > 0, a_c, 1.0)[:, None, :]
    valid = (a_pn > 0) & (rho >= 1.0 / escalation)
    pn = np.where(valid, a_pn, 0.0)
    ce = np.where(valid, a_c[:, None, :], 0.0)
    rho = np.where(valid, rho, 0.0)
    cut3 = n_cut[:, :, None]
    pos = np.searchsorted(-rhos, -(rho / safe_alpha[:, :, None]).ravel(),
                          side="left").reshape(rho.shape)
    pos = np.minimum(pos, cut3)
    i_pos = pre.below(pos)
    before_p = p_before[pos] - at(pre.cp, i_pos)
    after_c = c_from[pos] - c_from[cut3] - (at(pre.cc, i_cut)[:, :, None] - at(pre.cc, i_pos))
    cross = (alpha[:, :, None] * ce * before_p + pn * after_c).sum(axis=2)
    new_order = np.argsort(-rho, axis=2, kind="stable")
    ps_new = np.take_along_axis(pn, new_order, axis=2)
    cs_new = np.take_along_axis(ce, new_order, axis=2)
    aa = (cs_new * (np.cumsum(ps_new, axis=2) - ps_new)).sum(axis=2)
    c_seq = c_b + ce.sum(axis=2)
    p_seq = alpha * p_b + pn.sum(axis=2)
    pairs = alpha * g_b + cross + aa
    return c_seq - pairs + escalation * (1.0 - p_seq)


def _batch_slots(batch: np.ndarray, m: int, touched: _Touched, order: PcOrder,
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The touched repairs of each check in ``batch``, in ``m`` slots a check.

    Returns P(cure) after each outcome (checks × outcomes × m), minutes,
    P(cure) now and place in the global order (checks × m; an empty slot has
    0, 0 and −1).
    """
    uk, ur = touched.uk, touched.ur
    K = len(batch)
    n_out = touched.p_new.shape[1]
    local = np.full(len(touched.counts), -1, dtype=np.int64)
    local[batch] = np.arange(K)
    pick = np.flatnonzero(local[uk] >= 0) if len(uk) else np.zeros(0, np.int64)
    kk, ss, rr = local[uk[pick]], touched.slot[pick], ur[pick]
    a_pn = np.zeros((K, n_out, m))
    a_pn[kk, :, ss] = touched.p_new[pick]
    a_c = np.zeros((K, m))
    a_c[kk, ss] = order.c[rr]
    a_po = np.zeros((K, m))
    a_po[kk, ss] = order.prob[rr]
    a_rank = np.full((K, m), -1, dtype=np.int64)
    a_rank[kk, ss] = order.rank[rr]
    return a_pn, a_c, a_po, a_rank


def _cum_rows(x: np.ndarray) -> np.ndarray:
    """Prefix sums along each row, with a leading 0."""
    return np.concatenate([np.zeros((x.shape[0], 1)), np.cumsum(x, axis=1)], axis=1)


class _TouchedPrefix:
    """The touched repairs of a batch's checks by their place in the global order.

    With prefix sums over them (``cp``: Σ p, ``cc``: Σ c, ``cpc``: Σ p times
    the global minutes after, ``ccp``: Σ c times the global P before, ``ct``:
    Σ over touched pairs a before b of p_a c_b), "Σ over touched repairs
    placed before x" is one lookup (a batched searchsorted).
    """

    def __init__(self, a_po: np.ndarray, a_c: np.ndarray, a_rank: np.ndarray,
                 order: PcOrder) -> None:
        K, self._m = a_rank.shape
        N = len(order.rhos)
        key = np.where(a_rank >= 0, a_rank, N + 1)
        by_rank = np.argsort(key, axis=1, kind="stable")
        sr = np.take_along_axis(key, by_rank, axis=1)
        sp = np.take_along_axis(a_po, by_rank, axis=1) * (sr <= N)
        sc = np.take_along_axis(a_c, by_rank, axis=1) * (sr <= N)
        srk = np.minimum(sr, N)
        spc = sp * order.c_from[np.minimum(srk + 1, N)]
        scp = sc * order.p_before[srk]
        self.cp, self.cc = _cum_rows(sp), _cum_rows(sc)
        self.cpc, self.ccp = _cum_rows(spc), _cum_rows(scp)
        self.ct = _cum_rows(sc * self.cp[:, :-1])
        self._k = K
        self._stride = N + 2
        self._flat = (sr + np.arange(K)[:, None] * self._stride).ravel()

    def below(self, x: np.ndarray) -> np.ndarray:
        """How many touched repairs of each check sit before global place ``x``."""
        rows = np.arange(self._k).reshape((self._k,) + (1,) * (x.ndim - 1))
        found = np.searchsorted(self._flat, (x + rows * self._stride).ravel(), side="left")
        return found.reshape(x.shape) - rows * self._m

    def at(self, table: np.ndarray, i: np.ndarray) -> np.ndarray:
        """``table[check, i]`` for each check (the first axis of ``i``)."""
        rows = np.arange(self._k).reshape((self._k,) + (1,) * (i.ndim - 1))
        return table[rows, i]

