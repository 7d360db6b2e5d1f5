"""One step ahead: the expected information and the expected cost of observation of checks.

For a check ``k`` of ``c_k`` minutes with outcomes ``o``, the expected cost
of observation (myopic value of information) is

    ECO(k) = c_k + Σ_o P(o) · ECR(after o)

where ``ECR(after o)`` is the expected cost of repair
(:mod:`diagnose.reasoning.repair_cost`) of the p/c order re-sorted for the
posterior after outcome ``o`` (Heckerman, Breese and Rommelse, 1995:
observe first when the ECO of the best check is below the ECR of repairing
now). The expected information of a check is the mutual information between
its outcome and the hypothesis,

    I(k) = H(P) − Σ_o P(o) · H(P | o)   (bits)

(Cover and Thomas, 2006, 2.4).

Hypotheses that a check does not list all scale by the same factor
``alpha`` after an outcome, so only the repairs serving a listed hypothesis
change place in the p/c order; they are taken out and merged back into the
unchanged order of the rest with prefix sums. Everything runs over flat
arrays of the real (check, outcome) pairs and (check, outcome, moved
repair) triples, never padded to the widest check (:class:`Layout`, built
once per model). :class:`Lookahead` gives the information of every
candidate at once (the decision rule needs it to know which checks can be
chosen) and the ECO of the checks asked for, so that the planner pays for
the ECO of a check only when it can be chosen or when a table shows it.

The results equal those of :mod:`diagnose.reasoning.lookahead_reference`
(the first, padded version) to rounding; the tests compare them.

References:
    D. Heckerman, J. S. Breese, K. Rommelse, "Decision-theoretic
    troubleshooting", Communications of the ACM 38(3):49-57, 1995 (volume
    and pages from memory).
    T. M. Cover, J. A. Thomas, *Elements of Information Theory*, 2nd ed.,
    2006, 2.4 (mutual information; from memory).
"""

from __future__ import annotations

import weakref
from typing import NamedTuple

import numpy as np

from diagnose.reasoning.lookahead_dense import DenseLookahead, DenseRows
from diagnose.reasoning.repair_cost import PcOrder, pc_order
from diagnose.reasoning.tables import Tables

__all__ = ["DENSE_HYPOTHESES", "Layout", "Lookahead", "layout_for", "lookahead"]

DENSE_HYPOTHESES = 256  # up to this many hypotheses the posteriors are written out in full


def _entropy_terms(x: np.ndarray) -> np.ndarray:
    """x · log2(x), with 0 · log 0 = 0."""
    out = np.zeros_like(x)
    pos = x > 0
    out[pos] = x[pos] * np.log2(x[pos])
    return out


class Layout:
    """The check tables of one model as flat arrays over the real (check, outcome) pairs.

    Pairs: ``pair_check`` and ``pair_normal`` (P(outcome) for the hypotheses
    the check does not list); check ``k`` has pairs ``pair_start[k]`` to
    ``pair_start[k] + n_out[k]``. Exceptions (a hypothesis a check lists,
    as in :class:`~diagnose.reasoning.tables.Tables`): ``ex_check``,
    ``ex_hyp``. Their rows, one entry per (exception, outcome), kept small
    (they are the bulk with pairs of causes): ``q_ex`` (the exception),
    ``q_local`` (the outcome's place in its check) and ``q_lik``
    (P(outcome | hypothesis)).
    """

    def __init__(self, tables: Tables) -> None:
        n_out = tables.check_outcomes.astype(np.int64)
        self.n_checks = len(n_out)
        self.n_out = n_out
        self.pair_start = np.cumsum(n_out) - n_out
        self.pair_check = np.repeat(np.arange(self.n_checks), n_out)
        self.n_pairs = len(self.pair_check)
        local = np.arange(self.n_pairs) - self.pair_start[self.pair_check]
        self.pair_normal = tables.check_normal[self.pair_check, local]
        self.ex_check, self.ex_hyp = tables.ex_check, tables.ex_hyp
        per_ex = n_out[self.ex_check]
        X = len(self.ex_check)
        self.q_ex = np.repeat(np.arange(X, dtype=np.int32 if X < 2**31 else np.int64), per_ex)
        local = np.arange(len(self.q_ex)) - (np.cumsum(per_ex) - per_ex)[self.q_ex]
        self.q_lik = tables.ex_rows[self.q_ex, local]
        self.q_local = local.astype(np.int16)
        for name in ("pair_normal", "q_lik"):
            getattr(self, name).flags.writeable = False
        self._n_hyp, self._n_repairs = tables.n_hyp, len(tables.repair_ids)
        self._dense: DenseRows | None = None

    def dense(self) -> DenseRows:
        """P(outcome | hypothesis) of every pair, pairs × hypotheses (built on first use)."""
        if self._dense is None:
            rows = np.repeat(self.pair_normal[:, None], self._n_hyp, axis=1)
            q_pair = self.pair_start[self.ex_check[self.q_ex]] + self.q_local
            rows[q_pair, self.ex_hyp[self.q_ex]] = self.q_lik
            self._dense = DenseRows(rows, self.pair_check, self.n_checks, self._n_repairs)
        return self._dense


