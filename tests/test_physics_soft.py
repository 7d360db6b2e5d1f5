"""Soft evidence near a band edge."""

from __future__ import annotations

import pytest

from diagnose.errors import InputError
from diagnose.physics.soft import soft_verdict

COIL = {"rated_voltage": "24 V", "rated_power": "20 W"}


def test_far_from_an_edge_no_weights():
    v = soft_verdict("coil", {**COIL, "ohms": "28.8 ohm"}, 0.01)
    assert v.verdict == "ok" and v.weights == {}


def test_near_an_edge_weights_share_the_band():
    # low starts at 0.9 x 28.8 = 25.92 ohm; 26.0 +/- 2 % spans 25.48 .. 26.52
    v = soft_verdict("coil", {**COIL, "ohms": "26.0 ohm"}, 0.02)
    assert v.verdict == "ok"
    assert set(v.weights) == {"low", "ok"}
    assert sum(v.weights.values()) == pytest.approx(1)
    assert v.weights["ok"] > v.weights["low"]
    assert v.to_dict()["weights"] == v.weights


def test_many_readings_scale_together():
    v = soft_verdict("gap", {"readings": ["0.49 mm", "0.50 mm", "0.51 mm"], "nominal": "0.25 mm",
                             "max": "0.5 mm"}, 0.05)
    assert set(v.weights) == {"ok", "worn"}


def test_open_reading_stays_open():
    v = soft_verdict("coil", {**COIL, "ohms": "OL"}, 0.05)
    assert v.verdict == "open" and v.weights == {}


def test_zero_accuracy_is_the_plain_verdict():
    assert soft_verdict("coil", {**COIL, "ohms": 26.0}, 0).weights == {}


@pytest.mark.parametrize(
    ("name", "accuracy", "field"),
    [("coil", -0.1, "accuracy"), ("coil", float("nan"), "accuracy"), ("stop", 0.01, "reading"),
     ("coils", 0.01, "evaluator")],
)
def test_bad_soft_requests(name, accuracy, field):
    with pytest.raises(InputError) as info:
        soft_verdict(name, {**COIL, "ohms": 26.0}, accuracy)
    assert info.value.field == field
