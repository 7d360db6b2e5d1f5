"""The brake packs read exactly as they did before the supply pack spoke in device terms.

The electrical-supply pack says ``{device}`` and ``{switch_on}`` where it used
to say "brake"; each brake pack declares its device, so every worded field of
its compiled model, one card at 80 columns and its knowledge tests must be
what they were. The golden files in ``tests/fixtures/golden/`` were written by
this module (``python tests/test_device_golden.py``) from the packs as they
stood before the supply pack was reworded; write them again only on purpose.
"""

from __future__ import annotations

import io
import json
import sys
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest

ROOT = Path(__file__).resolve().parent.parent
KNOWLEDGE = ROOT / "knowledge"
GOLDEN = Path(__file__).resolve().parent / "fixtures" / "golden"
PACKS = ("spring-applied-brake", "permanent-magnet-brake")


def model_of(pack: str):
    from diagnose.kb.loader import load_model

    return load_model(str(KNOWLEDGE / pack), search=[str(KNOWLEDGE)])


def worded(model) -> dict[str, Any]:
    """Every worded field of a compiled model, as ``"kind:id.field" -> text``."""
    out: dict[str, Any] = {"pack.title": model.title, "pack.notice": model.notice}

    def put(kind: str, entities: Any, fields: tuple[str, ...]) -> None:
        for i, x in entities.items():
            for f in fields:
                value = getattr(x, f)
                if isinstance(value, tuple):
                    value = list(value)
                elif hasattr(value, "items"):
                    value = dict(value)
                out[f"{kind}:{i}.{f}"] = value

    put("parameter", model.parameters, ("prompt", "unit", "default", "choices"))
    put("complaint", model.complaints, ("title", "caller_title", "description"))
    put("event", model.events, ("title",))
    put("cause", model.causes, ("title", "description"))
    put("check", model.checks, ("title", "ask", "caller", "outcome_titles", "tools",
                                "cautions", "hazards_note"))
    put("repair", model.repairs, ("title", "ask", "parts", "cautions"))
    put("caution", model.cautions, ("level", "text"))
    put("state", model.states, ("title", "values"))
    put("hazard", model.hazards, ("title", "words"))
    put("case", model.cases, ("title",))
    return out


class _Reader:
    """Answers a card's questions from a script and keeps each prompt in the output."""

    def __init__(self, out: io.StringIO, answer: Callable[[str], str]) -> None:
        self.out, self.answer = out, answer

    def ask(self, message: str, state: Any = None, default: str = "") -> str:
        reply = self.answer(message)
        self.out.write(f"{message}{reply}\n")
        return reply


def first_card(model, mode: str = "site") -> str:
    """The card of the first proposed check for the pack's first complaint, at 80 columns.

    The nameplate keeps every default (unknown where none); DANGER and WARNING are acknowledged,
    then the check is skipped, so the text holds the cautions, the card and
    each prompt with the answer given.
    """
    from rich.console import Console

    from diagnose.session import MemorySink, Session
    from diagnose.shell.app import Shell

    s = Session(model, mode=mode, sink=MemorySink(), session_id="g-1")
    while s.open_parameters():
        pid = s.open_parameters()[0]
        default = model.parameters[pid].default
        s.set_nameplate(pid, "unknown" if default is None else str(default))
    s.add_complaint(next(iter(model.complaints)))
    action = s.next_action()
    assert action.kind == "check", action
    out = io.StringIO()
    console = Console(file=out, width=80, height=24, color_system=None)
    shell = Shell(s, console, _Reader(out, lambda m: "ack" if m.startswith("Type ack")
                                       else "skip"))
    shell.check_turn(action.id, action)
    return "\n".join(line.rstrip() for line in out.getvalue().splitlines()) + "\n"


def case_results(pack: str) -> list[dict[str, Any]]:
    """The pack's knowledge test results (every case of it and of its base packs)."""
    from diagnose.cli import main

    out = io.StringIO()
    saved = sys.stdout
    sys.stdout = out
    try:
        main(["kb", "test", str(KNOWLEDGE / pack), "--json", "--no-learned"])
    except SystemExit:
        pass
    finally:
        sys.stdout = saved
    rows = json.loads(out.getvalue())
    return [{k: v for k, v in r.items() if k != "source"} for r in rows]


def golden(pack: str, kind: str) -> Path:
    return GOLDEN / f"{pack}{kind}"


@pytest.mark.parametrize("pack", PACKS)
def test_every_worded_field_reads_as_before(pack):
    want = json.loads(golden(pack, ".json").read_text())
    got = worded(model_of(pack))
    assert sorted(got) == sorted(want)
    changed = {k: (want[k], got[k]) for k in want if got[k] != want[k]}
    assert not changed, changed


@pytest.mark.parametrize("pack", PACKS)
@pytest.mark.parametrize("mode", ["site", "phone"])
def test_the_first_card_reads_as_before_at_80_columns(pack, mode):
    assert first_card(model_of(pack), mode) == golden(pack, f"-{mode}-card.txt").read_text()


@pytest.mark.parametrize("pack", PACKS)
def test_the_knowledge_tests_give_the_same_results(pack):
    want = json.loads(golden(pack, "-cases.json").read_text())
    assert case_results(pack) == want


def test_the_supply_pack_names_no_device_outside_its_comments():
    """``grep -i brake knowledge/electrical-supply`` finds comments only: every key and value
    of its YAML (the parser drops the comments) is free of the word."""
    import re

    import yaml

    def scalars(value: Any) -> Any:
        if isinstance(value, dict):
            for k, v in value.items():
                yield k
                yield from scalars(v)
        elif isinstance(value, list):
            for v in value:
                yield from scalars(v)
        else:
            yield value

    for path in sorted((KNOWLEDGE / "electrical-supply").glob("*.yaml")):
        said = [str(x) for x in scalars(yaml.safe_load(path.read_text(encoding="utf-8")))
                if re.search("brake", str(x), re.IGNORECASE)]
        assert not said, (path.name, said)


def write() -> None:
    """Write the golden files from the packs as they stand (on purpose only)."""
    GOLDEN.mkdir(parents=True, exist_ok=True)
    for pack in PACKS:
        model = model_of(pack)
        golden(pack, ".json").write_text(
            json.dumps(worded(model), indent=1, ensure_ascii=False, sort_keys=True) + "\n")
        for mode in ("site", "phone"):
            golden(pack, f"-{mode}-card.txt").write_text(first_card(model, mode))
        golden(pack, "-cases.json").write_text(
            json.dumps(case_results(pack), indent=1, ensure_ascii=False) + "\n")


if __name__ == "__main__":
    import os
    import tempfile

    home = tempfile.mkdtemp()  # as tests/conftest.py: never the writer's journal or settings
    for name in ("DIAGNOSE_PACKS", "DIAGNOSE_SETTINGS", "COLUMNS", "LINES"):
        os.environ.pop(name, None)
    os.environ["DIAGNOSE_JOURNAL"] = os.path.join(home, "journal.sqlite3")
    for name in ("DATA", "STATE", "CACHE", "CONFIG"):
        os.environ[f"XDG_{name}_HOME"] = os.path.join(home, name.lower())
    write()
