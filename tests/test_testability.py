"""Detection, isolation, ambiguity groups and idle checks on invented packs."""

from __future__ import annotations

import pytest
from ftmodels import check, gate, make_model

from diagnose.errors import InputError
from diagnose.reasoning.testability import (
    analysis_problems,
    dependency_matrix,
    idle_checks,
    total_variation,
)
from diagnose.reasoning.testability import testability as assess  # not collected as a test

SILENT = {"ok": 0.05, "bad": 0.95}


def _pack(*extra_checks, repairs=None, priors=None):
    """will_not_release over x, y (sharing every effect), z; one check sees all three."""
    return make_model(
        causes=priors or {"x": 30, "y": 10, "z": 20},
        complaints={"stuck": gate("stuck", "or", ("x", "y", "z"))},
        checks=[
            check("listen", {"x": SILENT, "y": SILENT}, where="phone"),
            check("measure", {"z": SILENT, "x": {"ok": 0.5, "bad": 0.5},
                              "y": {"ok": 0.5, "bad": 0.5}}),
            *extra_checks,
        ],
        repairs=repairs,
    )


def test_total_variation():
    # half the L1 distance: 0.5 * (|0.95 - 0.05| + |0.05 - 0.95|) = 0.9
    assert total_variation({"ok": 0.95, "bad": 0.05}, SILENT) == pytest.approx(0.9)
    assert total_variation({"a": 1.0}, {"b": 1.0}) == pytest.approx(1.0)


def test_causes_sharing_every_effect_form_one_group():
    t = assess(_pack(), "stuck")
    assert [g.causes for g in t.groups] == [("x", "y")]
    assert t.groups[0].action == "add-check"
    assert "x, y" in t.groups[0].hint
    assert t.detection == pytest.approx(1.0)
    assert t.isolated == ("z",)
    assert t.isolation == pytest.approx(20 / 60)  # prior-weighted: z of x + y + z


def test_a_check_that_splits_them_removes_the_group():
    split = check("split", {"x": SILENT})
    t = assess(_pack(split), "stuck")
    assert t.groups == ()
    assert t.isolation == pytest.approx(1.0)


def test_phone_mode_uses_phone_checks_only_and_names_the_site_split():
    t = assess(_pack(), "stuck", mode="phone")
    # by phone only `listen`: x and y are silent, z sounds normal like nothing at all
    assert [g.causes for g in t.groups] == [("x", "y")]
    assert t.detected == ("x", "y")
    assert t.detection == pytest.approx(40 / 60)
    split = check("split", {"x": SILENT})
    (g,) = assess(_pack(split), "stuck", mode="phone").groups
    assert g.action == "add-phone-check"
    assert g.split_on_site_by == ("split",)


def test_one_repair_for_the_whole_group_suggests_merging():
    model = _pack(repairs={"replace_coil": ("x", "y"), "fix_z": ("z",)})
    (g,) = assess(model, "stuck").groups
    assert g.action == "merge"
    assert "replace_coil" in g.hint


def test_undetected_causes_and_threshold():
    # TV exactly 0.1 is not "more than the threshold"
    weak = check("weak", {"x": {"ok": 0.85, "bad": 0.15}, "y": {"ok": 0.85, "bad": 0.15}})
    model = make_model(causes={"x": 30, "y": 10},
                       complaints={"c": gate("c", "or", ("x", "y"))}, checks=[weak])
    t = assess(model, "c")
    assert t.detected == () and t.detection == 0.0
    assert t.groups[0].hint.startswith("no check detects")
    assert idle_checks(model) == ("weak",)
    assert assess(model, "c", threshold=0.05).detection == pytest.approx(1.0)
    assert idle_checks(model, threshold=0.05) == ()


def test_dependency_matrix_lists_checks_that_see_the_complaint():
    m = dependency_matrix(_pack(), "stuck")
    assert m["listen"] == {"x": pytest.approx(0.9), "y": pytest.approx(0.9), "z": 0.0}
    assert set(dependency_matrix(_pack(), "stuck", mode="phone")) == {"listen"}


def test_unknown_complaint_or_mode():
    with pytest.raises(InputError):
        assess(_pack(), "nothing")
    with pytest.raises(InputError):
        assess(_pack(), "stuck", mode="mail")


def test_analysis_problems_point_at_the_entities():
    weak = check("weak", {"z": {"ok": 0.9, "bad": 0.1}})
    model = make_model(
        causes={"x": 30, "y": 10, "z": 20},
        complaints={"stuck": gate("stuck", "or", ("x", "y", "z")),
                    "slow": gate("slow", "or", ("x", "y"))},
        checks=[check("listen", {"x": SILENT, "y": SILENT}), weak],
    )
    probs = analysis_problems(model)
    codes = [(p.code, p.level) for p in probs]
    assert codes == [("undetected-cause", "warning"), ("ambiguity-group", "warning"),
                     ("idle-check", "warning")]
    undetected, group, idle = probs
    assert undetected.source == model.causes["z"].source and "z" in undetected.message
    assert group.source == model.causes["x"].source
    assert "stuck, slow" in group.message  # one warning for the group, naming both complaints
    assert idle.source == model.checks["weak"].source


def test_closest_pair_is_the_least_separated():
    # x and y share every row (separation 0); with `split` their best check is 0.9 apart
    t = assess(_pack(), "stuck")
    assert t.closest == ("x", "y", 0.0)
    split = check("split", {"x": {"ok": 0.85, "bad": 0.15}})  # 0.1 from normal and from y
    t = assess(_pack(split), "stuck")
    assert t.closest[:2] == ("x", "y") and t.closest[2] == pytest.approx(0.1)
    assert t.to_dict()["closest_pair"] == {"causes": ["x", "y"], "separation": t.closest[2]}
