"""The repair log as a document a customer can sign: page one, readings, cautions, appendix.

A scripted session goes through the session API into a real journal (with a
photo in the journal's attachment store); what is checked is what the
customer and the technician read: the Markdown and HTML logs, the HTML as a
strict HTML5 parser reads it, and, where a headless browser is at hand, the
HTML printed to PDF.
"""

from __future__ import annotations

import base64
import re
import shutil
import subprocess
from pathlib import Path

import html5lib
import pytest
import yaml
from test_journal_store import MINI, minute_clock

from diagnose.journal.attachments import folder_of, store
from diagnose.journal.record import session_record
from diagnose.journal.recorder import start_session
from diagnose.journal.report import render_report
from diagnose.journal.store import Journal

IDENTITY = {"site": "North plant, hall 3", "machine": "Hoist 2", "axis": "lift",
            "serial": "SN-0042"}
#: A PNG of 1 x 1 pixel (the PNG signature, IHDR, IDAT, IEND).
PIXEL = bytes.fromhex(
    "89504e470d0a1a0a0000000d4948445200000001000000010806000000"
    "1f15c4890000000d49444154789c6360f8cf00000301010018dd8db40000000049454e44ae426082")
MISSING = "ab" * 32  # an attachment whose file is not in the store
BROAD = ("Replace the brake unit", ["Fuse blown", "Coil winding open",
                                    "Lining worn, gap too large"])


@pytest.fixture()
def model(tmp_path):
    """The mini pack, with one repair that fixes several causes (a whole brake unit)."""
    from diagnose.kb.loader import load_model

    pack = tmp_path / "pack"
    shutil.copytree(MINI, pack)
    knowledge = pack / "knowledge.yaml"
    data = yaml.safe_load(knowledge.read_text(encoding="utf-8"))
    data["repairs"].append({
        "id": "replace_brake_unit", "title": BROAD[0], "minutes": 120,
        "requires": {"power": "isolated"}, "parts": ["complete brake of the same size"],
        "fixes": ["fuse_blown", "coil_open", "lining_worn"], "cautions": ["lockout"]})
    knowledge.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return load_model(str(pack))


def _card(s, item):
    for c in s.pending_cautions(item):
        s.acknowledge(c.id, item)  # per card, as the shell asks


def _job(journal, model, *, cure="replace_brake_unit", finding="coil_open", photo=None):
    """A site visit: a reading, a click test, a skipped check, a repair that fails, a cure."""
    s = start_session(journal, model, who="Ana Example",
                      clock=minute_clock("2025-01-14T09:00:00+01:00"))
    s.set_identity(**IDENTITY)
    s.set_nameplate("rated_voltage", "24 V")
    s.set_nameplate("rated_power", "20 W", assumed=True)
    s.add_complaint("will_not_release")
    for step in ({"check": "coil_resistance", "answer": "OL"},
                 {"check": "listen_click", "answer": "silent"},
                 {"check": "fuse_state", "skip": True}):
        _card(s, step["check"])
        s.apply_step(step)
    _card(s, "replace_fuse")
    s.repair("replace_fuse", False, parts=[{"part": "fuse 2 A", "qty": 2, "number": "F-2A"}])
    _card(s, cure)
    s.repair(cure, True, parts=[{"part": "brake unit", "qty": 1, "number": "BU-24"},
                                {"part": "mounting screw", "qty": 4, "number": ""}])
    if photo is not None:
        s.attach(photo.sha256, name=photo.name, caption="burnt coil terminal",
                 media_type=photo.media_type, size=photo.size)
    s.attach(MISSING, name="disc.jpg", caption="worn disc", media_type="image/jpeg", size=2048)
    s.note("Customer told to keep the cover closed.")
    s.end(finding=finding)
    return s.session_id


@pytest.fixture()
def job(tmp_path, model):
    """The scripted job in a journal, a photo in its store: (record, attachment folder, photo)."""
    path = tmp_path / "journal.sqlite3"
    picture = tmp_path / "terminal.png"
    picture.write_bytes(PIXEL)
    photo = store(picture, path)
    with Journal(path) as journal:
        sid = _job(journal, model, photo=photo)
        record = session_record(journal, sid, model)
    return record, folder_of(path), photo


def _split(text, heading):
    first, sep, rest = text.partition(heading)
    assert sep, f"no {heading!r}"
    return first, rest


def _in_order(text, parts):
    """Each of ``parts`` is in ``text``, in this order (each found after the one before)."""
    missing = [p for p in parts if p not in text]
    assert not missing, (missing, text)
    at, start = [], 0
    for p in parts:
        start = text.index(p, start)
        at.append(start)
    assert at == sorted(at), [p for p, _ in sorted(zip(parts, at), key=lambda x: x[1])]


