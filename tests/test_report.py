"""The repair log: Markdown, HTML and JSON from a session recorded through the session API."""

from __future__ import annotations

import base64
import hashlib
import json
import re
from html import unescape
from html.parser import HTMLParser

import pytest
from test_journal_store import FIXTURES, mini_model, play

from diagnose.cli import main
from diagnose.errors import InputError
from diagnose.journal.record import session_record
from diagnose.journal.report import PRINT_SCRIPT, render_report
from diagnose.journal.store import Journal

EVIL = '<script>alert("x")</script> & <b onmouseover="steal()">bold</b> | pipe'
STEPS = [{"check": "coil_resistance", "answer": "OL"},
         {"check": "listen_click", "answer": "silent"},
         {"check": "fuse_state", "skip": True},
         {"repair": "replace_fuse", "cured": False},
         {"repair": "replace_coil", "cured": True}]


@pytest.fixture()
def recorded(tmp_path):
    path = tmp_path / "journal.sqlite3"
    model = mini_model()
    with Journal(path) as j:
        s = play(j, model, STEPS, who="Ana", notes=[EVIL],
                 identity={"serial": "SN-42", "machine": "Hoist <3>"})
        sid = s.session_id
    return path, sid, model


def _record(path, sid, model):
    with Journal(path, readonly=True) as j:
        return session_record(j, sid, model)


class _Tags(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags: list[str] = []
        self.attrs: list[str] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self.attrs += [name for name, _ in attrs]

    def handle_data(self, data):
        self.text.append(data)


def test_record_holds_every_part(recorded):
    rec = _record(*recorded)
    assert [s.kind for s in rec.steps] == ["reading", "answer", "skip", "repair", "repair"]
    reading = rec.steps[0]
    assert reading.outcome == "open" and reading.reading == "OL"
    # 24 V / 20 W: R = U^2 / P = 28.8 ohm (the coil evaluator's expected resistance)
    assert any(f["value"] == 28.8 and f["unit"] == "ohm" for f in reading.figures)
    assert rec.cause == {"id": "coil_open", "title": "Coil winding open"}
    assert rec.result == "resolved"
    # A DANGER is acknowledged once while the unit stays in the same state: again on the
    # fuse card (the click test had the power on), not on the fuse repair (still isolated),
    # again on the coil repair (the failed fuse repair put the power back).
    assert [(c["id"], c["item"]) for c in rec.cautions] == [
        ("lockout", "coil_resistance"), ("lockout", "fuse_state"), ("lockout", "replace_coil")]
    assert rec.cautions[0]["level"] == "DANGER"
    assert rec.identity == {"serial": "SN-42", "machine": "Hoist <3>"}
    assert [p["value"] for p in rec.nameplate] == ["24 V", "20 W"]
    assert rec.notes[0]["text"] == EVIL
    # Every step keeps the ranking that was computed when it was taken.
    assert all(s.ranking for s in rec.steps) and not rec.recomputed
    assert rec.steps[0].ranking[0]["cause"] == "coil_open"
    # Times are 5 minutes apart: notice, identity, 2 nameplate, complaint, ack, ...
    assert rec.clock_minutes == 5.0 * (rec.events - 1)
    assert rec.work_minutes == 10 + 2 + 10 + 60  # the pack's minutes; a skip costs nothing


def test_markdown(recorded):
    text = render_report(_record(*recorded), "md")
    for part in ("# Repair log", "This tool is an aid", "SN-42", "Rated coil voltage", "24 V",
                 "Brake will not release", "Coil resistance, leads disconnected", "reading: OL",
                 "verdict: **open**", "| expected resistance at 20 °C | 28.8 | ohm |",
                 "ranking after this step", "Coil winding open", "DANGER", "by Ana",
                 "Replace the fuse: **not cured**",
                 "**Coil winding open**, the cause the repair that cured it fixes",
                 "mini-brake 1.0.0", "content hash", "total minutes", "licensed practice"):
        assert part in text, part
    assert "<script>" not in text and "&lt;script&gt;" in text
    assert "\\| pipe" in text  # a | in a value cannot open a table cell


def test_html_is_escaped_self_contained_and_printable(recorded):
    text = render_report(_record(*recorded), "html")
    parser = _Tags()
    parser.feed(text)
    # The one script is the log's own (the appendix folded on screen, opened to print),
    # and the content security policy allows it by its hash and nothing else.
    assert parser.tags.count("script") == 1
    assert re.findall(r"<script>(.*?)</script>", text, re.S) == [PRINT_SCRIPT]
    digest = base64.b64encode(hashlib.sha256(PRINT_SCRIPT.encode()).digest()).decode()
    policy = unescape(re.search(r'http-equiv="Content-Security-Policy" content="([^"]*)"',
                                text).group(1))
    assert f"script-src 'sha256-{digest}'" in policy and "default-src 'none'" in policy
    assert "b" not in parser.tags and "onmouseover" not in parser.attrs
    assert EVIL in "".join(parser.text)  # shown as text, exactly as typed
    assert "Hoist <3>" in "".join(parser.text)
    assert "@media print" in text and "<svg" in text
    for external in ("<link", "src=", "http://", "https://", "@import"):
        assert external not in text


def test_json_holds_readings_and_is_stable(recorded):
    rec = _record(*recorded)
    data = json.loads(render_report(rec, "json"))
    step = data["steps"][0]
    assert step["outcome"] == "open" and step["figures"][0]["unit"] == "ohm"
    assert data["cause"]["id"] == "coil_open"
    assert data["pack"]["content_hash"] == mini_model().content_hash
    assert render_report(rec, "md") == render_report(_record(*recorded), "md")


def test_without_the_pack_ids_stand_in(recorded):
    path, sid, _ = recorded
    rec = _record(path, sid, None)
    text = render_report(rec, "md")
    assert "cannot be loaded" in text and "coil_resistance" in text
    assert rec.cause == {"id": "coil_open", "title": "coil_open"}


def test_plain_journal_sink_gets_rankings_recomputed(tmp_path):
    from diagnose.session import Session

    model = mini_model()
    with Journal(tmp_path / "j.sqlite3") as j:
        sid = j.new_session(model.id, model.version, model.content_hash, "site")
        s = Session(model, sink=j, session_id=sid)
        s.add_complaint("will_not_release")
        s.answer("listen_click", "silent")
        s.undo()
        s.answer("listen_click", "click")
        rec = session_record(j, sid, model)
    assert rec.recomputed and rec.undone == 1
    assert [(st.id, st.outcome) for st in rec.steps] == [("listen_click", "click")]
    assert rec.final_ranking[0]["cause"] == "lining_worn"


def test_cli_report_formats(recorded, tmp_path, capsys):
    path, sid, _ = recorded
    base = ["--journal", str(path), "--packs", str(FIXTURES)]
    assert main([*base, "report", sid]) == 0
    assert "verdict: **open**" in capsys.readouterr().out
    out = tmp_path / "log.html"
    assert main([*base, "report", sid, "--format", "html", "-o", str(out)]) == 0
    assert "<svg" in out.read_text(encoding="utf-8")
    assert main([*base, "report", sid, "--format", "json"]) == 0
    assert json.loads(capsys.readouterr().out)["steps"][0]["reading"] == "OL"
    assert main([*base, "report", "nope"]) == 1
    assert "no session nope" in capsys.readouterr().err


def test_unknown_format():
    with pytest.raises(InputError):
        render_report(None, "pdf")  # type: ignore[arg-type]
