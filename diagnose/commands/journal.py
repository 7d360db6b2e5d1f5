"""The journal's commands: sessions, resume, report, learn, stats, backup, export, import, verify,
sync.

`diagnose sessions` lists what the journal holds; `diagnose resume ID`
continues an open session in the shell; `diagnose report ID` writes its
repair log; `diagnose learn PACK` refines the pack's cause priors from
confirmed cures; `diagnose stats` sums up; `diagnose backup FILE` copies the
journal safely while it may be in use; `diagnose export ID` and `diagnose
import FILE` carry one session to another journal; `diagnose verify` checks
that no recorded event was altered or taken out; `diagnose sync` sends the
sessions to the team journal (``--pull`` brings its closed ones back). The
journal is ``--journal PATH`` (or a team journal's ``postgresql://`` URL), else
DIAGNOSE_JOURNAL, else the settings file's, else the user's data folder. A
session is named by its short id, its UUID or a unique prefix of the UUID (8
hex digits or more).
"""

from __future__ import annotations

import argparse
from typing import Any

from diagnose.commands import add_output_arguments, output_options, write_output
from diagnose.errors import InputError, JournalError
from diagnose.journal import REPORT_FORMATS
from diagnose.text import clean, json_text, say


def register(sub: Any) -> None:
    p = sub.add_parser("sessions", help="list the diagnoses in the journal",
                       description="List the sessions in the journal, newest first.")
    which = p.add_mutually_exclusive_group()
    which.add_argument("--open", dest="status", action="store_const", const="open",
                       help="only sessions that can be resumed")
    which.add_argument("--closed", dest="status", action="store_const", const="closed",
                       help="only closed sessions")
    p.add_argument("--pack", metavar="PACK", help="only the sessions of this pack id")
    p.add_argument("--serial", metavar="S", help="only the sessions of the unit with this serial")
    p.add_argument("--site", metavar="S", help="only sessions whose site or customer holds S")
    p.add_argument("--machine", metavar="M", help="only sessions whose machine holds M")
    p.add_argument("--axis", metavar="A", help="only sessions whose axis holds A")
    p.add_argument("--since", metavar="DATE", type=_date,
                   help="only sessions started on or after DATE (YYYY-MM-DD)")
    p.add_argument("--json", action="store_true", help="a JSON list instead of a table")
    p.set_defaults(handler=_sessions)

    p = sub.add_parser("report", help="the repair log of a session (Markdown, HTML or JSON)",
                       description="Write the repair log of a session: unit, nameplate, "
                       "complaint, every step with its readings, figures and verdicts, the "
                       "ranking after each step, cautions acknowledged, repairs, the confirmed "
                       "cause, minutes, notes, and the pack's id, version and content hash.")
    p.add_argument("session_id", metavar="ID")
    p.add_argument("--format", choices=REPORT_FORMATS, default="md",
                   help="md (default), html (one self-contained file), json (the record), or "
                   "another format a template in diagnose/templates adds")
    add_output_arguments(p)
    p.set_defaults(handler=_report)

    p = sub.add_parser("learn", help="refine a pack's cause priors from confirmed cures",
                       description="Count the closed sessions of PACK whose cause a cure "
                       "confirmed and write learned cause priors beside the journal "
                       "(learned/PACK.json). The pack's YAML is never changed; the global "
                       "--no-learned ignores the learned priors.")
    p.add_argument("pack", metavar="PACK", help="pack id or folder")
    p.add_argument("--weight", type=float, default=None, metavar="N",
                   help="how many confirmed cures the pack's own priors weigh (default 20)")
    p.add_argument("--json", action="store_true", help="print the learned priors as JSON")
    p.set_defaults(handler=_learn)

    p = sub.add_parser("stats", help="confirmed causes, minutes to cure, checks used, ...",
                       description="Figures over the sessions in the journal: confirmed causes "
                       "by frequency, mean minutes to the cure, the checks used most, first-"
                       "repair success and sessions escalated.")
    p.add_argument("pack", nargs="?", metavar="PACK", help="only this pack id (default: all)")
    p.add_argument("--json", action="store_true")
    p.set_defaults(handler=_stats)

    p = sub.add_parser("backup", help="copy the journal safely, even while it is in use",
                       description="Check the journal's integrity, then copy the whole journal "
                       "to FILE with the database's online backup (a consistent copy even while "
                       "a diagnosis is writing to it). The copy is written beside FILE and "
                       "renamed into place. A damaged journal is not copied.")
    p.add_argument("target", metavar="FILE")
    p.add_argument("--force", action="store_true",
                   help="replace FILE if it is an earlier backup or another journal (never the "
                   "journal itself, another program's database or a path through a symbolic "
                   "link)")
    p.set_defaults(handler=_backup)

    p = sub.add_parser("export", help="one session as a file, to carry it to another journal",
                       description="Write session ID as one JSON file (its events, rankings and "
                       "attached files), for `diagnose import` on another machine: a phone "
                       "session handed to the technician who visits the site.")
    p.add_argument("session_id", metavar="ID")
    add_output_arguments(p)
    p.set_defaults(handler=_export)

    p = sub.add_parser("import", help="bring an exported session into this journal",
                       description="Read a session written by `diagnose export` into the "
                       "journal. Importing the same file again changes nothing; a file with "
                       "more events adds the missing ones; a copy that went on differently "
                       "here is never overwritten. The session keeps its id when it is free.")
    p.add_argument("file", metavar="FILE")
    p.set_defaults(handler=_import)
    _register_verify(sub)


