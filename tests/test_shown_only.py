"""What is shown is worked out alone: the leading causes, the first checks, the order of all.

The shell shows the leading causes and the first rows of the checks table;
with thousands of causes it asks only for those (``Session.ranking(limit)``,
``Plan.checks(limit)``, ``Session.checks_table(limit)``). What it draws must
be what it drew from the whole ranking and every row, and the order of the
checks (:func:`diagnose.reasoning.ties.by_preference`, sorted at once) must be
the rule's order as written: every check grouped in turn.
"""

from __future__ import annotations

import io

import numpy as np
import pytest
from rich.console import Console

from diagnose.kb.loader import load_model
from diagnose.kb.model import UNKNOWN_CAUSE
from diagnose.reasoning.actions import ChecksTable
from diagnose.reasoning.evidence import Evidence
from diagnose.reasoning.posterior import posterior
from diagnose.reasoning.synthetic import synthetic_model, tiny_model
from diagnose.reasoning.ties import BITS_ATOL, TIE_RTOL, by_preference
from diagnose.session import Session
from diagnose.views import RankingView
from diagnose.views_reasoning import ChecksTableView


def _text(thing) -> str:
    console = Console(file=io.StringIO(), width=80, color_system=None)
    console.print(thing)
    return console.file.getvalue()


# --- the order of the checks ---------------------------------------------------------------

def _as_written(idx, eco, bits, minutes, ids):
    """The rule of ``ties`` grouping every check in turn (the order before it was sorted at
    once): costs from the least up, a group of those within the tolerance of its first; inside
    it bits from the most down the same way, then minutes, then the id."""
    def groups(ordered, values, atol):
        out = []
        for i in ordered:
            if out and abs(values[i] - values[out[-1][0]]) <= \
                    TIE_RTOL * abs(values[out[-1][0]]) + atol:
                out[-1].append(i)
            else:
                out.append([i])
        return out

    out = []
    for group in groups(sorted(idx, key=lambda i: eco[i]), eco, 0.0):
        for inner in groups(sorted(group, key=lambda i: -bits[i]), bits, BITS_ATOL):
            out += sorted(inner, key=lambda i: (minutes[i], ids[i]))
    return [int(i) for i in out]


@pytest.mark.parametrize("seed", range(300))
def test_the_checks_sorted_at_once_keep_the_order_of_the_rule_as_written(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(0, 80))
    # few distinct costs, each nudged by less or more than the tolerance: many near ties
    eco = rng.choice(rng.uniform(0, 100, int(rng.integers(1, 8))), size=n) \
        * (1 + rng.choice([0, 0.3, 0.9, 1.1, 2, 5], size=n) * TIE_RTOL)
    if seed % 5 == 0:
        eco[rng.random(n) < 0.2] = np.inf
    if seed % 7 == 0:
        eco[rng.random(n) < 0.3] = 0.0
    bits = rng.choice([0.0, 0.5, 0.9], size=n) * (1 + rng.choice([0, 0.5, 2], size=n) * TIE_RTOL) \
        + rng.choice([0, 1e-13, 3e-12], size=n)
    minutes = rng.choice([1.0, 5.0, 5.0], size=n)
    ids = [f"c{int(x)}" for x in rng.permutation(n)]
    idx = rng.permutation(n)[: int(rng.integers(0, n + 1))] if n else np.arange(0)
    if seed % 2:
        idx = np.sort(idx)
    with np.errstate(invalid="ignore"):  # inf - inf in the rule as written
        assert by_preference(idx, eco, bits, minutes, ids) == \
            _as_written(list(idx), eco, bits, minutes, ids)


def test_a_cost_of_nan_is_grouped_in_turn():
    eco = np.array([3.0, np.nan, 1.0, 1.0])
    bits, minutes, ids = np.array([0.1, 0.2, 0.3, 0.4]), np.ones(4), ("d", "c", "b", "a")
    with np.errstate(invalid="ignore"):
        assert by_preference(np.arange(4), eco, bits, minutes, ids) == \
            _as_written(list(range(4)), eco, bits, minutes, ids)


# --- the views --------------------------------------------------------------------------------

def _states(model, seed, steps=10, **options):
    """A session's states along the planner's proposals, answered at random."""
    rng = np.random.default_rng(seed)
    s = Session(model, **options)
    complaints = list(model.complaints)
    s.add_complaint(complaints[int(rng.integers(len(complaints)))])
    params = [p for p in model.parameters.values() if p.choices]
    if params and seed % 2:
        p = params[int(rng.integers(len(params)))]
        s.set_nameplate(p.id, str(rng.choice(list(p.choices))))
    yield s
    for _ in range(steps):
        a = s.next_action()
        if a.kind == "check" and a.id:
            s.answer(a.id, str(rng.choice(model.checks[a.id].outcomes)))
        elif a.kind == "repair" and a.id:
            s.repair(a.id, False)
        else:
            return
        yield s


MODELS = [tiny_model(), synthetic_model(60, seed=3)] + [
    load_model(name) for name in ("spring-applied-brake", "permanent-magnet-brake")]


@pytest.mark.parametrize("model", MODELS, ids=lambda m: m.id)
@pytest.mark.parametrize("max_faults", [1, 2])
def test_the_views_from_the_leading_entries_are_the_views_of_the_whole(model, max_faults):
    for seed in range(4):
        for s in _states(model, seed, max_faults=max_faults):
            whole = s.ranking()
            for top in (1, 2, 5, 8):
                view = RankingView.of(s.ranking(limit=RankingView.entries_for(top)), top=top)
                assert view.shown() == RankingView.of(whole, top=top).shown()
                assert _text(view) == _text(RankingView.of(whole, top=top))
            assert s.ranking(limit=1).top == whole.top
            known = [e for e in whole.entries if e.cause != UNKNOWN_CAUSE]
            assert [e for e in s.ranking(limit=2).entries if e.cause != UNKNOWN_CAUSE][:1] \
                == known[:1]
            table = s.checks_table(limit=ChecksTable.shown)
            assert _text(ChecksTableView(table)) == _text(ChecksTableView(s.checks_table()))


def test_a_limited_ranking_ends_with_the_unknown_when_it_is_not_among_the_leading():
    m = synthetic_model(60, seed=3)
    ev = Evidence(complaints=(next(iter(m.complaints)),))
    post = posterior(m, ev)
    r = post.ranking(3, unknown=True)
    causes = [e.cause for e in r.entries]
    assert UNKNOWN_CAUSE in causes and len(causes) in (3, 4)
    assert [e.p for e in r.entries] == sorted((e.p for e in r.entries), reverse=True)
    assert post.ranking(3).entries == r.entries[:3]


def test_the_session_works_out_a_ranking_once_per_state():
    s = Session(tiny_model())
    s.add_complaint("will_not_release")
    assert s.ranking(limit=6) is s.ranking(limit=6) and s.ranking() is s.ranking()
    before = s.ranking(limit=6)
    s.answer("listen_click", "silent")
    assert s.ranking(limit=6) is not before