_LAYOUTS: weakref.WeakKeyDictionary[Tables, Layout] = weakref.WeakKeyDictionary()


def layout_for(tables: Tables) -> Layout:
    """The (cached) :class:`Layout` of ``tables``; it lives as long as they do."""
    out = _LAYOUTS.get(tables)
    if out is None:
        out = _LAYOUTS[tables] = Layout(tables)
    return out


class _Split(NamedTuple):
    """How the outcomes of the candidates split the posterior (arrays over all checks/pairs).

    Per check: ``p_exc``, the mass it lists. Per pair: ``z`` = P(outcome),
    ``safe_z`` (1 where z is 0) and ``alpha``, the factor the hypotheses the
    check does not list scale by. Per selected row entry ``qs`` (indices
    into the layout's ``q_*``): its exception ``q_x``, its pair ``q_pair``
    and ``new_ex``, its hypothesis's posterior after the outcome.
    """

    p_exc: np.ndarray
    z: np.ndarray
    safe_z: np.ndarray
    alpha: np.ndarray
    qs: np.ndarray
    q_x: np.ndarray
    q_pair: np.ndarray
    new_ex: np.ndarray


def _split(lay: Layout, p: np.ndarray, sel: np.ndarray) -> _Split:
    """P(outcome) of each selected check and the posterior after it (see :class:`_Split`)."""
    K, NP = lay.n_checks, lay.n_pairs
    sel_x = sel[lay.ex_check]
    xs = np.flatnonzero(sel_x)
    qs = np.flatnonzero(sel_x[lay.q_ex])
    q_x = lay.q_ex[qs]
    q_pair = lay.pair_start[lay.ex_check[q_x]] + lay.q_local[qs]
    p_exc = np.bincount(lay.ex_check[xs], weights=p[lay.ex_hyp[xs]], minlength=K)
    pq = p[lay.ex_hyp[q_x]] * lay.q_lik[qs]
    z = lay.pair_normal * (1.0 - p_exc)[lay.pair_check]
    z += np.bincount(q_pair, weights=pq, minlength=NP)
    z = np.clip(z, 0.0, None)
    live = z > 0
    safe_z = np.where(live, z, 1.0)
    alpha = np.where(live, lay.pair_normal / safe_z, 0.0)
    new_ex = pq / safe_z[q_pair]
    return _Split(p_exc, z, safe_z, alpha, qs, q_x, q_pair, new_ex)


def _information(lay: Layout, p: np.ndarray, sel: np.ndarray, split: _Split) -> np.ndarray:
    """Mutual information (bits) between each check's outcome and the hypothesis (all checks;
    meaningful where ``sel``)."""
    K, NP = lay.n_checks, lay.n_pairs
    xs = np.flatnonzero(sel[lay.ex_check])
    pl = _entropy_terms(p)
    total = pl.sum()
    s_non = total - np.bincount(lay.ex_check[xs], weights=pl[lay.ex_hyp[xs]], minlength=K)
    m_non = np.clip(1.0 - split.p_exc, 0.0, None)
    t_ex = np.bincount(split.q_pair, weights=_entropy_terms(split.new_ex), minlength=NP)
    pc = lay.pair_check
    alpha = split.alpha
    h_post = -(alpha * s_non[pc] + _entropy_terms(alpha) * m_non[pc] + t_ex)
    ps = np.flatnonzero(sel[pc])
    z_h = np.bincount(pc[ps], weights=(split.z * h_post)[ps], minlength=K)
    return np.clip(-total - z_h, 0.0, None)