# --- page one ---------------------------------------------------------------------------------


def test_markdown_page_one_holds_what_the_customer_signs(job):
    record, folder, _ = job
    page_one, appendix = _split(render_report(record, "md", attachments_dir=folder),
                                "## Appendix")
    assert page_one.startswith("# Repair log: Cured\n")
    _in_order(page_one, [
        "| site | North plant, hall 3 |", "| machine | Hoist 2 |", "| axis | lift |",
        "| serial | SN-0042 |", "| Rated coil voltage | 24 V | read: 24 V |",
        "| Rated coil power | 20 W | **assumed** (the pack's default, not read off the unit) |",
        "## Complaint", "- Brake will not release",
        "## Finding", "**Coil winding open**, as the technician found it.",
        f"The repair that cured it covers: {'; '.join(BROAD[1])}.",
        "## Work done", "- Replace the fuse: **not cured**", f"- {BROAD[0]}: **cured**",
        "## Parts fitted", "| 2 | fuse 2 A | F-2A | Replace the fuse |",
        f"| 1 | brake unit | BU-24 | {BROAD[0]} |", f"| 4 | mounting screw |  | {BROAD[0]} |",
        # local time with its offset, from the first entry to the last
        "| time on site | 2025-01-14 09:00 to 10:20 +01:00 (80 min) |",
        "| technician | Ana Example |", "| mode | on site |",
        "Technician's name: Ana Example", "Technician's signature: ____", "Date: ____",
        "Customer's name: ____", "Customer's signature: ____", "Date: ____",
        "## Key readings", "## Cautions", "## Attachments"])
    # The pack, the rankings, the notice and the deference are the appendix's.
    for later in ("content hash", "ranking after this step", "This tool is an aid",
                  "licensed practice take precedence", "Customer told to keep"):
        assert later not in page_one and later in appendix, later


def test_html_page_one_holds_what_the_customer_signs(job):
    record, folder, _ = job
    text = render_report(record, "html", attachments_dir=folder)
    page_one, appendix = _split(text, '<details class="appendix" id="appendix" open>')
    _in_order(page_one, [
        "<h1>Repair log: <span class=\"outcome-resolved\">Cured</span></h1>",
        "<th>site</th><td>North plant, hall 3</td>", "<th>serial</th><td>SN-0042</td>",
        "read: 24 V", "<strong>assumed</strong>", "Brake will not release",
        "<strong>Coil winding open</strong>, as the technician found it.",
        f"The repair that cured it covers: {'; '.join(BROAD[1])}.",
        "Work done", "not cured", "Parts fitted", "BU-24", "mounting screw",
        "2025-01-14 09:00 to 10:20 +01:00", "Ana Example",
        "Technician's signature", "Customer's signature", "Key readings", "Cautions"])
    assert page_one.count("<span class=\"label\">Date</span>") == 2
    for later in ("content hash", "Ranking after this step", "This tool is an aid"):
        assert later not in page_one and later in appendix, later


def test_without_a_finding_the_cure_names_the_cause_and_says_so(tmp_path, model):
    with Journal(tmp_path / "j.sqlite3") as journal:
        sid = _job(journal, model, cure="replace_coil", finding=None)
        record = session_record(journal, sid, model)
    assert record.finding == {"id": "coil_open", "title": "Coil winding open", "by": "cure"}
    assert [c["id"] for c in record.covers] == ["coil_open"]
    page_one = _split(render_report(record, "md"), "## Appendix")[0]
    assert ("**Coil winding open**, the cause the repair that cured it fixes (the technician "
            "was not asked).") in page_one
    assert "covers" not in page_one  # one cause: nothing more to say


def test_the_finding_and_what_the_cure_covers_are_in_the_record_and_its_json(job):
    import json

    record, _, _ = job
    assert record.finding == {"id": "coil_open", "title": "Coil winding open",
                              "by": "technician"}
    assert [c["title"] for c in record.covers] == BROAD[1]
    data = json.loads(render_report(record, "json"))
    assert data["finding"]["by"] == "technician" and len(data["covers"]) == 3
    assert [a["sha256"] for a in data["attachments"]][1] == MISSING


