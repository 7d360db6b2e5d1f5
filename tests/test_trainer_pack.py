"""A trainer's first pack in one command, and lint that helps (issue 15, part 4).

`kb new pack` writes a pack that lints clean but for its TODO warnings and
passes its own case; lint gives one error per unresolved name (with the count
of what it hid), checks the units of test-case readings at the step, warns
about a missing safety notice and never wraps its lines in a pipe.
"""

from __future__ import annotations

import io
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from diagnose.cli import main
from diagnose.kb.lint import lint_paths

ROOT = Path(__file__).resolve().parent.parent
SHIPPED = ROOT / "knowledge"
MINI = Path(__file__).parent / "fixtures" / "mini"


def _lint(ref: str | Path):
    (res,) = lint_paths([str(ref)])
    return res


def _copy(src: Path, dst: Path, file: str, old: str, new: str) -> Path:
    """A copy of pack ``src`` at ``dst`` with ``old`` replaced by ``new`` once in ``file``."""
    shutil.copytree(src, dst)
    text = (dst / file).read_text()
    assert old in text, old
    (dst / file).write_text(text.replace(old, new, 1))
    return dst


def _line_of(path: Path, needle: str) -> int:
    return next(n for n, line in enumerate(path.read_text().splitlines(), 1) if needle in line)


# --- kb new pack ---------------------------------------------------------------------------------


def test_new_pack_lints_clean_but_for_todo_warnings_and_passes_its_case(tmp_path, monkeypatch,
                                                                         capsys):
    monkeypatch.chdir(tmp_path)
    assert main(["kb", "new", "pack", "demo", "--builds-on", "electrical-supply",
                 "--device", "clutch", "--energised", "engaged"]) == 0
    said = capsys.readouterr().out
    assert "diagnose kb lint demo" in said and "diagnose kb test demo" in said
    folder = tmp_path / "demo"
    assert sorted(p.name for p in folder.iterdir()) == [
        "checks.yaml", "faults.yaml", "pack.yaml", "repairs.yaml", "tests.yaml"]
    manifest = (folder / "pack.yaml").read_text()
    for line in ("pack: demo", "builds_on: [electrical-supply]", "noun: \"clutch\"",
                 "energised: engaged", "notice: >-", "version: 0.1.0"):
        assert line in manifest

    res = _lint("demo")
    assert res.errors == [], "\n".join(map(str, res.errors))
    assert res.warnings and {p.code for p in res.warnings} == {"todo"}
    texts = [p for p in res.warnings if p.source]
    assert {Path(p.source.file).name for p in texts} == {
        "pack.yaml", "faults.yaml", "checks.yaml", "repairs.yaml", "tests.yaml"}
    for p in texts:  # each warning points at a line that says TODO
        line = (tmp_path / p.source.file).read_text().splitlines()[p.source.line - 1]
        assert "TODO" in line, p
    assert main(["kb", "lint", "demo"]) == 0
    assert main(["kb", "lint", "--strict", "demo"]) == 1
    capsys.readouterr()

    assert main(["kb", "test", "demo"]) == 0
    out = capsys.readouterr().out
    assert re.search(r"PASS demo_case: demo_cause", out)


