"""The compiled-pack cache, and the one-pass YAML reader of large packs.

A pack loaded twice through the cache is read from its YAML once: the second
load is proved a hit by counting the calls of the loader's YAML reader (no
timing here; speed is `python -m diagnose.bench`). Anything that made the
model (a file of the pack or of a base pack, the base a ``builds_on`` id leads
to, the learned overlay, the program's version or code) changes the answer to
a miss; a damaged entry is ignored and written anew; a cache folder that may
not be used is ignored without a word. The one-pass reader gives exactly what
the exact reader gives, on clean and on broken text.
"""

from __future__ import annotations

import dataclasses
import json
import os
import pickle
import random
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

import diagnose
from diagnose.cli import main
from diagnose.kb import cache, loader, yamlpos
from diagnose.kb.lint import lint_paths
from diagnose.kb.loader import check_pack, load_model
from diagnose.reasoning.evidence import Evidence
from diagnose.reasoning.posterior import posterior

ROOT = Path(__file__).parent.parent
MINI = ROOT / "tests" / "fixtures" / "mini"

DEVICE_MANIFEST = """\
pack: mini-device
title: A device pack on the mini base
version: 0.1.0
builds_on: [mini-base]
notice: This tool is an aid; follow local codes and licensed practice.
"""
DEVICE_HUB = """\
complaints:
  - id: grinds
    title: Brake grinds when the axis moves
    gate: or
    inputs: [hub_worn]
causes:
  - id: hub_worn
    title: Hub splines worn
    prior: 5
repairs:
  - id: replace_hub
    title: Replace the hub
    minutes: 60
    requires: {power: isolated}
    fixes: [hub_worn]
    cautions: [lockout]
"""


@pytest.fixture
def shelf(tmp_path: Path) -> Path:
    """A search folder with a base pack (the mini fixture) and a device pack built on it."""
    folder = tmp_path / "shelf"
    shutil.copytree(MINI, folder / "mini-base")
    manifest = folder / "mini-base" / "pack.yaml"
    manifest.write_text(manifest.read_text().replace("pack: mini-brake", "pack: mini-base"))
    device = folder / "mini-device"
    device.mkdir()
    (device / "pack.yaml").write_text(DEVICE_MANIFEST)
    (device / "hub.yaml").write_text(DEVICE_HUB)
    return folder


@pytest.fixture
def reads(monkeypatch) -> list[str]:
    """The files the loader's YAML reader is asked to read, in order."""
    seen: list[str] = []
    real = loader.read_yaml

    def counted(text: str, path: str):
        seen.append(path)
        return real(text, path)

    monkeypatch.setattr(loader, "read_yaml", counted)
    return seen


def _load(shelf: Path, **kw):
    return load_model("mini-device", search=[str(shelf)], cache=True, **kw)


def _ranking(model) -> list[dict]:
    return posterior(model, Evidence(complaints=("will_not_release",))).ranking().to_list()


def _entries() -> list[Path]:
    folder = cache.models_dir()
    return sorted(folder.glob(f"*{cache.SUFFIX}")) if folder and folder.is_dir() else []


def test_a_second_load_is_a_hit_and_gives_the_same_model(shelf, reads):
    first = _load(shelf)
    assert len(reads) == 4 and len(_entries()) == 1  # two files of the device, two of the base
    reads.clear()
    second = _load(shelf)
    assert reads == []  # the YAML was not read again
    assert second == first and second.content_hash == first.content_hash
    assert second.path == first.path and second.packs == ("mini-base", "mini-device")
    assert _ranking(second) == _ranking(first)
    assert second.causes["hub_worn"].source == first.causes["hub_worn"].source


def test_check_pack_gives_the_warnings_again_from_the_cache(shelf, reads):
    model, problems = check_pack("mini-device", search=[str(shelf)], cache=True)
    reads.clear()
    again, more = check_pack("mini-device", search=[str(shelf)], cache=True)
    assert reads == [] and again == model and more == problems


def test_without_cache_nothing_is_kept_or_read(shelf, reads):
    load_model("mini-device", search=[str(shelf)])
    load_model("mini-device", search=[str(shelf)])
    assert len(reads) == 8 and _entries() == []


@pytest.mark.parametrize("edit", ["device file", "device manifest", "base file", "base manifest",
                                  "new file", "file removed"])
