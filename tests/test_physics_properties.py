"""Properties that hold for every input, checked with hypothesis."""

from __future__ import annotations

from hypothesis import given, settings
from hypothesis import strategies as st

from diagnose.physics import evaluate
from diagnose.physics.copper import resistance_at
from diagnose.physics.release import needed_volts, release_margin

positive = st.floats(min_value=0.01, max_value=1000, allow_nan=False, allow_infinity=False)
gap_mm = st.floats(min_value=0.01, max_value=5, allow_nan=False, allow_infinity=False)
temperature = st.floats(min_value=-40, max_value=200, allow_nan=False, allow_infinity=False)
FAST = settings(max_examples=60, deadline=None)


@FAST
@given(volts=positive, t=temperature, g1=gap_mm, g2=gap_mm, pull_in=st.floats(0.3, 1.0))
def test_a_larger_gap_never_raises_the_release_margin(volts, t, g1, g2, pull_in):
    small, large = sorted((g1, g2))
    margin = [release_margin(volts, needed_volts(24, pull_in, t, g, 0.25)) for g in (small, large)]
    assert margin[1] <= margin[0]


@FAST
@given(g1=gap_mm, g2=gap_mm, volts=st.floats(1, 40))
def test_a_larger_gap_never_improves_the_release_verdict(g1, g2, volts):
    order = ["will_not_release", "marginal", "releases"]
    small, large = sorted((g1, g2))
    verdicts = [evaluate("release", {"rated_voltage": 24, "volts": volts, "nominal_gap": 0.25,
                                     "gap": g}).verdict for g in (small, large)]
    assert order.index(verdicts[1]) <= order.index(verdicts[0])


@FAST
@given(r20=positive, t1=temperature, t2=temperature)
def test_a_hotter_coil_never_lowers_the_expected_resistance(r20, t1, t2):
    cold, hot = sorted((t1, t2))
    assert resistance_at(r20, hot) >= resistance_at(r20, cold)


@FAST
@given(t1=temperature, t2=temperature)
def test_a_hotter_coil_never_lowers_the_expected_figure(t1, t2):
    cold, hot = sorted((t1, t2))
    expected = [evaluate("coil", {"rated_voltage": 24, "rated_power": 20, "ohms": 28.8,
                                  "temperature": f"{t!r} degC"}).figures["expected"].value
                for t in (cold, hot)]
    assert expected[1] >= expected[0]


def _inches(mm: float) -> str:
    return f"{mm / 25.4!r} in"  # 1 in = 25.4 mm exactly (NIST SP 811)


@FAST
@given(readings=st.lists(st.floats(0, 2, allow_nan=False), min_size=3, max_size=6),
       nominal=st.floats(0.1, 0.5), extra=st.floats(0.05, 1), spread=st.floats(0.05, 1))
def test_gap_verdict_is_the_same_in_mm_and_inches(readings, nominal, extra, spread):
    limit = nominal + extra
    mm = evaluate("gap", {"readings": [f"{r!r} mm" for r in readings], "nominal": f"{nominal!r} mm",
                          "max": f"{limit!r} mm", "spread": f"{spread!r} mm"})
    inch = evaluate("gap", {"readings": [_inches(r) for r in readings], "nominal": _inches(nominal),
                            "max": _inches(limit), "spread": _inches(spread)})
    assert mm.verdict == inch.verdict


@FAST
@given(readings=st.lists(st.floats(-1, 1, allow_nan=False), min_size=2, max_size=8),
       limit=st.floats(0.001, 1))
def test_runout_verdict_is_the_same_in_mm_and_inches(readings, limit):
    mm = evaluate("runout", {"readings": [f"{r!r} mm" for r in readings], "limit": f"{limit!r} mm"})
    inch = evaluate("runout", {"readings": [_inches(r) for r in readings], "limit": _inches(limit)})
    assert mm.verdict == inch.verdict


@FAST
@given(tir=st.sampled_from([0.0, 0.001, 0.002, 0.003, 0.004, 0.005, 0.006, 0.007, 0.008]),
       limit=st.sampled_from([0.002, 0.004, 0.006, 0.008, 0.012]))
def test_runout_at_typed_edges_mm_and_inches_agree(tir, limit):
    # values exactly at the limit, typed in inches and in mm (x 25.4, NIST SP 811)
    inch = evaluate("runout", {"readings": ["0 in", f"{tir} in"], "limit": f"{limit} in"})
    mm = evaluate("runout", {"readings": ["0 mm", f"{tir * 25.4} mm"],
                             "limit": f"{limit * 25.4} mm"})
    assert inch.verdict == mm.verdict == ("ok" if tir <= limit else "out_of_tolerance")
