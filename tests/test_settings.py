"""The settings file, the user's folders, ``--units`` and the options of every command."""

from __future__ import annotations

import argparse
import io
import json
import re
import subprocess
import sys
from pathlib import Path

import pytest
from rich.console import Console

from diagnose import paths
from diagnose.cli import GLOBAL_OPTIONS, build_parser, main
from diagnose.errors import InputError
from diagnose.settings import Preferences, load_preferences, settings_path

ROOT = Path(__file__).parent.parent
MINI = str(ROOT / "tests" / "fixtures" / "mini")
SHELL_PACK = str(ROOT / "tests" / "fixtures" / "shell-brake")

# The shipped pack's air gap: nominal 0.3 mm, wear limit 0.6 mm, smallest 0.15 mm (its
# defaults, invented for the demo pack); three readings typed bare, by a technician who
# measured in inches: 0.018 in = 0.4572 mm (1 in = 25.4 mm exactly, by definition).
GAP_ANSWERS = """\
nameplate: {nominal_gap: 0.3 mm, min_gap: 0.15 mm, max_gap: 0.6 mm}
complaints: [will_not_release]
steps:
  - {check: air_gap, answer: 0.018 0.019 0.017}
"""


@pytest.fixture(autouse=True)
def _own_config(monkeypatch, tmp_path):
    """No settings file of the tester's can change these results."""
    monkeypatch.delenv("DIAGNOSE_SETTINGS", raising=False)
    monkeypatch.setenv("XDG_CONFIG_HOME", str(tmp_path / "config"))


def write_settings(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "config" / "diagnose" / "settings.toml"
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text, encoding="utf-8")
    return path