def test_an_edited_file_of_the_pack_or_of_a_base_pack_misses(shelf, reads, edit):
    first = _load(shelf)
    device, base = shelf / "mini-device", shelf / "mini-base"
    if edit == "device file":
        hub = device / "hub.yaml"
        hub.write_text(hub.read_text().replace("prior: 5", "prior: 6"))
    elif edit == "device manifest":
        (device / "pack.yaml").write_text(DEVICE_MANIFEST.replace("0.1.0", "0.1.1"))
    elif edit == "base file":
        knowledge = base / "knowledge.yaml"
        knowledge.write_text(knowledge.read_text().replace("prior: 30", "prior: 31"))
    elif edit == "base manifest":
        manifest = base / "pack.yaml"
        manifest.write_text(manifest.read_text() + "# a comment changes the text\n")
    elif edit == "new file":
        (device / "more.yaml").write_text("{}\n")
    else:
        (device / "hub.yaml").rename(device / "hub.yaml.off")
    reads.clear()
    second = _load(shelf)
    assert reads, "the YAML was read again"
    assert second.content_hash != first.content_hash
    if edit == "device file":
        assert second.causes["hub_worn"].prior == 6
    if edit == "base file":
        assert second.causes["lining_worn"].prior == 31
    assert ("hub_worn" in second.causes) == (edit != "file removed")
    reads.clear()
    assert _load(shelf) == second and reads == []  # and the new model is kept


def test_a_base_pack_found_elsewhere_misses(shelf, tmp_path, reads):
    _load(shelf)
    earlier = tmp_path / "earlier"
    shutil.copytree(shelf / "mini-base", earlier / "mini-base")
    knowledge = earlier / "mini-base" / "knowledge.yaml"
    knowledge.write_text(knowledge.read_text().replace("prior: 30", "prior: 40"))
    reads.clear()
    model = load_model("mini-device", search=[str(earlier), str(shelf)], cache=True)
    assert reads and model.causes["lining_worn"].prior == 40


def test_the_learned_overlay_is_part_of_the_key(shelf, reads):
    plain = _load(shelf)
    learned = _load(shelf, learned={"hub_worn": 7.0})
    assert learned.causes["hub_worn"].prior == 7.0 and plain.causes["hub_worn"].prior == 5
    other = _load(shelf, learned={"hub_worn": 8.0})
    assert other.causes["hub_worn"].prior == 8.0
    reads.clear()
    assert _load(shelf, learned={"hub_worn": 7.0}) == learned
    assert _load(shelf) == plain
    assert reads == []


def test_the_service_keys_on_the_learned_file(shelf, reads, monkeypatch):
    from diagnose.journal.learn import Overlay, write_overlay
    from diagnose.paths import journal_path, overlay_path
    from diagnose.service import Where, open_pack

    where = Where(packs=(str(shelf),))
    assert open_pack("mini-device", where).causes["hub_worn"].prior == 5
    write_overlay(Overlay("mini-device", "x", {"hub_worn": 9.0}, 3),
                  overlay_path(journal_path(), "mini-device"))
    reads.clear()
    assert open_pack("mini-device", where).causes["hub_worn"].prior == 9.0
    assert reads
    reads.clear()
    assert open_pack("mini-device", where).causes["hub_worn"].prior == 9.0
    assert open_pack("mini-device", where.own()).causes["hub_worn"].prior == 5
    assert reads == []


def test_another_program_version_or_code_misses(shelf, reads, monkeypatch):
    _load(shelf)
    monkeypatch.setattr(cache, "code_fingerprint", lambda: "another build")
    reads.clear()
    _load(shelf)
    assert reads
    monkeypatch.undo()
    reads.clear()
    _load(shelf)
    assert reads == []  # the first entry is still there, for the first build


def test_the_fingerprint_follows_the_version_and_the_code(monkeypatch):
    cache.code_fingerprint.cache_clear()
    now = cache.code_fingerprint()
    assert len(now) == 64
    monkeypatch.setattr(diagnose, "__version__", "99.0")
    cache.code_fingerprint.cache_clear()
    assert cache.code_fingerprint() not in ("", now)
    monkeypatch.undo()
    real = Path.read_bytes

    def edited(self: Path) -> bytes:
        data = real(self)
        return data + b"# edited\n" if self.name == "compiler.py" else data

    monkeypatch.setattr(Path, "read_bytes", edited)
    cache.code_fingerprint.cache_clear()
    assert cache.code_fingerprint() not in ("", now)
    monkeypatch.undo()
    cache.code_fingerprint.cache_clear()
    assert cache.code_fingerprint() == now