class _Moved(NamedTuple):
    """The repairs an outcome moves: (check, repair) pairs ``t`` and (pair, repair) triples.

    Per ``t``, sorted by check then repair: ``uk``, ``ur``. Per triple (one per
    outcome of ``t``'s check): ``t_of``, ``pair``, and ``p_new``, P(the repair
    cures) after the outcome.
    """

    uk: np.ndarray
    ur: np.ndarray
    t_of: np.ndarray
    pair: np.ndarray
    p_new: np.ndarray


def _moved(lay: Layout, p: np.ndarray, sel: np.ndarray, split: _Split, order: PcOrder, *,
           assign: np.ndarray, success: np.ndarray) -> _Moved:
    """The repairs serving a hypothesis a selected check lists, with P(cure) after each outcome."""
    R = len(order.mass)
    xc = np.flatnonzero(sel[lay.ex_check])
    er = assign[lay.ex_hyp[xc]]
    v = er >= 0
    xv = xc[v]
    key = lay.ex_check[xv] * R + er[v]
    uniq, inv = np.unique(key, return_inverse=True)
    uk, ur = uniq // R, uniq % R
    U = len(uniq)
    rest = np.clip(order.mass[ur] - np.bincount(inv, weights=p[lay.ex_hyp[xv]], minlength=U),
                   0.0, None)
    nt = lay.n_out[uk]
    t_start = np.cumsum(nt) - nt
    t_of = np.repeat(np.arange(U), nt)
    local = np.arange(len(t_of)) - t_start[t_of]
    pair = lay.pair_start[uk[t_of]] + local
    # each row entry of a moved repair's hypotheses goes to its (t, outcome) triple
    x_t = np.full(len(lay.ex_check), -1, dtype=np.int64)
    x_t[xv] = inv
    t_q = x_t[split.q_x]
    keep = t_q >= 0
    trip = t_start[t_q[keep]] + lay.q_local[split.qs[keep]]
    new_mass = (np.bincount(trip, weights=split.new_ex[keep], minlength=len(t_of))
                + split.alpha[pair] * rest[t_of])
    return _Moved(uk, ur, t_of, pair, success[ur][t_of] * new_mass)


class _Segments:
    """The moved repairs of each check by their place in the global order, with prefix sums.

    ``sums(name, k, i)``: Σ over the first ``i`` moved repairs of check ``k``
    (by global place) of ``p`` (P cure now), ``c`` (minutes), ``pc`` (p times
    the global minutes after it), ``cp`` (c times the global P before it) or
    ``ct`` (Σ over moved pairs a before b of p_a c_b); ``below(k, x)``: how
    many moved repairs of check ``k`` sit before global place ``x``.
    """

    def __init__(self, lay: Layout, moved: _Moved, order: PcOrder) -> None:
        N = len(order.rhos)
        self._stride = N + 2
        rank = order.rank[moved.ur]
        rk = np.where(rank >= 0, rank, N + 1)
        skey = moved.uk * self._stride + rk
        by = np.argsort(skey, kind="stable")
        self._keys = skey[by]
        rk = rk[by]
        inside = rk <= N
        sp = order.prob[moved.ur[by]] * inside
        sc = order.c[moved.ur[by]] * inside
        srk = np.minimum(rk, N)
        counts = np.bincount(moved.uk, minlength=lay.n_checks)
        self.start = np.cumsum(counts) - counts
        cum = {"p": sp, "c": sc, "pc": sp * order.c_from[np.minimum(srk + 1, N)],
               "cp": sc * order.p_before[srk]}
        self._cum = {k: np.concatenate([[0.0], np.cumsum(v)]) for k, v in cum.items()}
        k_of = moved.uk[by]
        p_in = self._cum["p"][:-1] - self._cum["p"][self.start[k_of]]
        self._cum["ct"] = np.concatenate([[0.0], np.cumsum(sc * p_in)])

    def below(self, k: np.ndarray, x: np.ndarray) -> np.ndarray:
        return np.searchsorted(self._keys, k * self._stride + x, side="left") - self.start[k]

    def sums(self, name: str, k: np.ndarray, i: np.ndarray) -> np.ndarray:
        cum = self._cum[name]
        s0 = self.start[k]
        return cum[s0 + i] - cum[s0]


