"""Pack folders are closed, builds_on names ids, and thousands of packs are found fast.

A pack reads only files whose real path is inside its own folder; ``builds_on``
entries are ids looked up on the search path before anything of the base is
read, never paths; a duplicate entry is an error at its place and is followed
once. Discovery reads manifests only (the ``pack:`` line where it settles the
id) and keeps what it read in a cache keyed by each manifest's file status,
which a changed manifest invalidates. The runs on hostile packs use the
limited subprocess of tests/hostile.py (2 s, 200 MB-class limits).
"""

from __future__ import annotations

import json
import os
import re
import shutil
import time
from pathlib import Path

import pytest
from hostile import diagnose, lint_lines, one_line_error, write
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from diagnose.errors import InputError
from diagnose.kb import locate
from diagnose.kb.loader import check_pack, load_model, read_chain, read_pack
from diagnose.kb.locate import find_pack, find_pack_id, manifest_id_line, scan, unknown_pack
from diagnose.kb.yamlpos import read_yaml

ROOT = Path(__file__).parent.parent
MINI = ROOT / "tests" / "fixtures" / "mini"
SHIPPED_IDS = {"electrical-supply", "permanent-magnet-brake", "spring-applied-brake"}

PLANTED_CAUSE = "planted_outside_cause"
PLANTED = f"causes:\n  - id: {PLANTED_CAUSE}\n    title: Planted from outside\n    prior: 5\n"
NOT_YAML = "causes: [unclosed\n  - : : {\n"  # read, this would be a YAML syntax error
MANY = 3000


@pytest.fixture(autouse=True)
def _private_cache(tmp_path_factory, monkeypatch):
    """Each test has its own cache folder, so that no answer comes from another test."""
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path_factory.mktemp("cache")))


@pytest.fixture
def pack(tmp_path: Path) -> Path:
    """A fresh copy of the mini pack to spoil."""
    folder = tmp_path / "spoilt"
    shutil.copytree(MINI, folder)
    return folder


def _manifest_with(folder: Path, line: str) -> tuple[int, str]:
    """Add ``line`` to the manifest of ``folder``; return its line number and text."""
    manifest = folder / "pack.yaml"
    lines = manifest.read_text(encoding="utf-8").splitlines()
    lines.insert(2, line)
    manifest.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return 3, line


def _base_pack(search: Path, pid: str = "base-pack") -> Path:
    return write(search / pid / "pack.yaml",
                 f"pack: {pid}\ntitle: A base\nversion: 1.0.0\nnotice: An aid.\n").parent


def _env(tmp_path: Path, **more: str) -> dict[str, str]:
    return {"XDG_CACHE_HOME": str(tmp_path / "cache"), **more}


# --- a pack reads only its own files -------------------------------------------------------------


def test_a_yaml_link_out_of_the_pack_is_not_read(pack, tmp_path):
    write(tmp_path / "outside" / "planted.yaml", PLANTED)
    write(tmp_path / "outside" / "broken.yaml", NOT_YAML)
    (pack / "planted.yaml").symlink_to(tmp_path / "outside" / "planted.yaml")
    (pack / "zz.yml").symlink_to(Path("..") / "outside" / "broken.yaml")

    model, problems = check_pack(str(pack))
    errors = [p for p in problems if p.level == "error"]
    assert sorted(Path(p.source.file).name for p in errors) == ["planted.yaml", "zz.yml"]
    assert all(p.code == "outside" and "outside the pack folder" in p.message for p in errors)
    # the rest of the pack was read and compiled; nothing of the outside files is in it
    assert model is not None and "fuse_blown" in model.causes
    assert PLANTED_CAUSE not in model.causes
    with pytest.raises(Exception, match="outside the pack folder"):
        load_model(str(pack))


def test_a_manifest_link_out_of_the_pack_stops_there(pack, tmp_path):
    write(tmp_path / "outside" / "pack.yaml", "pack: planted-pack\n" + NOT_YAML)
    (pack / "pack.yaml").unlink()
    (pack / "pack.yaml").symlink_to(tmp_path / "outside" / "pack.yaml")
    src, problems = read_pack(pack)
    assert [p.code for p in problems] == ["outside"] and src.documents == []
    assert src.id != "planted-pack"