def run(capsys, *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture
def gap_answers(tmp_path) -> str:
    path = tmp_path / "gap.yaml"
    path.write_text(GAP_ANSWERS, encoding="utf-8")
    return str(path)


# --- the settings file -----------------------------------------------------------------------


def test_no_file_means_the_defaults(tmp_path):
    assert settings_path() == tmp_path / "config" / "diagnose" / "settings.toml"
    assert load_preferences() == Preferences()
    assert Preferences() == Preferences(units="metric", technician=None, mode="site",
                                        journal=None, source="")


def test_the_file_in_the_config_folder_is_read(tmp_path):
    path = write_settings(tmp_path, '# my van\nunits = "inch"\ntechnician = "A. Example"\n'
                                    'mode = "phone"\njournal = "/srv/jobs/journal.sqlite3"\n')
    assert load_preferences() == Preferences("inch", "A. Example", "phone",
                                             "/srv/jobs/journal.sqlite3", str(path))


def test_diagnose_settings_names_another_file(tmp_path, monkeypatch):
    elsewhere = tmp_path / "elsewhere.toml"
    elsewhere.write_text('units = "inch"\n', encoding="utf-8")
    write_settings(tmp_path, 'units = "metric"\n')
    monkeypatch.setenv("DIAGNOSE_SETTINGS", str(elsewhere))
    assert load_preferences().units == "inch"
    monkeypatch.setenv("DIAGNOSE_SETTINGS", str(tmp_path / "missing.toml"))
    with pytest.raises(InputError, match=r"DIAGNOSE_SETTINGS: names .*missing\.toml, which "
                                         "does not exist"):
        load_preferences()


def test_a_relative_journal_is_taken_from_the_settings_folder(tmp_path):
    path = write_settings(tmp_path, 'journal = "jobs/journal.sqlite3"\n')
    assert load_preferences().journal == str(path.parent / "jobs" / "journal.sqlite3")
    write_settings(tmp_path, 'journal = "~/jobs.sqlite3"\ntechnician = "  "\n')
    prefs = load_preferences()
    assert prefs.journal == str(Path.home() / "jobs.sqlite3") and prefs.technician is None


@pytest.mark.parametrize(("text", "message"), [
    ("units = inch\n", "is not valid TOML: "),
    ("units = 'inch'\nunits = 'metric'\n", "is not valid TOML: "),
    ("unit = 'inch'\n", "unknown key 'unit' (did you mean 'units'?); the keys are units, "
                        "technician, mode, journal"),
    ("technican = 'A. Example'\n", "unknown key 'technican' (did you mean 'technician'?)"),
    ("colour = 'red'\n", "unknown key 'colour'; the keys are units, technician, mode, journal"),
    ("units = 'imperial'\n", "units must be \"metric\" or \"inch\", not 'imperial'"),
    ("units = 'inches'\n", "units must be \"metric\" or \"inch\", not 'inches' (did you mean "
                           "'inch'?)"),
    ("mode = 3\n", "mode must be \"site\" or \"phone\", not the number 3"),
    ("technician = true\n", "technician must be text in quotes, not true"),
    ("journal = ['a', 'b']\n", "journal must be text in quotes, not a list"),
    ("[units]\nsystem = 'inch'\n", "units must be \"metric\" or \"inch\", not a table"),
    ('technician = "A\\u001b[2J"\n', "technician holds a control character (U+001B)"),
])
def test_a_broken_file_is_one_line_naming_the_file_and_the_key(tmp_path, text, message):
    path = write_settings(tmp_path, text)
    with pytest.raises(InputError) as caught:
        load_preferences()
    said = str(caught.value)
    assert said.startswith(f"{path}: ") and message in said
    assert "\n" not in said


def test_a_file_that_is_no_text_or_a_folder_is_one_line(tmp_path):
    path = tmp_path / "config" / "diagnose" / "settings.toml"
    path.parent.mkdir(parents=True)
    path.write_bytes(b'units = "\xff"\n')
    with pytest.raises(InputError, match="is not UTF-8 text"):
        load_preferences()
    path.unlink()
    path.mkdir()
    with pytest.raises(InputError, match="is a folder, not a settings file"):
        load_preferences()


def test_a_broken_file_is_one_line_at_the_command_line(tmp_path, capsys, gap_answers):
    path = write_settings(tmp_path, "unit = 'inch'\n")
    code, out, err = run(capsys, "run", "spring-applied-brake", "--answers", gap_answers)
    assert code == 2 and out == ""
    assert err == f"diagnose: {path}: unknown key 'unit' (did you mean 'units'?); the keys are " \
                  "units, technician, mode, journal, team_journal\n"


# --- the user's folders ------------------------------------------------------------------------


def test_the_folders_come_from_platformdirs():
    import platformdirs

    for kind in ("data", "config", "cache", "state"):
        expected = getattr(platformdirs, f"user_{kind}_dir")("diagnose", appauthor=False)
        assert getattr(paths, f"{kind}_dir")() == Path(expected)


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="the XDG folders of Linux")
def test_on_linux_the_folders_are_where_they_were(monkeypatch, tmp_path):
    for name in paths.XDG_VARIABLES.values():
        monkeypatch.delenv(name, raising=False)
    home = Path.home()
    # existing journals are found where they always were
    assert paths.journal_path(env={}) == home / ".local/share/diagnose/journal.sqlite3"
    assert paths.data_dir() == home / ".local/share/diagnose"
    assert paths.config_dir() == home / ".config/diagnose"
    assert paths.cache_dir() == home / ".cache/diagnose"
    assert paths.state_dir() == home / ".local/state/diagnose"
    for kind, name in paths.XDG_VARIABLES.items():
        monkeypatch.setenv(name, str(tmp_path / kind))
        assert paths.user_dir(kind) == tmp_path / kind / "diagnose"
        assert paths.user_dir(kind, {name: str(tmp_path / "given")}) == tmp_path / "given" / \
            "diagnose"
        monkeypatch.setenv(name, "relative/is/ignored")  # as the specification says
        assert paths.user_dir(kind) == paths.user_dir(kind, {})
        assert paths.user_dir(kind).is_absolute()


def test_the_pack_cache_and_the_settings_are_in_their_folders(tmp_path, monkeypatch):
    from diagnose.kb.locate import cache_dir

    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    assert cache_dir() == tmp_path / "cache" / "diagnose"
    assert settings_path() == tmp_path / "config" / "diagnose" / "settings.toml"


