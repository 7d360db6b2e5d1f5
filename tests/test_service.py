"""One rule for the pack a recorded session continues with, whichever face continues it.

A session is recorded on a pack in folder A. A local copy with other priors
(same id) is put on the search path. `diagnose resume` (the shell),
`diagnose run --resume` and `diagnose report` must all go on with A, the
knowledge the session was recorded with (its content hash decides), and show
the same top cause. Once A itself is changed, no pack has the recorded
knowledge: all three go on with A as it is now and say that it changed.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from diagnose.service import Where, recorded_pack
from diagnose.text import percent

MINI = Path(__file__).parent / "fixtures" / "mini"


def _diagnose(tmp: Path, *argv: str, stdin: str = "") -> subprocess.CompletedProcess[str]:
    env = {**os.environ, "DIAGNOSE_JOURNAL": str(tmp / "journal.sqlite3"), "NO_COLOR": "1",
           "COLUMNS": "100"}
    env.pop("DIAGNOSE_PACKS", None)
    proc = subprocess.run([sys.executable, "-m", "diagnose", *argv], input=stdin, text=True,
                          capture_output=True, env=env, timeout=120)
    assert "Traceback" not in proc.stderr, proc.stderr[-800:]
    return proc


def _set_prior(folder: Path, cause: str, prior: int) -> None:
    path = folder / "knowledge.yaml"
    lines = path.read_text(encoding="utf-8").splitlines()
    at = lines.index(f"  - id: {cause}")
    for i in range(at + 1, at + 6):
        if lines[i].strip().startswith("prior:"):
            lines[i] = f"    prior: {prior}"
            break
    else:
        raise AssertionError(f"no prior for {cause}")
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


@pytest.fixture
def recorded(tmp_path: Path) -> tuple[Path, str]:
    """An open session recorded on the pack in folder A; a local copy B on --packs."""
    a = tmp_path / "A"
    shutil.copytree(MINI, a)
    local = tmp_path / "local" / "mini-brake"
    shutil.copytree(MINI, local)
    _set_prior(local, "lining_worn", 1)  # B: the same id, other knowledge
    _set_prior(local, "fuse_blown", 500)
    answers = tmp_path / "answers.yaml"
    answers.write_text("complaints: [will_not_release]\n", encoding="utf-8")
    proc = _diagnose(tmp_path, "run", str(a), "--answers", str(answers), "--json")
    assert proc.returncode == 0, proc.stderr
    return tmp_path, json.loads(proc.stdout)["session"]


def _three_faces(tmp: Path, sid: str) -> dict[str, str]:
    """What the shell, run --resume and report show: the top cause, and the whole text."""
    packs = ("--packs", str(tmp / "local"))
    shell = _diagnose(tmp, *packs, "resume", sid, stdin="ranking\nquit\n")
    assert shell.returncode == 0, shell.stderr
    more = tmp / "more.yaml"
    more.write_text("notes: [looked again]\n", encoding="utf-8")
    run = _diagnose(tmp, *packs, "run", "--resume", sid, "--answers", str(more))
    assert run.returncode == 0, run.stderr
    report = _diagnose(tmp, *packs, "report", sid, "--format", "json")
    assert report.returncode == 0, report.stderr
    return {"shell": shell.stdout, "run": run.stdout, "report": report.stdout}


def _top_in_text(text: str) -> str:
    """The first cause under the last "Most likely causes" heading (or the run's table)."""
    lines = text.splitlines()
    for i in range(len(lines) - 1, -1, -1):
        if lines[i].startswith("Most likely causes") or lines[i].strip().startswith("Ranking"):
            for line in lines[i + 1:]:
                words = line.split()
                if words and words[0] == "1":
                    return " ".join(words[1:])
    raise AssertionError(f"no ranking in: {text[-600:]}")


def test_every_face_continues_with_the_recorded_knowledge(recorded):
    tmp, sid = recorded
    seen = _three_faces(tmp, sid)
    report = json.loads(seen["report"])
    assert report["pack"]["current_hash"] == report["pack"]["content_hash"]
    top = report["final_ranking"][0]["cause"]
    assert top == "lining_worn"  # A's priors (B would put the fuse first)
    assert _top_in_text(seen["shell"]).startswith("Lining worn")  # its title in the pack
    assert _top_in_text(seen["run"]).startswith("Lining worn")  # the same view as the shell
    for face, text in seen.items():
        assert "has changed" not in text, face
    # the same ranking shows the same number in all three (one view, one percent)
    shown = percent(report["final_ranking"][0]["p"])
    assert _top_in_text(seen["shell"]).endswith(shown), (shown, _top_in_text(seen["shell"]))
    assert _top_in_text(seen["run"]).endswith(shown)
    md = _diagnose(tmp, "--packs", str(tmp / "local"), "report", sid).stdout
    assert f"| {report['final_ranking'][0]['title']} | {shown} |" in md


def test_a_changed_pack_is_named_by_every_face(recorded):
    tmp, sid = recorded
    _set_prior(tmp / "A", "lining_worn", 29)  # the recorded knowledge is gone
    seen = _three_faces(tmp, sid)
    report = json.loads(seen["report"])
    assert report["pack"]["current_hash"] != report["pack"]["content_hash"]
    for face in ("shell", "run"):
        assert "the pack mini-brake has changed since this session was recorded" in seen[face], \
            seen[face][-600:]
    assert report["final_ranking"][0]["cause"] == "lining_worn"  # A as it is now, not B


def test_the_rule_takes_the_recorded_hash_over_the_search_path(recorded):
    from diagnose.journal.store import Journal

    tmp, sid = recorded
    with Journal(tmp / "journal.sqlite3", readonly=True) as journal:
        info, events = journal.session(sid), journal.load_events(sid)
    where = Where(packs=(str(tmp / "local"),), journal=str(tmp / "journal.sqlite3"))
    choice = recorded_pack(info, events, where)
    assert not choice.changed and Path(choice.model.path).name == "A"
    shutil.rmtree(tmp / "A")  # the recorded folder is gone: the id on the search path, named
    choice = recorded_pack(info, events, where)
    assert choice.changed and "local" in str(choice.model.path)
    assert "has changed" in choice.note()
