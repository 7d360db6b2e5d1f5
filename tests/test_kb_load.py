"""Loading, compiling and exporting packs; the JSON Schema against the shipped packs."""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path

import jsonschema
import networkx as nx
import pytest
import yaml

from diagnose.cli import main
from diagnose.errors import KnowledgeError
from diagnose.kb.compiler import build_graph
from diagnose.kb.loader import load_model, read_chain
from diagnose.kb.locate import shipped_dir
from diagnose.kb.schema import pack_schema

MINI = Path(__file__).parent / "fixtures" / "mini"
SHIPPED = ["electrical-supply", "spring-applied-brake", "permanent-magnet-brake"]


def test_kb_commands_on_a_pack_folder_that_cannot_be_listed(tmp_path, monkeypatch, capsys):
    import shutil

    folder = tmp_path / "locked"
    shutil.copytree(MINI, folder)
    listing = Path.iterdir

    def iterdir(self):  # as for a folder without read permission (root may read anything)
        if self.name == "locked":
            raise PermissionError(13, "Permission denied", str(self))
        return listing(self)

    monkeypatch.setattr(Path, "iterdir", iterdir)
    assert main(["kb", "lint", str(folder)]) == 1
    assert "cannot read the folder: Permission denied" in capsys.readouterr().out
    assert main(["kb", "show", str(folder)]) == 1
    err = capsys.readouterr().err
    assert "cannot read the folder" in err and len(err.strip().splitlines()) == 1
    assert main(["--packs", str(folder), "kb", "list"]) == 0  # the folder is passed over
    assert "Traceback" not in capsys.readouterr().err


def _strip(model):
    """Entities without their sources, for comparing two loads of the same knowledge."""

    def clean(obj):
        if dataclasses.is_dataclass(obj):
            return {f.name: clean(getattr(obj, f.name)) for f in dataclasses.fields(obj)
                    if f.name != "source"}
        if isinstance(obj, dict) or hasattr(obj, "items"):
            return {k: clean(v) for k, v in obj.items()}
        if isinstance(obj, (list, tuple)):
            return [clean(v) for v in obj]
        return obj

    return {name: clean(getattr(model, name)) for name in
            ("parameters", "complaints", "events", "causes", "checks", "repairs", "cautions",
             "cases")}


def test_round_trip_through_yaml_loses_nothing(tmp_path):
    first = load_model(str(MINI))
    sources, _ = read_chain(str(MINI))
    out = tmp_path / "again"
    out.mkdir()
    for doc in sources[0].documents:
        (out / Path(doc.path).name).write_text(yaml.safe_dump(doc.data, sort_keys=False))
    second = load_model(str(out))
    assert _strip(first) == _strip(second)


def test_effects_rows_are_completed_over_the_outcomes():
    model = load_model(str(MINI))
    listen = model.checks["listen_click"]
    # `coil_open: {silent: 0.97}` on a two-outcome check leaves 0.03 for `click`
    assert listen.effects["coil_open"] == pytest.approx({"click": 0.03, "silent": 0.97})
    coil = model.checks["coil_resistance"]
    # five verdicts; `open: 0.97` leaves 0.03 shared by the four others
    assert coil.effects["coil_open"]["ok"] == pytest.approx(0.0075)
    assert coil.outcomes == ("open", "short", "low", "ok", "high")


def test_fault_tree_logic():
    model = load_model(str(MINI))
    assert model.holds("will_not_release", {"fuse_blown"})
    assert not model.holds("no_coil_power", {"coil_open"})
    assert model.tree_causes("will_not_release") == ("fuse_blown", "cable_break", "coil_open",
                                                     "lining_worn")


def test_graph_has_typed_nodes_and_edges():
    g = build_graph(load_model(str(MINI)))
    assert g.nodes["cause:coil_open"]["kind"] == "cause"
    assert g.nodes["cause:coil_open"]["line"] > 0
    assert g.edges["cause:fuse_blown", "event:no_coil_power"]["kind"] == "feeds"
    assert g.edges["repair:replace_coil", "check:listen_click"]["kind"] == "confirmed_by"
    assert g.edges["check:coil_resistance", "parameter:rated_voltage"]["kind"] == "uses"


@pytest.mark.parametrize("fmt", ["graphml", "json", "dot", "mermaid"])
def test_graph_exports_read_back(tmp_path, fmt):
    out = tmp_path / f"g.{fmt}"
    assert main(["kb", "graph", str(MINI), "--format", fmt, "-o", str(out)]) == 0
    original = build_graph(load_model(str(MINI)))
    if fmt == "graphml":
        g = nx.read_graphml(out)
        assert set(g.nodes) == set(original.nodes)
        assert set(g.edges) == set(original.edges)
        assert g.nodes["cause:lining_worn"]["prior"] == 30
    elif fmt == "json":
        g = nx.node_link_graph(json.loads(out.read_text()), edges="edges")
        assert set(g.edges) == set(original.edges)
    elif fmt == "dot":
        text = out.read_text()
        assert text.startswith('digraph "mini-brake"')
        assert text.count("->") == original.number_of_edges()
    else:
        assert out.read_text().count("-->") == original.number_of_edges()


def test_schema_is_valid_json_schema_and_validates_fixture(capsys):
    assert main(["kb", "schema"]) == 0
    schema = json.loads(capsys.readouterr().out)
    jsonschema.Draft202012Validator.check_schema(schema)
    for f in MINI.glob("*.yaml"):
        jsonschema.validate(yaml.safe_load(f.read_text()), schema)