def _ecr_after(lay: Layout, groups: np.ndarray, split: _Split, moved: _Moved, order: PcOrder,
               escalation: float) -> np.ndarray:
    """ECR after each outcome (pairs ``groups``): the moved repairs merge, the rest scale.

    The repairs of the global p/c order that an outcome does not move keep
    their order and scale by ``alpha``; those worth trying (ratio at least
    1/E) are a prefix of that order, cut at ``n_cut``. The moved repairs are
    taken out and merged back at their new place.
    """
    E = escalation
    rhos, p_before, c_from, g_cum = order.rhos, order.p_before, order.c_from, order.g_cum
    G = len(groups)
    seg = _Segments(lay, moved, order)
    alpha = split.alpha[groups]
    live = alpha > 0
    safe_alpha = np.where(live, alpha, 1.0)
    n_cut = np.where(live, np.searchsorted(-rhos, -(1.0 / (safe_alpha * E)), side="right"), 0)
    kg = lay.pair_check[groups]
    i_cut = seg.below(kg, n_cut)
    cc_cut = seg.sums("c", kg, i_cut)
    g_b = (g_cum[n_cut] - p_before[n_cut] * c_from[n_cut]
           - (seg.sums("pc", kg, i_cut) - c_from[n_cut] * seg.sums("p", kg, i_cut)
              + seg.sums("cp", kg, i_cut)) + seg.sums("ct", kg, i_cut))
    p_b = p_before[n_cut] - seg.sums("p", kg, i_cut)
    c_b = c_from[0] - c_from[n_cut] - cc_cut

    group_of = np.full(lay.n_pairs, -1, dtype=np.int64)
    group_of[groups] = np.arange(G)
    tg = group_of[moved.pair]
    c_t = order.c[moved.ur][moved.t_of]
    rho = moved.p_new / np.where(c_t > 0, c_t, 1.0)
    valid = (moved.p_new > 0) & (rho >= 1.0 / E)
    pn = np.where(valid, moved.p_new, 0.0)
    ce = np.where(valid, c_t, 0.0)
    rho = np.where(valid, rho, 0.0)
    pos = np.searchsorted(-rhos, -(rho / safe_alpha[tg]), side="left")
    pos = np.minimum(pos, n_cut[tg])
    k_t = moved.uk[moved.t_of]
    i_pos = seg.below(k_t, pos)
    before_p = p_before[pos] - seg.sums("p", k_t, i_pos)
    after_c = c_from[pos] - c_from[n_cut[tg]] - (cc_cut[tg] - seg.sums("c", k_t, i_pos))
    cross = np.bincount(tg, weights=alpha[tg] * ce * before_p + pn * after_c, minlength=G)
    # the moved repairs among themselves, in their new p/c order
    by = np.lexsort((-rho, tg))
    pn_s = pn[by]
    cum = np.concatenate([[0.0], np.cumsum(pn_s)])
    first = np.cumsum(np.bincount(tg, minlength=G)) - np.bincount(tg, minlength=G)
    tg_s = tg[by]
    aa = np.bincount(tg_s, weights=ce[by] * (cum[:-1] - cum[first[tg_s]]), minlength=G)
    c_seq = c_b + np.bincount(tg, weights=ce, minlength=G)
    p_seq = alpha * p_b + np.bincount(tg, weights=pn, minlength=G)
    pairs = alpha * g_b + cross + aa
    return c_seq - pairs + E * (1.0 - p_seq)