def test_platformdirs_and_tomllib_are_imported_only_when_needed():
    code = ("import sys, diagnose.paths, diagnose.settings, diagnose.cli; "
            "diagnose.cli.build_parser(); "
            "print('platformdirs' in sys.modules, 'tomllib' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.split() == ["False", "False"]


# --- where the journal is ----------------------------------------------------------------------


def test_the_journal_order_option_environment_settings_data_folder(tmp_path, monkeypatch):
    from diagnose.service import Where, journal_path

    def where(*argv: str) -> Path:
        return journal_path(Where.of(build_parser().parse_args([*argv, "sessions"])))

    write_settings(tmp_path, f'journal = "{tmp_path / "settings.sqlite3"}"\n')
    monkeypatch.setenv("DIAGNOSE_JOURNAL", str(tmp_path / "env.sqlite3"))
    assert where("--journal", str(tmp_path / "opt.sqlite3")) == tmp_path / "opt.sqlite3"
    assert where() == tmp_path / "env.sqlite3"
    monkeypatch.delenv("DIAGNOSE_JOURNAL")
    assert where() == tmp_path / "settings.sqlite3"
    assert where("--journal", str(tmp_path / "opt.sqlite3")) == tmp_path / "opt.sqlite3"
    write_settings(tmp_path, "")
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "data"))
    assert where() == tmp_path / "data" / "diagnose" / "journal.sqlite3"


def test_the_settings_journal_receives_the_sessions(tmp_path, monkeypatch, capsys, gap_answers):
    monkeypatch.delenv("DIAGNOSE_JOURNAL")
    write_settings(tmp_path, 'journal = "van.sqlite3"\n')
    code, out, _ = run(capsys, "run", "spring-applied-brake", "--answers", gap_answers, "--json")
    assert code == 0
    assert json.loads(out)["journal"] == str(tmp_path / "config" / "diagnose" / "van.sqlite3")
    code, out, _ = run(capsys, "sessions", "--json")
    assert code == 0 and len(json.loads(out)) == 1


# --- the options of every command, before or after it ----------------------------------------


@pytest.mark.parametrize(("argv", "expected"), [
    (["sessions"], ([], None, False, None)),
    (["--journal", "A", "--packs", "P", "--no-learned", "--units", "inch", "sessions"],
     (["P"], "A", True, "inch")),
    (["sessions", "--journal", "A", "--packs", "P", "--no-learned", "--units", "inch"],
     (["P"], "A", True, "inch")),
    (["--journal", "A", "--units", "metric", "sessions", "--journal", "B", "--units", "inch"],
     ([], "B", False, "inch")),  # after the command wins
    (["--journal", "A", "--no-learned", "report", "X", "--units", "inch"],
     ([], "A", True, "inch")),  # before it is kept
    (["--packs", "P1", "kb", "--packs", "P2", "lint", "x", "--packs", "P3"],
     (["P1", "P2", "P3"], None, False, None)),  # folders add up, in the order given
    (["start", "--units", "inch", "--journal", "J"], ([], "J", False, "inch")),
    (["run", "p", "--answers", "f", "--no-learned"], ([], None, True, None)),
    (["calc", "gap", "--readings", "1", "2", "3", "--journal", "J"], ([], "J", False, None)),
])
def test_global_options_before_and_after_the_command(argv, expected):
    args = build_parser().parse_args(argv)
    assert (args.packs, args.journal, args.no_learned, args.units) == expected
    assert not [k for k in vars(args) if "after" in k]


def _commands(parser: argparse.ArgumentParser, prefix: str = ""
              ) -> dict[str, argparse.ArgumentParser]:
    found = {}
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            for name, child in action.choices.items():
                found[f"{prefix}{name}"] = child
                found.update(_commands(child, f"{prefix}{name} "))
    return found


def test_every_command_shows_the_global_options_in_its_help():
    commands = _commands(build_parser())
    assert {"start", "resume", "run", "sessions", "report", "kb lint", "calc gap"} <= set(commands)
    for name, parser in commands.items():
        text = parser.format_help()
        missing = [o for o in GLOBAL_OPTIONS if o not in text]
        assert not missing, f"diagnose {name} --help lacks {missing}"
        assert "options of every command (before or after it)" in text


