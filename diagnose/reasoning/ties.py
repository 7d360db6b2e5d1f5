"""Ties between checks: when two expected costs are equal, and which check goes first then.

Two expected costs (minutes) count as equal when the higher exceeds the lower
by at most ``TIE_RTOL`` (1e-9) of the lower; a cost is *lower* than another
only when it is lower by more than that. Among the checks whose expected cost
of observation ties with the least, the one with more expected information
goes first (bits within ``TIE_RTOL`` of the most, or ``BITS_ATOL``, 1e-12 bit,
are equal), then the one of fewer minutes (with its prerequisites and setup),
then the one whose id comes first in alphabetical order.

Without the rule, checks of equal cost (two checks alike in minutes and
effects, a common case) would be told apart by the rounding of the
arithmetic: any change to the way the costs are computed would change the
choice. The planner and its reference use the same rule, so they choose
the same check (see :mod:`diagnose.reasoning.policy`); the checks table
lists the checks in the same order.

>>> eco = np.array([10.0, 10.0 + 1e-12, 9.0 + 2.0])
>>> bits = np.array([0.5, 0.7, 0.9])
>>> best_check(np.arange(3), eco, bits, np.array([5.0, 5.0, 5.0]), ("b", "a", "c"))
1
>>> cheaper(10.0, 10.0 + 1e-12), cheaper(10.0, 10.1)
(False, True)
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

__all__ = ["BITS_ATOL", "TIE_RTOL", "best_check", "by_preference", "cheaper"]

TIE_RTOL = 1e-9  # expected costs (and bits) closer than this share of the larger are equal
BITS_ATOL = 1e-12  # bits this close are equal even near 0


def cheaper(a: float | np.ndarray, b: float | np.ndarray) -> bool | np.ndarray:
    """Whether expected cost ``a`` is lower than ``b`` by more than the tolerance."""
    # (numpy's float64 is a float: the common case skips np.ndim)
    if (isinstance(a, float) and isinstance(b, float)) or (np.ndim(a) == 0 and np.ndim(b) == 0):
        return float(b) - float(a) > TIE_RTOL * abs(float(a))
    return np.asarray(b) - a > TIE_RTOL * np.abs(a)


def _same(anchor: float, x: np.ndarray, atol: float = 0.0) -> np.ndarray:
    """Where ``x`` equals ``anchor`` (the least cost, or the most bits) within the tolerance."""
    return np.abs(x - anchor) <= TIE_RTOL * abs(anchor) + atol


def best_check(idx: np.ndarray, eco: np.ndarray, bits: np.ndarray, minutes: np.ndarray,
               ids: Sequence[str]) -> int:
    """The check of ``idx`` that goes first: least ECO, then most bits, fewest minutes, id.

    ``eco``, ``bits`` and ``minutes`` are indexed by check, as ``ids``;
    ``idx`` must not be empty. (A few dozen checks at most: plain floats,
    the same arithmetic as :func:`by_preference`.)
    """
    idx = np.asarray(idx)
    e = eco[idx].tolist()
    least = min(e)
    within = TIE_RTOL * abs(least) + 0.0  # as _same(least, ...)
    tie = [i for i, x in zip(idx.tolist(), e) if abs(x - least) <= within]
    if len(tie) > 1:
        b = bits[tie].tolist()
        most = max(b)
        within = TIE_RTOL * abs(most) + BITS_ATOL
        tie = [i for i, x in zip(tie, b) if abs(x - most) <= within]
    if len(tie) > 1:
        m = minutes[tie].tolist()
        fewest = min(m)
        tie = [i for i, x in zip(tie, m) if x == fewest]
    return min(tie, key=lambda i: ids[i])


def by_preference(idx: np.ndarray, eco: np.ndarray, bits: np.ndarray, minutes: np.ndarray,
                  ids: Sequence[str]) -> list[int]:
    """The checks of ``idx`` in the order of the rule (the first is :func:`best_check`).

    Costs are grouped from the least up: a group holds the costs equal to
    its least; inside a group, bits are grouped from the most down the same
    way, then minutes and id decide.

    (Thousands of checks: the costs are sorted at once and only the runs of
    costs close enough to tie are grouped one by one; a group of more than
    one check is ordered by the rule as written. The same order as grouping
    every check in turn.)
    """
    idx = np.asarray(idx, dtype=np.intp)
    e = eco[idx]
    if np.isnan(e).any():  # no order among NaNs: group them as they come
        return _in_turn(idx.tolist(), eco, bits, minutes, ids)
    ordered = idx[np.argsort(e, kind="stable")]  # as sorted(): equal costs keep idx's order
    start = _starts(eco[ordered], 0.0)
    if start.all():
        return ordered.tolist()
    out = ordered.tolist()
    firsts = np.flatnonzero(start).tolist() + [len(out)]
    for a, b in zip(firsts, firsts[1:]):
        if b - a > 1:
            out[a:b] = _inside(out[a:b], bits, minutes, ids)
    return out


def _in_turn(idx: list[int], eco: np.ndarray, bits: np.ndarray, minutes: np.ndarray,
             ids: Sequence[str]) -> list[int]:
    """:func:`by_preference` as the rule is written: every check grouped in turn."""
    out: list[int] = []
    for group in _groups(sorted(idx, key=lambda i: eco[i]), eco, 0.0):
        out += _inside(group, bits, minutes, ids)
    return out


def _inside(group: list[int], bits: np.ndarray, minutes: np.ndarray,
            ids: Sequence[str]) -> list[int]:
    """A group of equal costs in order: bits grouped from the most down, then minutes, id."""
    out: list[int] = []
    for inner in _groups(sorted(group, key=lambda i: -bits[i]), bits, BITS_ATOL):
        out += sorted(inner, key=lambda i: (minutes[i], ids[i]))
    return out


def _groups(ordered: list[int], values: np.ndarray, atol: float) -> list[list[int]]:
    """Runs of ``ordered`` whose values equal the run's first value within the tolerance."""
    out: list[list[int]] = []
    for i in ordered:
        if out and bool(_same(float(values[out[-1][0]]), np.asarray(values[i]), atol)):
            out[-1].append(i)
        else:
            out.append([i])
    return out


def _starts(v: np.ndarray, atol: float) -> np.ndarray:
    """Where a group of :func:`_groups` starts in ``v`` (sorted, least first; no NaN).

    A value that joins its predecessor's group is within the tolerance of the
    group's first value, so it is within it of its predecessor too (four
    times the tolerance is ample for the rounding): only those neighbours are
    tested, in turn, against the first value of their group.
    """
    start = np.ones(len(v), dtype=bool)
    if len(v) < 2:
        return start
    with np.errstate(invalid="ignore"):  # inf - inf: NaN, never near
        scale = np.maximum(np.abs(v[1:]), np.abs(v[:-1]))
        near = np.abs(v[1:] - v[:-1]) <= 4.0 * (TIE_RTOL * scale + atol)
    anchor = 0.0
    for j in np.flatnonzero(near).tolist():  # from position j to j + 1
        if start[j]:
            anchor = float(v[j])
        if bool(_same(anchor, np.asarray(v[j + 1]), atol)):
            start[j + 1] = False
    return start