class Lookahead:
    """The look-ahead of one posterior: information of every candidate, ECO on demand.

    ``cand`` indexes ``tables.check_ids``; ``assign`` maps hypotheses to
    repairs (see :func:`~diagnose.reasoning.repair_cost.assign_repairs`);
    ``repair_cost`` is the minutes of each repair; ``escalation`` is E, the
    minutes of an escalation. ``neutral`` (optional, one flag per pair of the
    :class:`Layout`): outcomes after which no repair may follow, so that
    their ECR is an escalation (see :mod:`diagnose.reasoning.planner`).

    ``bits`` (per candidate) and ``ecr_now`` are computed at once;
    :meth:`eco` computes the ECO of the checks asked for. ``method``:
    "dense" (every posterior written out,
    :mod:`~diagnose.reasoning.lookahead_dense`) or "merge" (the moved repairs
    merged into the order of the rest); by default "dense" for a model of
    at most ``DENSE_HYPOTHESES`` hypotheses.
    """

    def __init__(self, tables: Tables, p: np.ndarray, cand: np.ndarray, assign: np.ndarray,
                 repair_cost: np.ndarray, *, escalation: float,
                 neutral: np.ndarray | None = None, method: str | None = None) -> None:
        self._lay = lay = layout_for(tables)
        self._escalation, self._neutral = escalation, neutral
        self.cand = np.asarray(cand, dtype=np.int64)
        method = method or ("dense" if tables.n_hyp <= DENSE_HYPOTHESES else "merge")
        self._dense: DenseLookahead | None = None
        if method == "dense":
            self._dense = DenseLookahead(
                lay.dense(), p, self.cand, assign=assign, success=tables.success,
                repair_cost=repair_cost, escalation=escalation)
            self.bits = self._dense.bits
            return
        self._p, self._assign, self._success = p, assign, tables.success
        self.order = pc_order(tables, p, assign, repair_cost)
        self._ecr_now = self.order.ecr(escalation)
        sel = np.zeros(lay.n_checks, dtype=bool)
        sel[self.cand] = True
        self._split = _split(lay, p, sel)
        self.bits = _information(lay, p, sel, self._split)[self.cand] if len(self.cand) \
            else np.zeros(0)

    @property
    def ecr_now(self) -> float:
        """The ECR now: the expected minutes of repairing in p/c order without a check."""
        return self._dense.ecr_now if self._dense is not None else self._ecr_now

    def eco(self, checks: np.ndarray, check_cost: np.ndarray) -> np.ndarray:
        """ECO of ``checks`` (indices of candidates into ``tables.check_ids``), in their order.

        ``check_cost`` is the minutes of each of them (with prerequisites and setup).
        """
        checks = np.asarray(checks, dtype=np.int64)
        if len(checks) == 0:
            return np.zeros(0)
        if self._dense is not None:
            return self._dense.eco(checks, check_cost, self._neutral)
        lay = self._lay
        sel = np.zeros(lay.n_checks, dtype=bool)
        sel[checks] = True
        moved = _moved(lay, self._p, sel, self._split, self.order, assign=self._assign,
                       success=self._success)
        groups = np.flatnonzero(sel[lay.pair_check])
        z = self._split.z[groups]
        after = _ecr_after(lay, groups, self._split, moved, self.order, self._escalation)
        if self._neutral is not None:
            after = np.where(self._neutral[groups], self._escalation, after)
        per_check = np.bincount(lay.pair_check[groups], weights=z * after,
                                minlength=lay.n_checks)
        return check_cost + per_check[checks]


def lookahead(tables: Tables, p: np.ndarray, cand: np.ndarray, check_cost: np.ndarray,
              assign: np.ndarray, repair_cost: np.ndarray, *, escalation: float,
              method: str | None = None) -> tuple[np.ndarray, np.ndarray, float]:
    """Expected information (bits) and ECO of each candidate check, and ECR now.

    ``cand`` indexes ``tables.check_ids``; ``check_cost`` is per candidate;
    ``assign`` maps hypotheses to repairs (see
    :func:`~diagnose.reasoning.repair_cost.assign_repairs`); ``escalation``
    is E, the minutes of an escalation; ``method`` as for :class:`Lookahead`.
    Every candidate's ECO is computed; the planner asks :class:`Lookahead`
    for those it needs only.

    >>> from diagnose.reasoning.synthetic import tiny_model
    >>> from diagnose.reasoning.tables import tables_for
    >>> t = tables_for(tiny_model())
    >>> p = np.exp(t.log_prior)
    >>> none = np.full(t.n_hyp, -1)  # no repair serves any hypothesis
    >>> bits, eco, ecr = lookahead(t, p, np.array([0, 1]), t.check_minutes[[0, 1]], none,
    ...                            t.minutes, escalation=480.0)
    >>> ecr, [round(float(x), 9) for x in eco - t.check_minutes[[0, 1]]]  # escalation anyway
    (480.0, [480.0, 480.0])
    """
    la = Lookahead(tables, p, cand, assign, repair_cost, escalation=escalation, method=method)
    return la.bits, la.eco(la.cand, np.asarray(check_cost, dtype=float)), la.ecr_now
