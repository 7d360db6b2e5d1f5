"""How a verdict looks on screen (rich, 80 columns) and in JSON."""

from __future__ import annotations

import io
import json

from rich.console import Console

from diagnose.physics import evaluate
from diagnose.physics.verdict import Figure, Verdict, format_number, make_figures
from diagnose.views import VerdictView


def _render(obj) -> str:
    console = Console(file=io.StringIO(), width=80, color_system=None)
    console.print(VerdictView(obj))
    return console.file.getvalue()


def test_rich_rendering_fits_80_columns():
    v = evaluate("cable", {"rated_voltage": "24V", "rated_power": "20W", "length": "50m",
                           "area": "0.5mm2"})
    text = _render(v)
    assert "volts left at the coil" in text and "21.14" in text
    assert "verdict: too much drop" in text
    assert "supply low at the coil" in " ".join(text.split())
    assert max(len(line) for line in text.splitlines()) <= 80


def test_weights_are_shown():
    v = Verdict("coil", "ok", {"x": Figure("x", 1.0, "ohm")}, "s", {"ok": 0.75, "low": 0.25})
    assert "near a band edge: ok 75%, low 25%" in _render(v)


def test_to_dict_is_json():
    v = evaluate("coil", {"rated_voltage": 24, "rated_power": 20, "ohms": "OL"})
    data = json.loads(json.dumps(v.to_dict(), allow_nan=False))
    assert data["verdict"] == "open" and "figures" in data


def test_number_formatting():
    assert format_number(31.0637) == "31.06"
    assert format_number(123456.0) == "123,456"
    assert format_number(0.0) == "0"
    assert Figure("x", 0.007, "in").text() == "0.007 in"
    assert Figure("x", 88.0, "%").text() == "88%"


def test_make_figures_drops_infinite_and_missing_values():
    figs = make_figures([("a", "a", float("inf"), ""), ("b", "b", None, ""),
                         ("c", "c", 0.1 + 0.2, "")])
    assert list(figs) == ["c"] and figs["c"].value == 0.3