def test_lint_says_so_in_one_line(pack, tmp_path):
    write(tmp_path / "outside" / "broken.yaml", NOT_YAML)
    (pack / "more.yaml").symlink_to(tmp_path / "outside" / "broken.yaml")
    proc = diagnose("kb", "lint", str(pack), env=_env(tmp_path))
    assert proc.returncode == 1
    assert lint_lines(proc) == [(f"{pack / 'more.yaml'}: error: points outside the pack folder; "
                                 "a pack reads only its own files [outside]")]


def test_a_pack_folder_reached_by_a_link_loads(pack, tmp_path):
    shelf = tmp_path / "shelf"
    shelf.mkdir()
    (shelf / "linked").symlink_to(pack, target_is_directory=True)
    model = load_model(str(shelf / "linked"))
    assert model.id == "mini-brake" and "fuse_blown" in model.causes
    # and found by its id through a search folder
    assert find_pack("mini-brake", [str(shelf)]) == shelf / "linked"
    assert load_model("mini-brake", search=[str(shelf)]).id == "mini-brake"


def test_a_link_to_a_file_inside_the_pack_is_read(pack):
    (pack / "parts").mkdir()
    write(pack / "parts" / "extra.yaml", PLANTED.replace("Planted from outside", "Inside"))
    (pack / "extra.yaml").symlink_to(Path("parts") / "extra.yaml")
    src, problems = read_pack(pack)
    assert not [p for p in problems if p.level == "error"]
    assert [Path(d.path).name for d in src.documents] == ["pack.yaml", "extra.yaml",
                                                          "knowledge.yaml"]


def test_sub_folders_are_not_read(pack):
    write(pack / "parts" / "more.yaml", NOT_YAML)
    src, problems = read_pack(pack)
    assert problems == [] and len(src.documents) == 2


# --- builds_on names ids -------------------------------------------------------------------------


@pytest.mark.parametrize("entry", ["../outside", "ABS", "~/planted", "./here", "sub/dir"])
def test_builds_on_a_path_is_refused_and_not_read(pack, tmp_path, entry):
    home = tmp_path / "home"
    targets = {"../outside": tmp_path / "outside", "ABS": tmp_path / "abs-target",
               "~/planted": home / "planted", "./here": pack / "here",
               "sub/dir": pack / "sub" / "dir"}
    target = targets[entry]
    write(target / "pack.yaml", "pack: planted-pack\n" + NOT_YAML)
    write(target / "knowledge.yaml", NOT_YAML)
    if entry == "ABS":
        entry = str(target)
    line, text = _manifest_with(pack, f"builds_on: [{entry}]")
    col = text.index(entry) + 1
    # run from the pack folder, so that a relative path would lead to the planted pack
    proc = diagnose("kb", "lint", "pack.yaml", cwd=pack, env=_env(tmp_path, HOME=str(home)))
    assert proc.returncode == 1
    problems = lint_lines(proc)
    assert len(problems) == 1, proc.stdout
    assert problems[0].startswith(f"pack.yaml:{line}:{col}: error: builds_on names a pack by "
                                  f"its id, not a path: {entry[:40]!r}"[:-1]), problems
    assert problems[0].endswith(" [builds-on]") and len(problems[0]) < 200
    assert "YAML" not in proc.stdout and "planted" not in proc.stdout.replace(entry, "")


def test_builds_on_an_unknown_id_still_says_so(pack, tmp_path):
    line, text = _manifest_with(pack, "builds_on: [no-such-pack]")
    _, problems = check_pack(str(pack), search=[str(tmp_path / "empty")])
    bad = [p for p in problems if p.code == "builds-on"]
    assert len(bad) == 1 and "no pack 'no-such-pack'" in bad[0].message
    assert (bad[0].source.line, bad[0].source.col) == (line, text.index("no-such") + 1)


def test_builds_on_entries_that_are_not_text_are_a_clear_problem(pack, tmp_path):
    _manifest_with(pack, "builds_on: [3, {a: b}]")
    _, problems = check_pack(str(pack))
    msgs = [p.message for p in problems if p.level == "error"]
    assert any("3 is not of type 'string'" in m for m in msgs), msgs
    assert any("is not of type 'string'" in m and "'a'" in m for m in msgs), msgs