def _register_verify(sub: Any) -> None:
    p = sub.add_parser("verify", help="check that no recorded event was altered or taken out",
                       description="Check the hash chain of every session's events (or of "
                       "session ID's): each event carries the hash of the one before it in its "
                       "session and its own (SHA-256 over its contents). Prints one line; "
                       "exits 1 at the first break, naming the session and the event.")
    p.add_argument("session_id", nargs="?", metavar="ID",
                   help="only this session (short id, UUID or a unique prefix of it)")
    p.set_defaults(handler=_verify)

    p = sub.add_parser("sync", help="send this journal's sessions to the team journal",
                       description="Copy every session of this journal (open and closed, with "
                       "their events, UUIDs and hash chains) to the team journal: --to URL, else "
                       "DIAGNOSE_TEAM_JOURNAL, else the settings file's team_journal. With "
                       "--pull, also bring back the team journal's closed sessions this one "
                       "lacks (the history of units and `learn` work offline). Running it "
                       "again sends nothing; a sync cut off part-way is finished by the next; "
                       "laptops syncing in any order give the same team journal. Prints one "
                       "line; exits 1 when a session went on differently in both journals (it "
                       "is left as it is in both).")
    p.add_argument("--to", metavar="URL",
                   help="the team journal (a postgresql:// URL, or another journal file)")
    p.add_argument("--pull", action="store_true",
                   help="also copy the team journal's closed sessions that this one lacks")
    p.set_defaults(handler=_sync)


# --- helpers -------------------------------------------------------------------------------


def _where(args: argparse.Namespace) -> Any:
    from diagnose.service import Where

    return Where.of(args)


def _path(args: argparse.Namespace) -> Any:
    from diagnose.service import journal_path

    return journal_path(_where(args))


def _label(args: argparse.Namespace) -> str:
    from diagnose.service import journal_label

    return journal_label(_where(args))


def _reader(args: argparse.Namespace) -> Any:
    from diagnose.service import read_journal

    return read_journal(_where(args))


def _need_reader(args: argparse.Namespace) -> Any:
    from diagnose.service import need_journal

    return need_journal(_where(args))


def _date(text: str) -> str:
    """A date as YYYY-MM-DD (for ``--since``)."""
    from datetime import date

    try:
        return date.fromisoformat(text.strip()).isoformat()
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a date as YYYY-MM-DD, got {text!r}") from None


# --- handlers ------------------------------------------------------------------------------


def _sessions(args: argparse.Namespace) -> int:
    journal = _reader(args)
    infos = []
    if journal is not None:
        with journal:
            journal.verify_events()  # a row altered by hand is named, not listed as sound
            infos = journal.sessions(args.status, pack_id=args.pack, serial=args.serial,
                                     site=args.site, machine=args.machine, axis=args.axis,
                                     since=args.since)
    if args.json:
        print(json_text([i.to_dict() for i in infos], indent=2))
        return 0
    if not infos:
        say(f"no sessions in the journal {_label(args)}")
        return 0
    from rich.table import Table

    from diagnose.journal.holders import lease_seconds
    from diagnose.journal.report import when
    from diagnose.text import console

    table = Table(box=None, pad_edge=False, collapse_padding=True)  # fits 80 columns
    units = any(i.unit for i in infos)
    for col in ("id", "started", "unit" if units else "pack", "mode", "who", "status", "cause",
                "events"):
        widest = {"id": max(len(i.id) for i in infos), "started": 10}  # a date whole
        table.add_column(col, justify="right" if col == "events" else "left",
                         no_wrap=col in ("id", "mode", "events", "cause"),  # id: never cut
                         min_width=widest.get(col),
                         overflow="fold" if col in ("unit", "who", "status") else "ellipsis")
    lease = lease_seconds()
    for i in infos:
        status = i.status if i.is_open else (i.outcome or "closed")
        if i.is_open and i.holding.holds(lease):  # a shared journal: who writes it now
            status = f"held by {i.holding.place}"
        cause = (i.cause or "") if i.outcome == "resolved" else ""
        unit = " / ".join(i.unit.values()) if units else f"{i.pack_id} {i.pack_version}"
        table.add_row(*(clean(v) for v in (
            i.id, when(i.started), unit, i.mode, i.who or "", status, cause, str(i.events))))
    console().print(table)
    return 0