def test_sessions_with_the_journal_after_the_command(tmp_path, capsys):
    journal = str(tmp_path / "other.sqlite3")
    code, _, err = run(capsys, "run", MINI, "--answers", _mini_answers(tmp_path), "--journal",
                       journal)
    assert code == 0, err
    for argv in (["sessions", "--journal", journal, "--json"],
                 ["--journal", journal, "sessions", "--json"],
                 ["--journal", "/nonexistent/x.sqlite3", "sessions", "--json", "--journal",
                  journal]):
        code, out, err = run(capsys, *argv)
        assert code == 0 and err == ""
        assert len(json.loads(out)) == 1
    code, out, _ = run(capsys, "sessions", "--json")  # the tests' own journal: untouched
    assert json.loads(out) == []


def test_a_bad_units_value_is_one_line(capsys):
    with pytest.raises(SystemExit) as caught:
        main(["sessions", "--units", "imperial"])
    assert caught.value.code == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "invalid choice: 'imperial'" in err


def _mini_answers(tmp_path: Path) -> str:
    path = tmp_path / "mini.yaml"
    path.write_text("nameplate: {rated_voltage: 24 V, rated_power: 20 W}\n"
                    "complaints: [will_not_release]\n", encoding="utf-8")
    return str(path)


# --- bare readings in inches -------------------------------------------------------------------


def _gap_finding(out: str) -> dict:
    return json.loads(out)["steps"][0]["finding"]


def test_run_with_units_inch_reads_a_bare_gap_in_inches(capsys, gap_answers):
    code, out, err = run(capsys, "run", "spring-applied-brake", "--answers", gap_answers,
                         "--units", "inch", "--json")
    assert code == 0, err
    finding = _gap_finding(out)
    # 0.018, 0.019, 0.017 in = 0.457, 0.483, 0.432 mm: mean 0.457 mm, between the smallest
    # allowed 0.15 mm and the wear limit 0.6 mm, spread 0.051 mm under 0.1 mm: within limits
    assert finding["outcome"] == "ok"
    assert finding["text"] == "0.018 in 0.019 in 0.017 in"  # the journal keeps the unit
    assert finding["verdict"]["figures"]["mean"] == {"label": "mean gap", "value": 0.018,
                                                     "unit": "in"}
    # the same readings taken as millimetres are far too small
    code, out, _ = run(capsys, "run", "spring-applied-brake", "--answers", gap_answers, "--json")
    assert code == 0 and _gap_finding(out)["outcome"] == "too_small"


def test_run_shows_inches_with_millimetres_beside(capsys, gap_answers):
    code, out, _ = run(capsys, "run", "spring-applied-brake", "--answers", gap_answers,
                       "--units", "inch", "--no-journal")
    assert code == 0
    assert "air_gap: ok" in out
    assert "  mean gap: 0.018 in (0.46 mm)" in out
    assert "  largest allowed (wear limit): 0.02362 in (0.6 mm)" in out
    code, out, _ = run(capsys, "run", "spring-applied-brake", "--answers", gap_answers,
                       "--no-journal")
    assert "  mean gap: 0.018 mm\n" in out and "(0.46 mm)" not in out


def test_the_settings_units_and_the_option_over_them(tmp_path, capsys, gap_answers):
    write_settings(tmp_path, 'units = "inch"\n')
    code, out, _ = run(capsys, "run", "spring-applied-brake", "--answers", gap_answers, "--json")
    assert code == 0 and _gap_finding(out)["outcome"] == "ok"
    code, out, _ = run(capsys, "--units", "metric", "run", "spring-applied-brake", "--answers",
                       gap_answers, "--json")
    assert code == 0 and _gap_finding(out)["outcome"] == "too_small"