def test_a_duplicate_builds_on_entry_is_an_error_at_its_place(pack, tmp_path):
    search = tmp_path / "search"
    _base_pack(search)
    line, text = _manifest_with(pack, "builds_on: [base-pack, base-pack]")
    sources, problems = read_chain(str(pack), [str(search)])
    assert [s.id for s in sources] == ["base-pack", "mini-brake"]
    _, problems = check_pack(str(pack), search=[str(search)])
    errors = [p for p in problems if p.level == "error"]
    assert len(errors) == 1, [str(p) for p in errors]
    first, second = (m.start() + 1 for m in re.finditer("base-pack", text))
    assert errors[0].code == "builds-on"
    assert (errors[0].source.line, errors[0].source.col) == (line, second)
    assert errors[0].message == (f"builds_on lists 'base-pack' twice (first at line {line}, "
                                 f"column {first}); a pack is built on once")


def test_two_thousand_duplicates_end_fast(pack, tmp_path):
    search = tmp_path / "search"
    _base_pack(search)
    _manifest_with(pack, "builds_on: [" + ", ".join(["base-pack"] * 2000) + "]")
    proc = diagnose("--packs", str(search), "kb", "lint", str(pack), env=_env(tmp_path))
    assert proc.returncode == 1
    problems = lint_lines(proc)
    assert len(problems) == 1999 and all("lists 'base-pack' twice" in p for p in problems)
    assert max(map(len, problems)) < 300


def test_a_circle_of_packs_is_still_found(tmp_path):
    search = tmp_path / "search"
    write(search / "a" / "pack.yaml", "pack: a\ntitle: A\nversion: 1\nnotice: N.\nbuilds_on: [b]\n")
    write(search / "b" / "pack.yaml", "pack: b\ntitle: B\nversion: 1\nnotice: N.\nbuilds_on: [a]\n")
    sources, problems = read_chain("a", [str(search)])
    circles = [p for p in problems if "circle" in p.message]
    assert len(circles) == 1 and "a -> b -> a" in circles[0].message
    assert [s.id for s in sources] == ["b", "a"]


def test_a_base_named_twice_in_a_chain_is_read_once(tmp_path, monkeypatch):
    search = tmp_path / "search"
    _base_pack(search, "root-pack")
    for pid in ("left", "right"):
        write(search / pid / "pack.yaml",
              f"pack: {pid}\ntitle: T\nversion: 1\nnotice: N.\nbuilds_on: [root-pack]\n")
    write(search / "top" / "pack.yaml",
          "pack: top\ntitle: T\nversion: 1\nnotice: N.\nbuilds_on: [left, right]\n")
    from diagnose.kb import loader

    reads: list[str] = []
    real = loader.read_pack
    monkeypatch.setattr(loader, "read_pack", lambda f: reads.append(Path(f).name) or real(f))
    sources, problems = loader.read_chain("top", [str(search)])
    assert problems == []
    assert [s.id for s in sources] == ["root-pack", "left", "right", "top"]
    assert sorted(reads) == ["left", "right", "root-pack", "top"]


def test_find_pack_id_never_reads_a_path(tmp_path):
    write(tmp_path / "planted" / "pack.yaml", "pack: planted\n")
    for ref in ("../planted", str(tmp_path / "planted"), "~/planted", "planted/"):
        with pytest.raises(InputError, match="is a path; a pack is named by its id"):
            find_pack_id(ref, [str(tmp_path / "empty")])


# --- odd manifests -------------------------------------------------------------------------------


def test_a_manifest_that_is_not_utf8_is_one_error(pack, tmp_path):
    write(pack / "pack.yaml", b"pack: mini-brake\ntitle: Bremse \xe4\xfc\n")
    proc = diagnose("kb", "lint", str(pack), env=_env(tmp_path))
    assert proc.returncode == 1
    assert lint_lines(proc) == [(f"{pack / 'pack.yaml'}: error: not UTF-8 text; save the file "
                                 "as UTF-8 [yaml]")]
    # listed under its folder name, with the same one problem
    found, problems = scan([str(pack.parent)])
    assert found["spoilt"] == pack
    assert len(problems) == 1 and "not UTF-8 text" in problems[0].message


@pytest.mark.parametrize("manifest", [
    "title: no id here\n",
    "[1, 2]\n",
    "pack: [a, b]\n",
])
def test_a_manifest_without_a_usable_id_is_one_error(pack, manifest):
    write(pack / "pack.yaml", manifest)
    _, problems = check_pack(str(pack))
    errors = [p for p in problems if p.level == "error"]
    assert len(errors) == 1 and Path(errors[0].source.file).name == "pack.yaml", errors


def test_a_broken_manifest_with_an_id_line_is_listed_under_that_id(tmp_path):
    write(tmp_path / "folder-name" / "pack.yaml", "pack: line-id\nx: [[[\n")
    found, problems = scan([str(tmp_path)])
    assert found["line-id"] == tmp_path / "folder-name" and len(problems) == 1
    assert find_pack("line-id", [str(tmp_path)]) == tmp_path / "folder-name"