def _report(args: argparse.Namespace) -> int:
    from diagnose.journal.attachments import folder_of
    from diagnose.journal.record import session_record
    from diagnose.journal.report import render_report
    from diagnose.service import preferences, recorded_events, report_pack

    units = preferences(args).units
    with _need_reader(args) as journal:
        info = journal.session(args.session_id)
        events = recorded_events(journal, info.id)  # no log from an event altered by hand
        choice = report_pack(info, events, _where(args))
        record = session_record(journal, info.id, choice.model if choice else None)
    text = render_report(record, args.format, attachments_dir=folder_of(_path(args)),
                         units=units)
    write_output(text, args.output, **output_options(args))
    return 0


def _learn(args: argparse.Namespace) -> int:
    from diagnose.journal.learn import DEFAULT_WEIGHT, learn, write_overlay
    from diagnose.paths import overlay_path
    from diagnose.service import open_pack

    model = open_pack(args.pack, _where(args).own())  # the pack's own priors, never learned
    weight = DEFAULT_WEIGHT if args.weight is None else args.weight
    if weight <= 0:
        raise InputError("--weight", "must be above 0")
    with _need_reader(args) as journal:
        overlay = learn(journal, model, weight=weight)
    target = write_overlay(overlay, overlay_path(_path(args), model.id))
    if args.json:
        print(json_text({**overlay.to_dict(), "path": str(target)}, indent=2))
        return 0
    say(f"{model.id}: {overlay.sessions} confirmed cure(s) counted, the pack's priors "
          f"weighing {weight:g}; learned priors written to {target}")
    for cid, prior in overlay.priors.items():
        base = overlay.base[cid]
        n = overlay.counts.get(cid, 0)
        say(f"  {cid}: {base:g} -> {prior:.4g} per 1,000 ({n} cure(s))")
    print("They apply to new sessions; --no-learned ignores them.")
    return 0


def _stats(args: argparse.Namespace) -> int:
    from diagnose.journal.stats import Stats, stats

    journal = _reader(args)
    if journal is None:
        result = Stats(pack=args.pack)
    else:
        with journal:
            from diagnose.service import try_pack

            own = _where(args).own()
            result = stats(journal, args.pack, lambda pid: try_pack(pid, own))
    if args.json:
        print(json_text(result.to_dict(), indent=2))
        return 0
    from diagnose.text import console
    from diagnose.views import StatsView

    console().print(StatsView(result))
    return 0


def _export(args: argparse.Namespace) -> int:
    from diagnose.journal.transfer import export_session

    with _need_reader(args) as journal:
        data = export_session(journal, args.session_id)
    write_output(json_text(data, indent=1) + "\n", args.output, **output_options(args))
    if args.output:
        say(f"session {args.session_id} written to {args.output}")
    return 0


def _import(args: argparse.Namespace) -> int:
    from diagnose.journal.transfer import import_session, read_export
    from diagnose.service import open_journal

    try:
        with open(args.file, encoding="utf-8") as fh:
            text = fh.read()
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError("import", f"cannot read {args.file}: "
                                   f"{getattr(exc, 'strerror', None) or exc}") from None
    data = read_export(text, args.file)
    with open_journal(_where(args)) as journal:
        done = import_session(journal, data)
    say(str(done))
    return 0


def _backup(args: argparse.Namespace) -> int:
    with _need_reader(args) as journal:
        target = journal.backup(args.target, force=args.force)
    print("integrity: ok")
    say(f"journal {_label(args)} copied to {target}")
    return 0


def _verify(args: argparse.Namespace) -> int:
    journal = _reader(args)
    if journal is None:
        if args.session_id:
            raise JournalError(f"no session {args.session_id} in the journal {_label(args)}: "
                               "nothing was recorded there yet")
        say(f"no sessions in the journal {_label(args)}: nothing to verify")
        return 0
    with journal:
        result = journal.verify_chain(args.session_id)
    say(f"journal {_label(args)}: {result}")
    return 0 if result.ok else 1


def _sync(args: argparse.Namespace) -> int:
    from diagnose.service.sync import sync_journals, team_label

    done = sync_journals(_where(args), args.to, pull=args.pull)
    say(f"{_label(args)} -> {team_label(args.to)}: {done}")
    return 0 if done.ok else 1