def test_a_new_pack_once_written_is_strict_clean(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    assert main(["kb", "new", "pack", "first-pack"]) == 0  # builds on nothing, no device
    for f in (tmp_path / "first-pack").iterdir():
        f.write_text(re.sub(r'"TODO: ([^"]*)"', r'"\1"', f.read_text()))
    assert main(["kb", "lint", "--strict", "first-pack"]) == 0, capsys.readouterr().out
    assert main(["kb", "test", "first-pack"]) == 0


def test_new_pack_in_another_folder_and_its_refusals(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "packs").mkdir()
    assert main(["kb", "new", "pack", "demo", "--folder", "packs"]) == 0
    assert (tmp_path / "packs" / "demo" / "pack.yaml").is_file()
    capsys.readouterr()
    before = sorted(p.name for p in (tmp_path / "packs" / "demo").iterdir())
    assert main(["kb", "new", "pack", "demo", "--folder", "packs"]) == 2
    err = capsys.readouterr().err
    assert len(err.strip().splitlines()) == 1 and "exists already" in err
    assert sorted(p.name for p in (tmp_path / "packs" / "demo").iterdir()) == before

    refused = [
        (["kb", "new", "pack", "other", "--builds-on", "electrical-suply"], "electrical-supply"),
        (["kb", "new", "pack", "Other"], "not a pack id"),
        (["kb", "new", "pack", "other", "--energised", "engaged"], "--device"),
        (["kb", "new", "pack", "other", "--evaluator", "coil"], "--evaluator"),
        (["kb", "new", "cause", "other", "--device", "clutch"], "kb new pack"),
        (["kb", "new", "pack", "other", "--folder", "nowhere"], "not a folder"),
    ]
    for argv, hint in refused:
        assert main(argv) == 2, argv
        err = capsys.readouterr().err
        assert len(err.strip().splitlines()) == 1 and hint in err, (argv, err)
    assert not (tmp_path / "other").exists()


def test_new_pack_is_never_written_through_a_symbolic_link(tmp_path, monkeypatch, capsys):
    real = tmp_path / "real"
    real.mkdir()
    (tmp_path / "link").symlink_to(real)
    monkeypatch.chdir(tmp_path)
    assert main(["kb", "new", "pack", "demo", "--folder", "link"]) == 2
    assert "symbolic link" in capsys.readouterr().err
    assert list(real.iterdir()) == []


# --- knock-on errors ----------------------------------------------------------------------------


def test_a_misspelt_builds_on_is_one_error_with_the_count_it_hid(tmp_path, capsys):
    pack = _copy(SHIPPED / "spring-applied-brake", tmp_path / "sab", "pack.yaml",
                 "builds_on: [electrical-supply]", "builds_on: [electrical-suply]")
    res = _lint(pack)
    about = [p for p in res.problems if p.level == "error"]
    assert len(about) == 1, "\n".join(map(str, res.problems))
    (err,) = about
    assert "electrical-suply" in err.message and "did you mean 'electrical-supply'" in err.message
    assert err.source.line == _line_of(pack / "pack.yaml", "builds_on:")
    hid = re.search(r"\(and (\d+) errors that follow from it are not shown\)", err.message)
    assert hid and int(hid.group(1)) > 20
    assert main(["kb", "lint", str(pack)]) == 1
    lines = capsys.readouterr().out.splitlines()
    assert len([line for line in lines if "error:" in line]) <= 2


def test_a_misspelt_evaluator_is_one_error_and_other_errors_still_show(tmp_path):
    pack = _copy(SHIPPED / "spring-applied-brake", tmp_path / "sab", "checks-site.yaml",
                 "      evaluator: coil\n", "      evaluator: coils\n")
    res = _lint(pack)
    about = [p for p in res.problems if "brake_coil_resistance" in p.message
             or "coils" in p.message]
    assert len(about) <= 2 and len(res.errors) == 1, "\n".join(map(str, res.problems))
    (err,) = res.errors
    assert err.code == "evaluator" and "did you mean 'coil'" in err.message
    assert re.search(r"\(and \d+ errors that follow from it are not shown\)", err.message)

    # An error of its own elsewhere is not hidden by it.
    text = (pack / "checks-site.yaml").read_text()
    (pack / "checks-site.yaml").write_text(text.replace("cautions: [lockout", "cautions: [lockot",
                                                        1))
    errors = _lint(pack).errors
    assert [p.code for p in errors].count("evaluator") == 1
    assert any(p.code == "unknown-ref" and "'lockot'" in p.message for p in errors)


def test_a_misspelt_base_check_in_a_fixture_pack_is_still_reported(tmp_path):
    pack = _copy(MINI, tmp_path / "mini", "knowledge.yaml", "    fixes: [coil_open]",
                 "    fixes: [coil_opne]")
    (err,) = _lint(pack).errors
    assert err.code == "unknown-ref" and "did you mean 'coil_open'" in err.message


# --- readings of test cases ---------------------------------------------------------------------


def test_a_reading_in_the_wrong_unit_is_an_error_at_its_step(tmp_path, capsys):
    pack = _copy(MINI, tmp_path / "mini", "knowledge.yaml",
                 "{check: coil_resistance, answer: OL}", "{check: coil_resistance, answer: 28.8 V}")
    res = _lint(pack)
    (err,) = res.errors
    assert err.code == "unit"
    assert err.source.line == _line_of(pack / "knowledge.yaml", "answer: 28.8 V")
    assert "28.8 V" in err.message and "coil_resistance" in err.message
    assert main(["kb", "lint", "--strict", str(pack)]) == 1


@pytest.mark.parametrize("answer", ["OL", "open", "28.8 ohm", "0.0288 kohm", "29", "unsure"])
def test_readings_in_the_unit_or_outcomes_pass(tmp_path, answer):
    pack = _copy(MINI, tmp_path / "mini", "knowledge.yaml",
                 "{check: coil_resistance, answer: OL}",
                 f"{{check: coil_resistance, answer: {answer}}}")
    assert _lint(pack).errors == []


def test_shipped_packs_readings_all_fit():
    for ref in ("electrical-supply", "spring-applied-brake", "permanent-magnet-brake"):
        assert [p for p in _lint(ref).problems if p.code == "unit"] == []


# --- the safety notice --------------------------------------------------------------------------


def test_a_pack_without_a_notice_fails_strict(tmp_path, capsys):
    pack = _copy(MINI, tmp_path / "mini", "pack.yaml",
                 "notice: This tool is an aid; follow local codes and licensed practice.\n", "")
    res = _lint(pack)
    assert res.errors == [] and [p.code for p in res.warnings] == ["no-notice"]
    assert res.warnings[0].source.file.endswith("pack.yaml")
    assert main(["kb", "lint", str(pack)]) == 0
    assert main(["kb", "lint", "--strict", str(pack)]) == 1
    assert "notice" in capsys.readouterr().out


# --- no wrapping in a pipe ----------------------------------------------------------------------


def _run(*argv: str, cwd: Path) -> str:
    env = {**os.environ, "COLUMNS": "80"}
    done = subprocess.run([sys.executable, "-m", "diagnose", *argv], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=120)
    return done.stdout


def test_piped_lint_and_test_output_never_wraps(tmp_path):
    deep = tmp_path / ("a-folder-with-a-long-name-" * 3) / "and-another-long-one"
    deep.mkdir(parents=True)
    pack = _copy(MINI, deep / "mini", "pack.yaml",
                 "notice: This tool is an aid; follow local codes and licensed practice.\n", "")
    shown = os.path.relpath(pack, tmp_path)
    assert len(shown) > 80

    out = _run("kb", "lint", shown, cwd=tmp_path)
    lines = out.splitlines()
    assert lines and all(line.startswith(shown) for line in lines), out
    assert any("[no-notice]" in line for line in lines)

    out = _run("kb", "test", shown, cwd=tmp_path)
    results = [line for line in out.splitlines() if " PASS " in line or " FAIL " in line]
    assert results and all(line.startswith(shown) and line.endswith(")") for line in results), out
    assert len(out.splitlines()) == len(results) + 1  # and the count line


def test_line_console_keeps_text_whole_and_rules_at_80():
    from rich.rule import Rule
    from rich.text import Text

    from diagnose.text import console

    out = io.StringIO()
    con = console(lines=True, file=out, color_system=None)
    con.print(Text("x" * 200))
    con.print(Rule())
    assert [len(line) for line in out.getvalue().splitlines()] == [200, 80]
    tty = console(lines=True, file=io.StringIO(), force_terminal=True, width=80)
    assert tty.width == 80
