"""Learned priors: the Dirichlet update, the overlay file, and its effect on a fresh ranking."""

from __future__ import annotations

import json

import pytest
from test_journal_store import FIXTURES, mini_model, play

from diagnose.cli import main
from diagnose.errors import InputError, JournalError
from diagnose.journal.learn import learn, learned_priors, overlay_for, read_overlay
from diagnose.journal.store import Journal
from diagnose.paths import overlay_path

CABLE = [{"repair": "replace_cable", "cured": True}]


@pytest.fixture()
def journal_with_cures(tmp_path):
    """Six cable breaks confirmed by a cure, one escalation, one open session."""
    path = tmp_path / "journal.sqlite3"
    model = mini_model()
    with Journal(path) as j:
        for _ in range(6):
            play(j, model, CABLE)
        s = play(j, model, [{"check": "listen_click", "answer": "click"}], end=False)
        s.end("escalated")
        play(j, model, [{"repair": "replace_fuse", "cured": True}], end=False)  # still open
    return path


def test_dirichlet_mean():
    base = {"a": 10.0, "b": 30.0}
    # weight 20: alpha = (5, 15); with 20 cures of a: 40 * (5 + 20) / 40 = 25
    assert learned_priors(base, {"a": 20}, 20) == {"a": 25.0, "b": 15.0}
    assert learned_priors(base, {"zzz": 3}) == base  # causes the pack does not know are ignored
    big = learned_priors(base, {"a": 1}, weight=1e9)
    assert big["a"] == pytest.approx(10.0)  # a heavy weight keeps the pack's own
    assert sum(learned_priors(base, {"a": 7, "b": 2}).values()) == pytest.approx(40.0)
    with pytest.raises(InputError):
        learned_priors(base, {}, 0)


def test_learn_counts_only_confirmed_closed_cures(journal_with_cures):
    model = mini_model()
    with Journal(journal_with_cures, readonly=True) as j:
        overlay = learn(j, model)
    assert overlay.counts == {"cable_break": 6} and overlay.sessions == 6
    assert overlay.priors["cable_break"] > model.causes["cable_break"].prior
    assert overlay.priors["lining_worn"] < model.causes["lining_worn"].prior
    assert sum(overlay.priors.values()) == pytest.approx(sum(c.prior for c in
                                                             model.causes.values()))


def _ranking(argv, tmp_path):
    answers = tmp_path / "answers.yaml"
    answers.write_text("complaints: [will_not_release]\nsteps: []\n", encoding="utf-8")
    return argv + ["run", "mini-brake", "--answers", str(answers), "--json"]


def _p(capsys, cause):
    data = json.loads(capsys.readouterr().out)
    return {e["cause"]: e["p"] for e in data["ranking"]}[cause]


def test_cli_learn_moves_a_fresh_ranking_and_no_learned_restores(journal_with_cures, tmp_path,
                                                                   capsys):
    base = ["--journal", str(journal_with_cures), "--packs", str(FIXTURES)]
    assert main(_ranking(base, tmp_path)) == 0
    before = _p(capsys, "cable_break")
    assert main([*base, "learn", "mini-brake"]) == 0
    out = capsys.readouterr().out
    assert "6 confirmed cure(s)" in out and "cable_break: 10 ->" in out
    target = overlay_path(journal_with_cures, "mini-brake")
    stored = json.loads(target.read_text(encoding="utf-8"))
    assert stored["pack"] == "mini-brake" and stored["sessions"] == 6
    assert stored["content_hash"] == mini_model().content_hash
    assert set(stored["priors"]) == {"fuse_blown", "cable_break", "coil_open", "lining_worn"}
    assert main(_ranking(base, tmp_path)) == 0
    after = _p(capsys, "cable_break")
    assert after > before  # towards the confirmed cause
    assert main(_ranking([*base, "--no-learned"], tmp_path)) == 0
    assert _p(capsys, "cable_break") == pytest.approx(before)
    assert main([*base, "kb", "show", "mini-brake"]) == 0
    assert "learned priors in use" in capsys.readouterr().out
    assert main([*base, "--no-learned", "kb", "show", "mini-brake"]) == 0
    assert "learned priors in use" not in capsys.readouterr().out
    # Learning again starts from the pack's own priors, not from the overlay.
    assert main([*base, "learn", "mini-brake", "--json"]) == 0
    again = json.loads(capsys.readouterr().out)
    assert again["priors"] == stored["priors"]
    assert (FIXTURES / "mini" / "knowledge.yaml").read_text().count("prior: 10") == 1


def test_overlay_for(journal_with_cures, tmp_path):
    assert overlay_for("mini-brake", journal_with_cures) is None
    target = overlay_path(journal_with_cures, "mini-brake")
    target.parent.mkdir()
    target.write_text("{not json", encoding="utf-8")
    with pytest.raises(JournalError, match="learned priors"):
        overlay_for("mini-brake", journal_with_cures)
    target.write_text(json.dumps({"pack": "mini-brake", "priors": {"coil_open": 30},
                                  "sessions": 2}), encoding="utf-8")
    overlay = read_overlay(target)
    assert overlay is not None and overlay.priors == {"coil_open": 30.0}
    assert overlay_for("mini-brake", journal_with_cures).path == target


def test_learn_without_journal(tmp_path, capsys):
    argv = ["--journal", str(tmp_path / "none.sqlite3"), "learn", str(FIXTURES / "mini")]
    assert main(argv) == 1
    assert "no journal" in capsys.readouterr().err


def test_journal_path_under_a_file_has_no_learned_priors(tmp_path):
    not_a_folder = tmp_path / "notes.txt"
    not_a_folder.write_text("a file, not a folder")
    assert read_overlay(not_a_folder / "learned" / "mini-brake.json") is None