# --- the id line ---------------------------------------------------------------------------------


@pytest.mark.parametrize(("text", "expected"), [
    ("pack: a-b\n", "a-b"),
    ("# about\n\n---\npack: a-b   # the id\ntitle: T\n", "a-b"),
    ("pack: a-b\n   \ntitle: T\n", "a-b"),
    ("pack: a-b\n  c\n", None),            # the value goes on
    ("pack: a-b\n\n  c\n", None),
    ("pack: a-b#c\n", None),               # '#' without a space is part of the value
    ("pack: true\n", None),                # YAML reads it as a boolean
    ("pack: 1-a\n", None),
    ("pack: 'a-b'\n", None),               # quoted: the reader decides
    ("title: T\npack: a-b\n", None),       # not the first key
    ("pack: a-b\n\"pack\": c\n", None),    # the key again
    ("pack: a-b\r\n", None),
    ("\ufeffpack: a-b\n", None),
    ("%YAML 1.1\n---\npack: a-b\n", None),
])
def test_the_id_line(text, expected):
    assert manifest_id_line(text) == expected


_LINES = st.sampled_from([
    "pack: alpha", "pack: beta-2", "pack: true", "pack: 'q'", "pack:", "  pack: inner",
    "title: T", "title: 'a", "x: [1,", "  go-on", "  - item", "items:", "# note", "", "---",
    "...", "\"pack\": other", "? pack", ": other", "<<: {pack: merged}", "x: |", "pack: a b",
    "notice: >-", "pack: alpha # c", "%YAML 1.1", "x: &a 1", "{pack: flow}", "\t",
])


@settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(_LINES, max_size=8))
def test_the_id_line_agrees_with_the_reader(lines):
    """Whenever the id line names an id and the manifest reads cleanly, the reader finds it too."""
    text = "\n".join(lines) + "\n"
    hint = manifest_id_line(text)
    if hint is None:
        return
    doc, problems = read_yaml(text, "pack.yaml")
    if doc is None or any(p.level == "error" for p in problems):
        return  # a broken manifest: listed under its id line, with its problem
    assert isinstance(doc.data, dict) and doc.data.get("pack") == hint, text


# --- thousands of packs --------------------------------------------------------------------------


@pytest.fixture(scope="module")
def many(tmp_path_factory) -> Path:
    """A search folder of 3,000 small packs."""
    root = tmp_path_factory.mktemp("many")
    for i in range(MANY):
        folder = root / f"p{i:04d}"
        folder.mkdir()
        (folder / "pack.yaml").write_text(
            f"# pack number {i}\npack: pack-{i:04d}\ntitle: Pack {i}\nversion: 1.0.0\n"
            "notice: An aid; follow local codes.\n", encoding="utf-8")
    return root


def test_three_thousand_packs_list(many, tmp_path):
    for _ in range(2):  # without a cache, then with it
        proc = diagnose("--packs", str(many), "kb", "list", env=_env(tmp_path))
        assert proc.returncode == 0 and proc.stderr == "", proc.stderr[-500:]
        listed = dict(line.split("\t") for line in proc.stdout.splitlines())
        assert len(listed) == MANY + len(SHIPPED_IDS)
        assert Path(listed["pack-2999"]) == many / "p2999"


def test_a_mistyped_id_among_three_thousand_is_short(many, tmp_path):
    proc = diagnose("--packs", str(many), "kb", "show", "pack-0007x", env=_env(tmp_path))
    err = one_line_error(proc, "no pack 'pack-0007x'")
    assert "and 2,993 more" in err and "did you mean 'pack-0007'?" in err
    assert err.count(", ") == 9


def test_the_message_for_an_unknown_pack():
    assert unknown_pack("x", []) == "no pack 'x' (known: none)"
    msg = unknown_pack("pack-1", [f"pack-{i}" for i in range(2, 40)] + ["y" * 500])
    assert "and 29 more" in msg and "did you mean" in msg and len(msg) < 300


# --- the cache -----------------------------------------------------------------------------------


def _later(monkeypatch, seconds: float = 10.0) -> None:
    """Read as if ``seconds`` from now, so that files written just now are old enough to cache."""
    real = time.time_ns
    monkeypatch.setattr(locate.time, "time_ns", lambda: real() + int(seconds * 1e9))