def test_a_phone_call_says_what_the_caller_confirmed_the_leading_causes_and_the_parts(
        tmp_path, model):
    with Journal(tmp_path / "j.sqlite3") as journal:
        s = start_session(journal, model, mode="phone", who="Help desk",
                          clock=minute_clock("2025-01-14T14:00:00-05:00"))
        s.add_complaint("will_not_release")
        s.answer("listen_click", "silent")
        s.end("visit", parts=["fuse 2 A", "magnet body with coil (to the nameplate)"])
        record = session_record(journal, s.session_id, model)
    page_one = _split(render_report(record, "md"), "## Appendix")[0]
    assert page_one.startswith("# Repair log: Site visit recommended\n")
    _in_order(page_one, [
        "No cause was confirmed.", "By phone, the caller confirmed:",
        "- Listen for the click at switch-on: no click",
        "Leading causes:", "- Lining worn, gap too large: possible (37%)",
        "- Coil winding open: less likely (18%)",
        "Parts to bring: fuse 2 A; magnet body with coil (to the nameplate).",
        "No repair was done.", "| time of the call | 2025-01-14 14:00 to 14:15 -05:00 (15 min) |",
        "| mode | by phone |", "Customer's signature"])


# --- readings, cautions, attachments ----------------------------------------------------------


def test_key_readings_carry_figures_verdicts_and_assumed_values(job):
    record, _, _ = job
    readings = _split(_split(render_report(record, "md"), "## Key readings")[1],
                      "## Cautions")[0]
    for part in ("### Coil resistance, leads disconnected", "- reading: OL",
                 "- verdict: **open**", "| expected resistance at 20 °C | 28.8 | ohm |",
                 "**uses assumed values**, not read off the unit: `rated_power`"):
        assert part in readings, part
    assert "Listen for the click" not in readings  # an answer, not a measurement


def test_each_caution_is_listed_once_with_the_cards_it_applied_to(job):
    record, _, _ = job
    assert len(record.cautions) >= 3  # acknowledged on several cards
    text = render_report(record, "md")
    cautions = _split(_split(text, "## Cautions")[1], "## Attachments")[0]
    assert cautions.count("`lockout`") == 1 and cautions.count("DANGER") == 1
    assert ("applied to Coil resistance, leads disconnected; Look at the fuse; "
            f"{BROAD[0]}") in cautions
    # The appendix keeps each acknowledgement with its time, for the record.
    acks = _split(text, "### Acknowledgements")[1]
    assert acks.count("`lockout` on the card of") == len(record.cautions)
    html = render_report(record, "html")
    section = _split(_split(html, "<h2>Cautions</h2>")[1], "</section>")[0]
    assert section.count("<code>lockout</code>") == 1 and "Look at the fuse" in section


def test_images_are_embedded_and_a_missing_file_is_a_line(job, tmp_path):
    record, folder, photo = job
    html = render_report(record, "html", attachments_dir=folder)
    uri = "data:image/png;base64," + base64.b64encode(PIXEL).decode()
    assert f'<img class="thumb" src="{uri}" alt="burnt coil terminal">' in html
    assert html.count("<img") == 1
    assert ("worn disc (disc.jpg): image/jpeg, 2 kB; the file is not at hand "
            f"(<code>attachments/{MISSING}</code>).") in html
    assert "max-width: 60mm; max-height: 45mm" in html
    md = render_report(record, "md", attachments_dir=folder)
    assert f"- [burnt coil terminal](attachments/{photo.sha256}) (terminal.png)" in md
    assert f"- [worn disc](attachments/{MISSING}) (disc.jpg): image/jpeg, 2 kB; the file is " \
           "not at hand" in md
    # No folder, or a file altered in the store: a line, never a failure or a wrong picture.
    assert "<img" not in render_report(record, "html")
    altered = tmp_path / "altered"
    altered.mkdir()
    (altered / photo.sha256).write_bytes(PIXEL + b"x")
    assert "<img" not in render_report(record, "html", attachments_dir=altered)


def test_the_report_command_embeds_from_the_journals_attachment_folder(job, tmp_path):
    from diagnose.cli import main

    record, _, photo = job
    out = tmp_path / "log.html"
    assert main(["--journal", str(tmp_path / "journal.sqlite3"), "--packs", str(tmp_path),
                 "report", record.session["id"], "--format", "html", "-o", str(out)]) == 0
    text = out.read_text(encoding="utf-8")
    assert text.count('<img class="thumb" src="data:image/png;base64,') == 1
    assert "the file is not at hand" in text and photo.sha256 not in text


# --- HTML: valid, self-contained, printable ---------------------------------------------------


def _strict(text):
    parser = html5lib.HTMLParser(strict=True)
    parser.parse(text)  # raises on the first parse error
    assert not parser.errors


