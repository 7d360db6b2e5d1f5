"""Statistics over the journal: causes, minutes to cure, checks used, first repairs, escalations."""

from __future__ import annotations

import json

from test_journal_store import FIXTURES, mini_model, play

from diagnose.cli import main
from diagnose.journal.stats import stats
from diagnose.journal.store import Journal


def test_stats(tmp_path, capsys):
    path = tmp_path / "journal.sqlite3"
    model = mini_model()
    with Journal(path) as j:
        # coil: listen, read, repair (cured at the first repair)
        play(j, model, [{"check": "listen_click", "answer": "silent"},
                        {"check": "coil_resistance", "answer": "OL"},
                        {"repair": "replace_coil", "cured": True}])
        # fuse: the first repair fails, the second cures
        play(j, model, [{"check": "listen_click", "answer": "silent"},
                        {"repair": "replace_cable", "cured": False},
                        {"repair": "replace_fuse", "cured": True}])
        s = play(j, model, [{"check": "listen_click", "answer": "click"}], end=False)
        s.end("escalated")
        play(j, model, [], end=False)  # open, nothing done yet
        other = j.new_session("other-pack", "1", "h", "site")
        j.write(other, {"kind": "end", "data": {"result": "escalated"}, "time": "2025-01-14"})
        result = stats(j, "mini-brake", lambda pid: model)
    assert (result.sessions, result.open, result.closed) == (4, 1, 3)
    assert sorted((c, n) for c, _, n in result.causes) == [("coil_open", 1), ("fuse_blown", 1)]
    assert result.checks[0][:3:2] == ("listen_click", 3)
    assert (result.with_repair, result.first_repair_cured) == (2, 1)
    assert result.first_repair_rate == 0.5
    assert result.escalated == 1
    assert result.results == {"resolved": 2, "escalated": 1}
    # Events 5 minutes apart. The coil is cured at the 8th event (35 min): notice, two
    # nameplate values, complaint, listen_click, the lockout acknowledged, the reading, the
    # repair (still isolated: a reminder, no new acknowledgement). The fuse at the 9th
    # (40 min): the failed cable repair put the power back, so the fuse repair asks again.
    assert result.mean_minutes_to_cure == 37.5
    assert result.mean_work_minutes_to_cure == ((2 + 10 + 60) + (2 + 45 + 10)) / 2

    base = ["--journal", str(path), "--packs", str(FIXTURES)]
    assert main([*base, "stats", "mini-brake", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert {c["title"] for c in data["confirmed_causes"]} == {"Coil winding open", "Fuse blown"}
    assert data["first_repair"]["rate"] == 0.5
    assert main([*base, "stats"]) == 0
    text = capsys.readouterr().out
    assert "5 session(s) of all packs" in text and "2 escalated" in text
    assert "Coil winding open" in text and "first repair cured: 1 of 2" in text


def test_stats_without_journal(tmp_path, capsys):
    assert main(["--journal", str(tmp_path / "none.sqlite3"), "stats", "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["sessions"] == 0