def _cache_file() -> Path:
    return Path(os.environ["XDG_CACHE_HOME"]) / "diagnose" / "packs.json"


def test_the_cache_answers_and_a_changed_manifest_is_read_again(tmp_path, monkeypatch):
    manifest = write(tmp_path / "folder" / "pack.yaml", "pack: alpha-one\n# more\nx: [[\n")
    _later(monkeypatch)
    found, problems = scan([str(tmp_path)])
    assert "alpha-one" in found and len(problems) == 1
    cached = json.loads(_cache_file().read_text())["manifests"]
    assert str(manifest) in cached

    # a second scan answers from the cache: the reader is not called
    def no_reading(*args, **kwargs):
        raise AssertionError("read again")

    with monkeypatch.context() as m:
        m.setattr(locate, "_read_manifest", no_reading)
        m.setattr("diagnose.kb.yamlpos.read_text", no_reading)
        found, again = scan([str(tmp_path)])
    assert "alpha-one" in found and [str(p) for p in again] == [str(p) for p in problems]

    # the id changes, the size stays: the changed status is enough
    before = os.stat(manifest)
    time.sleep(0.05)
    manifest.write_text("pack: alpha-two\n# more\nx: []\n", encoding="utf-8")
    assert os.stat(manifest).st_size == before.st_size
    if os.stat(manifest).st_ctime_ns == before.st_ctime_ns:
        pytest.skip("this file system's clock did not move")
    found, problems = scan([str(tmp_path)])
    assert "alpha-two" in found and "alpha-one" not in found and problems == []
    assert find_pack("alpha-two", [str(tmp_path)]) == tmp_path / "folder"
    with pytest.raises(InputError, match="no pack 'alpha-one'"):
        find_pack("alpha-one", [str(tmp_path)])

    # and a manifest whose modification time is put back is still read again
    cached = os.stat(manifest)
    time.sleep(0.05)
    manifest.write_text("pack: alpha-333\n# more\nx: []\n", encoding="utf-8")
    os.utime(manifest, ns=(cached.st_atime_ns, cached.st_mtime_ns))
    now = os.stat(manifest)
    assert (now.st_size, now.st_mtime_ns) == (cached.st_size, cached.st_mtime_ns)
    if now.st_ctime_ns == cached.st_ctime_ns:
        pytest.skip("this file system's clock did not move")
    assert "alpha-333" in scan([str(tmp_path)])[0]


def test_a_file_changed_just_now_is_not_cached(tmp_path):
    write(tmp_path / "folder" / "pack.yaml", "pack: fresh-one\n")
    assert "fresh-one" in scan([str(tmp_path)])[0]
    data = json.loads(_cache_file().read_text()) if _cache_file().exists() else {}
    assert str(tmp_path / "folder" / "pack.yaml") not in data.get("manifests", {})


@pytest.mark.parametrize("content", [
    b"\x00\xff not json",
    b"{\"rules\": 1}",
    b"[]",
    b"{\"manifests\": {\"x\": [1, 2]}}",
    b"{" * 100_000,
])
def test_a_damaged_cache_file_is_ignored(tmp_path, monkeypatch, content, capsys):
    write(tmp_path / "folder" / "pack.yaml", "pack: still-found\n")
    write(_cache_file(), content)
    _later(monkeypatch)
    assert "still-found" in scan([str(tmp_path)])[0]
    assert capsys.readouterr() == ("", "")


def test_a_cache_entry_with_the_wrong_answer_for_its_file_is_not_used(tmp_path, monkeypatch):
    manifest = write(tmp_path / "folder" / "pack.yaml", "pack: right-one\n")
    _later(monkeypatch)
    scan([str(tmp_path)])
    data = json.loads(_cache_file().read_text())
    stamp = data["manifests"][str(manifest)][0]
    data["manifests"][str(manifest)] = [[stamp[0], stamp[1], stamp[2] + 1, *stamp[3:]],
                                        "wrong-one", True, None]
    _cache_file().write_text(json.dumps(data))
    assert "right-one" in scan([str(tmp_path)])[0]


def test_an_unwritable_cache_folder_is_no_problem(tmp_path, monkeypatch):
    write(tmp_path / "cache-file-in-the-way", "x")
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache-file-in-the-way"))
    write(tmp_path / "packs" / "folder" / "pack.yaml", "pack: no-cache\n")
    _later(monkeypatch)
    assert "no-cache" in scan([str(tmp_path / "packs")])[0]