def test_html_parses_without_errors_and_stays_self_contained(job, tmp_path, model):
    record, folder, _ = job
    text = render_report(record, "html", attachments_dir=folder)
    _strict(text)
    for external in ("<link", "http://", "https://", "@import", "url("):
        assert external not in text, external
    assert 'src="data:image/png;base64,' in text and text.count("src=") == 1
    with Journal(tmp_path / "j2.sqlite3") as journal:  # hostile text parses as text too
        s = start_session(journal, model, who='<b>"Ana"</b> & co',
                          clock=minute_clock("2025-01-14T09:00:00+00:00"))
        s.set_identity(site="</td></tr><script>x()</script>", serial="a\x1b[2Jb")
        s.add_complaint("will_not_release")
        s.note("</details><details open>")
        s.attach("cd" * 32, name="<img src=x onerror=y()>", caption="x](javascript:z()) <b>",
                 media_type="image/png", size=1)
        s.end()
        hostile = session_record(journal, s.session_id, model)
    text = render_report(hostile, "html", attachments_dir=tmp_path)
    _strict(text)
    assert "<img" not in text and "<b>" not in text and "<script>x" not in text
    md = render_report(hostile, "md", attachments_dir=tmp_path)
    # The caption is the link's text, escaped; the target is the digest, never the caption's.
    assert f"- [x\\](javascript:z()) &lt;b&gt;](attachments/{'cd' * 32})" in md


def test_the_print_css_fits_a4_and_letter(job):
    record, folder, _ = job
    text = render_report(record, "html", attachments_dir=folder)
    assert "@page { margin: 15mm; }" in text
    assert not re.search(r"@page[^}]*size", text)  # the paper is the printer's: A4 or Letter
    assert ".signatures { break-inside: avoid;" in text
    assert ".readings, details.appendix { break-before: page;" in text


def test_same_session_same_document(job):
    record, folder, _ = job
    for fmt in ("md", "html"):
        assert render_report(record, fmt, attachments_dir=folder) == \
            render_report(record, fmt, attachments_dir=folder)


# --- printed in a headless browser ------------------------------------------------------------


def _browser():
    return next((shutil.which(b) for b in ("chromium", "chromium-browser", "google-chrome")
                 if shutil.which(b)), None)


def _page_texts(pdf: Path) -> list[str] | None:
    """The text of each page of ``pdf`` (pdftotext, else pypdf), or None without either."""
    if shutil.which("pdftotext"):
        out = subprocess.run(["pdftotext", "-layout", str(pdf), "-"], capture_output=True,
                             text=True, timeout=60, check=True).stdout
        return out.split("\f")[:-1] if out.endswith("\f") else out.split("\f")
    try:
        from pypdf import PdfReader
    except ImportError:
        return None
    return [page.extract_text() for page in PdfReader(str(pdf)).pages]


@pytest.mark.slow
@pytest.mark.skipif(_browser() is None, reason="no headless browser (chromium) installed")
@pytest.mark.parametrize("paper", ["A4", "letter"])
def test_printed_page_one_holds_the_signature_lines(job, tmp_path, paper):
    record, folder, _ = job
    text = render_report(record, "html", attachments_dir=folder)
    # The log leaves the paper to the printer; the test picks it, as a print dialog would.
    page = tmp_path / f"log-{paper}.html"
    page.write_text(text.replace("</style>", f"@page {{ size: {paper}; }}\n</style>", 1),
                    encoding="utf-8")
    pdf = tmp_path / f"log-{paper}.pdf"
    proc = subprocess.run([_browser(), "--headless", "--no-sandbox", "--disable-gpu",
                           f"--print-to-pdf={pdf}", "--no-pdf-header-footer",
                           page.as_uri()], capture_output=True, timeout=120)
    assert pdf.is_file() and pdf.stat().st_size > 0, proc.stderr[-500:]
    pages = _page_texts(pdf)
    if pages is None:
        pytest.skip("no PDF text extraction (pdftotext or pypdf)")
    first = pages[0]
    for part in ("Repair log: Cured", "SN-0042", "Brake will not release",
                 "Coil winding open", "BU-24", "Technician's signature",
                 "Customer's signature"):
        assert part in first, (part, first)
    # The readings and the appendix each start a page of their own; the appendix prints
    # whole (opened before printing), its steps with their rankings.
    assert "Key readings" not in first
    appendix = next(i for i, t in enumerate(pages) if "Appendix: the full record" in t)
    assert appendix >= 2 and "Customer's signature" not in pages[appendix]
    assert any("Ranking after this step" in t for t in pages[appendix:])