@pytest.mark.parametrize("pack", SHIPPED)
def test_schema_validates_shipped_packs(pack):
    validator = jsonschema.Draft202012Validator(pack_schema())
    files = sorted((shipped_dir() / pack).glob("*.yaml"))
    assert files
    for f in files:
        errors = list(validator.iter_errors(yaml.safe_load(f.read_text())))
        assert not errors, (f, [e.message for e in errors])


def test_shipped_packs_lint_clean_strict(capsys):
    assert main(["kb", "lint", "--strict", *SHIPPED]) == 0, capsys.readouterr().out


def test_brake_pack_meets_the_agreed_size(capsys):
    assert main(["kb", "show", "spring-applied-brake", "--json"]) == 0
    counts = json.loads(capsys.readouterr().out)
    assert counts["complaints"] >= 8
    assert counts["causes"] >= 30
    assert counts["checks"] >= 20
    assert counts["measurements"] >= 7
    assert counts["repairs"] >= 20
    assert counts["builds_on"] == ["electrical-supply"]


def test_permanent_magnet_pack_builds_on_the_supply_pack(capsys):
    assert main(["kb", "show", "permanent-magnet-brake", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    own = [c for c in load_model("permanent-magnet-brake").causes.values()
           if c.pack == "permanent-magnet-brake"]
    assert len(own) >= 10
    assert data["builds_on"] == ["electrical-supply"]


def test_every_check_carries_wording_minutes_and_tools():
    model = load_model("spring-applied-brake")
    for chk in model.checks.values():
        assert chk.minutes > 0 and chk.ask, chk.id
        if chk.where == "phone":
            assert chk.caller, chk.id


def test_packs_found_through_environment_variable(tmp_path, monkeypatch, capsys):
    (tmp_path / "mine").mkdir()
    for f in MINI.glob("*.yaml"):
        (tmp_path / "mine" / f.name).write_text(f.read_text())
    monkeypatch.setenv("DIAGNOSE_PACKS", str(tmp_path))
    assert main(["kb", "lint", "mini-brake"]) == 0
    monkeypatch.delenv("DIAGNOSE_PACKS")
    assert main(["--packs", str(tmp_path), "kb", "lint", "mini-brake"]) == 0


def test_load_model_raises_knowledge_error_with_all_problems(tmp_path):
    bad = tmp_path / "bad"
    bad.mkdir()
    (bad / "pack.yaml").write_text("pack: bad\ntitle: Bad\nversion: 1\ncauses:\n"
                                   "  - id: a\n    title: A\n    prior: 2\n")
    with pytest.raises(KnowledgeError) as err:
        load_model(str(bad))
    assert any(p.code == "unreachable-cause" for p in err.value.problems)
    assert "bad/pack.yaml:5" in str(err.value)


def test_device_pack_extends_a_base_check_with_its_own_causes():
    model = load_model("spring-applied-brake")
    row = model.checks["coil_voltage"].effects["brake_output_disabled"]
    assert row["absent"] == pytest.approx(0.95)
    # the base pack on its own knows nothing of the device's causes
    assert "brake_output_disabled" not in load_model("electrical-supply").checks[
        "coil_voltage"].effects


def test_a_device_check_replaces_the_base_check_that_reads_the_same_volts():
    # the permanent-magnet pack reads the brake volts at the brake's own pins: the base
    # pack's coil_voltage (the same volts at the same terminals) leaves, so one reading
    # counts once, and the base causes' effects are on the replacement
    model = load_model("permanent-magnet-brake")
    assert "coil_voltage" not in model.checks
    volts = model.checks["pm_brake_volts"]
    assert volts.replaces == "coil_voltage"
    assert {"supply_failed", "cable_break", "pm_polarity_reversed"} <= set(volts.effects)
    # the base pack's knowledge tests that read coil_voltage now read the replacement
    steps = [s for case in model.cases.values() for s in case.steps if s.check]
    assert not any(s.check == "coil_voltage" for s in steps)
    assert any(s.check == "pm_brake_volts" for s in steps)


def test_two_checks_reading_the_same_place_are_a_lint_warning(tmp_path):
    from diagnose.kb.lint import lint_paths

    pack = tmp_path / "p"
    pack.mkdir()
    for f in MINI.glob("*.yaml"):
        (pack / f.name).write_text(f.read_text())
    check = ("  - id: {id}\n    title: Volts {id}\n    minutes: 5\n    ask: Measure.\n"
             "    measure:\n      evaluator: supply\n      reading: volts\n      at: coil\n"
             "      inputs: {{rated_voltage: 24 V, source: {src}}}\n"
             "    normal: {{ok: 0.95, low: 0.02, absent: 0.01, high: 0.01, reversed: 0.01}}\n"
             "    effects:\n      coil_open: {{absent: 0.9}}\n")
    (pack / "more.yaml").write_text("checks:\n" + check.format(id="volts_a", src="converter")
                                    + check.format(id="volts_b", src="battery"))
    (res,) = lint_paths([str(pack)])
    same = [p for p in res.problems if p.code == "same-quantity"]
    assert len(same) == 1 and "volts_a" in same[0].message and "volts_b" in same[0].message
    assert same[0].source.file.endswith("more.yaml") and same[0].level == "warning"


def test_extending_an_unknown_check_is_an_error(tmp_path):
    from diagnose.kb.lint import lint_paths

    pack = tmp_path / "p"
    pack.mkdir()
    for f in MINI.glob("*.yaml"):
        (pack / f.name).write_text(f.read_text())
    (pack / "more.yaml").write_text("extend_checks:\n  - check: listen_clik\n"
                                    "    effects:\n      coil_open: {silent: 0.9}\n")
    (res,) = lint_paths([str(pack)])
    assert any(p.code == "unknown-ref" and "listen_click" in p.message
               and p.source.file.endswith("more.yaml") and p.source.line == 2
               for p in res.errors), [str(p) for p in res.problems]