def _damage(entry: Path, how: str) -> None:
    raw = entry.read_bytes()
    head, _, body = raw.partition(b"\n")
    if how == "truncated":
        entry.write_bytes(raw[: len(raw) // 2])
    elif how == "garbage":
        entry.write_bytes(b"\x80\x04garbage" * 100)
    elif how == "empty":
        entry.write_bytes(b"")
    elif how == "bad pickle":
        entry.write_bytes(head + b"\n" + b"\x80\x05not a pickle at all")
    elif how == "wrong type":
        entry.write_bytes(head + b"\n" + pickle.dumps({"model": None}))
    elif how == "another hash":
        model, problems = pickle.loads(body)
        changed = dataclasses.replace(model, content_hash="0" * 16)
        entry.write_bytes(head + b"\n" + pickle.dumps((changed, problems)))
    elif how == "header says other files":
        header = json.loads(head)
        header["chain"][0][2][0] = "0" * 64
        entry.write_bytes(json.dumps(header).encode() + b"\n" + body)
    elif how == "unknown class":
        entry.write_bytes(head + b"\n" + b"\x80\x04\x95\x10\x00\x00\x00\x00\x00\x00\x00"
                          b"\x8c\x04nope\x94\x8c\x04Nope\x94\x93\x94.")


@pytest.mark.parametrize("how", ["truncated", "garbage", "empty", "bad pickle", "wrong type",
                                 "another hash", "header says other files", "unknown class"])
def test_a_damaged_entry_is_ignored_and_written_anew(shelf, reads, how):
    first = _load(shelf)
    (entry,) = _entries()
    _damage(entry, how)
    reads.clear()
    again = _load(shelf)
    assert reads and again == first
    reads.clear()
    assert _load(shelf) == first and reads == []  # rebuilt


def test_a_pack_with_errors_is_never_kept(shelf):
    hub = shelf / "mini-device" / "hub.yaml"
    hub.write_text(hub.read_text().replace("fixes: [hub_worn]", "fixes: [hub_wrn]"))
    for _ in range(2):
        with pytest.raises(diagnose.errors.KnowledgeError):
            _load(shelf)
    assert _entries() == []


def test_lint_always_reads_the_yaml(shelf, reads):
    _load(shelf)
    reads.clear()
    (result,) = lint_paths(["mini-device"], search=[str(shelf)])
    assert reads and result.ok()


def _cli(capsys, *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


@pytest.mark.parametrize("where", ["before", "after"])
def test_no_cache_reads_the_yaml_and_keeps_nothing(shelf, reads, capsys, where):
    args = ["kb", "show", "mini-device", "--json", "--packs", str(shelf)]
    argv = ["--no-cache", *args] if where == "before" else [*args, "--no-cache"]
    for _ in range(2):
        code, out, _ = _cli(capsys, *argv)
        assert code == 0 and json.loads(out)["pack"] == "mini-device"
    assert len(reads) == 8 and _entries() == []
    _cli(capsys, *args)
    reads.clear()
    code, out, _ = _cli(capsys, *args)
    assert code == 0 and reads == [] and len(_entries()) == 1


def test_kb_cache_shows_and_clears(shelf, capsys):
    code, out, _ = _cli(capsys, "kb", "cache")
    assert code == 0 and "entries: 0" in out and str(cache.models_dir()) in out
    _load(shelf)
    _load(shelf, learned={"hub_worn": 2.0})
    code, out, _ = _cli(capsys, "kb", "cache")
    assert code == 0 and "entries: 2" in out and "size: " in out and "size: 0 bytes" not in out
    code, out, _ = _cli(capsys, "kb", "cache", "clear")
    assert code == 0 and out.startswith("removed 2 compiled pack(s)")
    assert _entries() == []
    code, out, _ = _cli(capsys, "kb", "cache")
    assert "entries: 0" in out


def test_kb_cache_refuses_an_unknown_action(capsys):
    with pytest.raises(SystemExit) as stop:
        main(["kb", "cache", "purge"])
    assert stop.value.code == 2
    err = capsys.readouterr().err
    assert len(err.strip().splitlines()) == 1 and "invalid choice" in err


def test_a_symlinked_cache_folder_is_ignored(shelf, tmp_path, reads, capsys):
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir(mode=0o700)
    folder = cache.models_dir()
    folder.parent.mkdir(parents=True)
    folder.symlink_to(elsewhere, target_is_directory=True)
    first = _load(shelf)
    reads.clear()
    assert _load(shelf) == first and reads  # read again: the folder is not used
    assert list(elsewhere.iterdir()) == []
    code, out, err = _cli(capsys, "kb", "cache", "clear")
    assert code == 0 and "symbolic link" in err and folder.is_symlink()


@pytest.mark.parametrize("inside", [True, False])
def test_a_symlinked_diagnose_folder_is_ignored(shelf, tmp_path, reads, inside):
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir(mode=0o700)
    if inside:
        (elsewhere / cache.FOLDER).mkdir(mode=0o700)
    folder = cache.models_dir()
    folder.parent.parent.mkdir(parents=True, exist_ok=True)
    folder.parent.symlink_to(elsewhere, target_is_directory=True)
    _load(shelf)
    reads.clear()
    _load(shelf)
    assert reads  # nothing made or written through the link:
    assert sorted(p.name for p in elsewhere.rglob("*")) == ([cache.FOLDER] if inside else [])


def test_a_cache_folder_that_cannot_be_made_is_ignored(shelf, reads):
    folder = cache.models_dir()
    folder.parent.parent.mkdir(parents=True, exist_ok=True)
    folder.parent.write_text("a file where the folder would be\n")
    first = _load(shelf)
    reads.clear()
    assert _load(shelf) == first and reads


def test_a_read_only_cache_folder_is_ignored(shelf, reads):
    folder = cache.models_dir()
    folder.mkdir(parents=True, mode=0o700)
    folder.chmod(0o500)
    try:
        first = _load(shelf)
        assert _load(shelf) == first
        if os.geteuid() != 0:  # the superuser writes in it all the same
            assert _entries() == [] and len(reads) == 8
    finally:
        folder.chmod(0o700)


def test_a_cache_folder_others_may_write_is_not_read(shelf, reads):
    _load(shelf)
    folder = cache.models_dir()
    folder.chmod(0o777)
    try:
        reads.clear()
        _load(shelf)
        assert reads
    finally:
        folder.chmod(0o700)


@pytest.mark.skipif(not hasattr(os, "geteuid") or os.geteuid() != 0,
                    reason="only the superuser can give a file to another user")
def test_an_entry_of_another_user_is_not_read(shelf, reads):
    _load(shelf)
    (entry,) = _entries()
    os.chown(entry, 12345, 12345)
    reads.clear()
    _load(shelf)
    assert reads


def test_a_hit_imports_neither_the_schema_nor_the_graph(shelf, tmp_path):
    """In a fresh process, a load from the cache needs no jsonschema, networkx or pint."""
    script = (
        "import sys\n"
        "from diagnose.kb.loader import load_model\n"
        f"m = load_model('mini-device', search=[{str(shelf)!r}], cache=True)\n"
        "print(len(m.causes), *sorted(k for k in ('jsonschema', 'networkx', 'pint')"
        " if k in sys.modules))\n")
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    runs = [subprocess.run([sys.executable, "-c", script], capture_output=True, text=True,
                           env=env, check=True).stdout.split() for _ in range(2)]
    assert runs[0][0] == runs[1][0] == "5"
    assert "networkx" in runs[0]  # the first read compiled it (a valid pack: no jsonschema)
    assert runs[1] == ["5"], runs[1]


# --- the one-pass reader ---------------------------------------------------------------------

TRICKY = [
    "", "~", "null", "a: 1\na: 2\n", "a: &x 1\nb: *x\n", "a: [1, 2\n", "- 1\n- 2\n",
    "a: 12345678901234567890123456789012345\n", "a: !!int abc\n", "a: 2001-13-45\n",
    "a: !!timestamp 2001-12-14\n", "? [1, 2]\n: x\n", "{a: 1, a: 2}", "a: !foo bar\n",
    "--- a\n--- b\n", "\ufeffa: 1\n", "a:\x85  b: 1\n", "a: 1\n<<: {b: 2}\n", "<<: {a: 1}\na: 2\n",
    "[" * 70 + "]" * 70, "[" * 60 + "]" * 60, "a: yes\nb: true\nc: on\n", "1: a\n1.0: b\n",
    "true: a\n1: b\n", "a: 0x1F\nb: 0o17\nc: 1_000\nd: .inf\n", "a: \"x\\ty\"\n",
    "a: |\n  line\n  two\n", "a:\tb\n", "\ta: 1\n", "[a, b, {c: d}]", "a: b: c\n", "- &a x\n",
    "- *a\n", "a: \"&x\"\n", "a: x&y\n", "a: x *y\n", "a: mm**2\n", "!!set {a, b}",
    "a: !!float 1e400\n", "a: !!bool maybe\n", "a: " + "9" * 5000 + "\n",
    "a: !!float " + "1" * 1200 + "\n", "\x00", "a: \x07\n", "%YAML 1.1\n---\na: 1\n",
    "? a\n? a\n", "a: {b: 1, b: 1}\n", "'a': 1\n\"a\": 2\n", "{\"k\":&a v}", "{\"k\":*a}",
    "a: 1:20\n", "- x\n" * 200_001, "a:\n" + "".join(f"  k{i}: {i}\n" for i in range(100_001)),
]


def _both(text: str, monkeypatch) -> tuple[tuple, tuple]:
    fast = yamlpos.read_yaml(text, "f.yaml")
    with monkeypatch.context() as m:
        m.setattr(yamlpos, "FAST", False)
        exact = yamlpos.read_yaml(text, "f.yaml")

    def seen(result):
        doc, problems = result
        shown = None if doc is None else (repr(doc.data), doc.positions)
        return shown, [str(p) for p in problems]

    return seen(fast), seen(exact)


@pytest.mark.parametrize("text", TRICKY, ids=range(len(TRICKY)))
def test_the_one_pass_reader_reads_as_the_exact_reader(text, monkeypatch):
    fast, exact = _both(text, monkeypatch)
    assert fast == exact


def test_the_one_pass_reader_reads_broken_packs_as_the_exact_reader(monkeypatch):
    rng = random.Random(16)
    texts = [p.read_text() for p in sorted(ROOT.glob("tests/fixtures/*/*.yaml"))]
    pieces = list(":-[]{},&*!|>'\"#\n \t?%@`abc0123") + ["  ", "- ", ": ", "\n  ", "<<: "]
    for _ in range(150):
        text = rng.choice(texts)
        for _ in range(rng.randint(1, 4)):
            i = rng.randrange(len(text) + 1)
            if rng.random() < 0.5:
                text = text[:i] + rng.choice(pieces) + text[i:]
            else:
                text = text[:i] + text[i + rng.randint(1, 5):]
        fast, exact = _both(text, monkeypatch)
        assert fast == exact, text


def test_a_clean_pack_is_read_in_one_pass(monkeypatch):
    if not yamlpos.FAST:
        pytest.skip("libyaml 0.2.6 or later is not installed")
    monkeypatch.setattr(yamlpos, "_scan", lambda *a: pytest.fail("scanned"))
    model = load_model(str(MINI))
    assert model.causes["coil_open"].source.line > 1


# --- pint's registry ---------------------------------------------------------------------------

_UNITS_SCRIPT = ("from diagnose.physics import units\n"
                 "print(units.convert(0.007, 'in', 'mm'), units.parse_quantity('104 degF', 'degC',"
                 " 't'), units.parse_quantity('0.5 mm²', 'mm**2', 'a'),\n"
                 "      units.fits('N*m', 'J') and units.registry() is not None)\n")


def _units_run(cache_home: Path) -> str:
    env = {**os.environ, "PYTHONPATH": str(ROOT), "XDG_CACHE_HOME": str(cache_home)}
    return subprocess.run([sys.executable, "-c", _UNITS_SCRIPT], capture_output=True, text=True,
                          env=env, check=True).stdout


def test_the_unit_registry_is_kept_and_a_damaged_one_made_again(tmp_path):
    import pint

    reference = pint.UnitRegistry()  # pint itself, with no cache, is the reference
    first = _units_run(tmp_path / "cache")
    inch, temp, area, fits = first.split()
    assert float(inch) == reference.Quantity(0.007, "inch").to("mm").magnitude
    assert float(temp) == pytest.approx(40.0) and float(area) == 0.5 and fits == "True"
    folder = tmp_path / "cache" / "diagnose" / "units"
    kept = sorted(folder.glob("*.pickle"))
    assert kept and folder.stat().st_mode & 0o077 == 0
    assert _units_run(tmp_path / "cache") == first
    for path in kept:
        path.write_bytes(path.read_bytes()[:20])
    assert _units_run(tmp_path / "cache") == first  # damaged: made again
    assert _units_run(tmp_path / "cache") == first


def test_a_symlinked_unit_cache_is_not_used(tmp_path):
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir(mode=0o700)
    folder = tmp_path / "cache" / "diagnose" / "units"
    folder.parent.mkdir(parents=True)
    folder.symlink_to(elsewhere, target_is_directory=True)
    assert _units_run(tmp_path / "cache").split()[-1] == "True"
    assert list(elsewhere.iterdir()) == []