def test_readings_with_their_unit_and_lists_in_an_answers_file(tmp_path, capsys):
    path = tmp_path / "list.yaml"
    path.write_text(GAP_ANSWERS.replace("0.018 0.019 0.017", "[0.018, 0.019, 0.017]")
                    + "  - {check: brake_coil_resistance, answer: 28.8}\n", encoding="utf-8")
    code, out, err = run(capsys, "run", "spring-applied-brake", "--answers", str(path),
                         "--units", "inch", "--json")
    assert code == 0, err
    steps = json.loads(out)["steps"]
    assert steps[0]["finding"]["text"] == ["0.018 in", "0.019 in", "0.017 in"]
    assert steps[1]["finding"]["text"] == "28.8"  # a resistance: no inches about it
    path.write_text(GAP_ANSWERS.replace("0.018 0.019 0.017", "0.46 0.48 0.43 mm"),
                    encoding="utf-8")
    code, out, _ = run(capsys, "run", "spring-applied-brake", "--answers", str(path),
                       "--units", "inch", "--json")
    assert _gap_finding(out)["text"] == "0.46 0.48 0.43 mm"  # typed with its unit: as typed


def _open_gap_session(model) -> str:
    """A session of the shipped pack in the tests' journal, nameplate and complaint given."""
    import os

    from diagnose.journal.store import Journal
    from diagnose.session import Session

    with Journal(os.environ["DIAGNOSE_JOURNAL"]) as j:
        sid = j.new_session(model.id, model.version, model.content_hash, "site")
        session = Session(model, sink=j, session_id=sid)
        session.add_complaint("will_not_release")
        while session.open_parameters():
            p = model.parameters[session.open_parameters()[0]]
            session.set_nameplate(p.id, p.default if p.default is not None else "unknown")
    return sid


def _shell(func, lines: list[str], *extra) -> tuple[int, str]:
    from diagnose.shell.reader import LineReader

    out = io.StringIO()
    con = Console(file=out, width=80, color_system=None)
    status = func(*extra, console=con, reader=LineReader(io.StringIO("\n".join(lines) + "\n"),
                                                          con))
    return status, out.getvalue()


@pytest.mark.parametrize(("units", "outcome", "prompt"), [
    ("inch", "ok", "Reading (in if no unit is given)"),
    ("metric", "too_small", "Reading (mm if no unit is given)"),
])
def test_the_shell_reads_a_bare_gap_in_the_preferred_unit(units, outcome, prompt):
    import os

    from diagnose.journal.store import Journal
    from diagnose.kb.loader import load_model
    from diagnose.shell.entry import resume

    sid = _open_gap_session(load_model("spring-applied-brake"))
    args = build_parser().parse_args(["resume", sid, "--units", units])
    status, screen = _shell(resume, ["do air_gap", "ack", "0.018 0.019 0.017", "quit"], args,
                            sid)
    assert status == 0
    assert prompt in screen
    with Journal(os.environ["DIAGNOSE_JOURNAL"], readonly=True) as j:
        reading = [e for e in j.load_events(sid) if e.kind == "reading"][-1]
    assert reading.data["verdict"] == outcome
    if units == "inch":
        assert reading.data["text"] == "0.018 in 0.019 in 0.017 in"
        assert "a bare number is in inches" in screen
        assert re.search(r"mean gap +0\.018 +in \(0\.46 mm\)", screen)
    else:
        assert "(0.46 mm)" not in screen


# --- the technician and the mode ---------------------------------------------------------------


def test_who_and_mode_default_from_the_settings(tmp_path, capsys):
    import os

    from diagnose.journal.store import Journal
    from diagnose.shell.entry import main as start

    write_settings(tmp_path, 'technician = "A. Example"\nmode = "phone"\n')
    status, screen = _shell(start, ["quit"], build_parser().parse_args(["start", SHELL_PACK]))
    assert status == 0 and "phone mode" in screen
    code, _, err = run(capsys, "run", MINI, "--answers", _mini_answers(tmp_path))
    assert code == 0, err
    code, _, err = run(capsys, "run", MINI, "--answers", _mini_answers(tmp_path), "--who",
                       "B. Other", "--mode", "site")
    assert code == 0, err
    with Journal(os.environ["DIAGNOSE_JOURNAL"], readonly=True) as j:
        started = sorted((s.started, s.id, s.who, s.mode) for s in j.sessions())
    assert [(who, mode) for _, _, who, mode in started] == [
        ("A. Example", "phone"), ("A. Example", "phone"), ("B. Other", "site")]
