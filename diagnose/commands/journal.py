"""The journal's commands: sessions, resume, report, learn, stats, backup.

`diagnose sessions` lists what the journal holds; `diagnose resume ID`
continues an open session in the shell; `diagnose report ID` writes its
repair log; `diagnose learn PACK` refines the pack's cause priors from
confirmed cures; `diagnose stats` sums up; `diagnose backup FILE` copies the
journal safely while it may be in use. The journal is ``--journal PATH``,
else DIAGNOSE_JOURNAL, else the user's data folder.
"""

from __future__ import annotations

import argparse
from typing import Any

from diagnose.commands import add_output_arguments, output_options, write_output
from diagnose.errors import InputError, JournalError
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
    p.add_argument("--json", action="store_true", help="a JSON list instead of a table")
    p.set_defaults(handler=_sessions)

    p = sub.add_parser("resume", help="continue an open diagnosis where it stopped",
                       description="Continue an open session in the shell, exactly where it "
                       "stopped: its events are replayed from the journal and new ones are "
                       "added to it. Without a terminal, answers are read from standard input.")
    p.add_argument("session_id", metavar="ID", help="the session id (see `diagnose sessions`)")
    p.set_defaults(handler=_resume)

    p = sub.add_parser("report", help="the repair log of a session (Markdown, HTML or JSON)",
                       description="Write the repair log of a session: unit, nameplate, "
                       "complaint, every step with its readings, figures and verdicts, the "
                       "ranking after each step, cautions acknowledged, repairs, the confirmed "
                       "cause, minutes, notes, and the pack's id, version and content hash.")
    p.add_argument("session_id", metavar="ID")
    p.add_argument("--format", choices=("md", "html", "json"), default="md",
                   help="md (default), html (one self-contained file) or json")
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


# --- helpers -------------------------------------------------------------------------------


def _path(args: argparse.Namespace) -> Any:
    from diagnose.journal.paths import journal_path

    return journal_path(getattr(args, "journal", None))


def _reader(args: argparse.Namespace) -> Any:
    """The journal opened for reading, or None when nothing was recorded there yet.

    A missing file, a 0-byte file and a journal never written to are alike:
    no sessions. A damaged file raises ``JournalError``.
    """
    from diagnose.journal.store import Journal, inspect

    path = _path(args)
    if inspect(path) == 0:
        return None
    return Journal(path, readonly=True)


def _need_reader(args: argparse.Namespace) -> Any:
    journal = _reader(args)
    if journal is None:
        raise JournalError(f"there is no journal at {_path(args)} yet: nothing was recorded "
                           "there (see --journal and DIAGNOSE_JOURNAL)")
    return journal


def _model(args: argparse.Namespace, pack_id: str, *, learned: bool = False) -> Any:
    """The pack a session ran on, or None when it cannot be loaded any more."""
    from diagnose.errors import DiagnoseError
    from diagnose.kb.loader import load_model

    try:
        if learned:
            from diagnose.commands.kb import load

            return load(args, pack_id)
        return load_model(pack_id, search=args.packs)
    except DiagnoseError:
        return None


def recorded_folder(events: list[Any]) -> str:
    """The pack folder a session's notice recorded, while it is still there ("" if not)."""
    from pathlib import Path

    first = events[0].data if events and events[0].kind == "notice" else {}
    folder = str(first.get("path") or "")
    return folder if folder and Path(folder).is_dir() else ""


# --- handlers ------------------------------------------------------------------------------


def _sessions(args: argparse.Namespace) -> int:
    journal = _reader(args)
    infos = []
    if journal is not None:
        with journal:
            journal.verify_events()  # a row altered by hand is named, not listed as sound
            infos = journal.sessions(args.status, pack_id=args.pack)
    if args.json:
        print(json_text([i.to_dict() for i in infos], indent=2))
        return 0
    if not infos:
        say(f"no sessions in the journal {_path(args)}")
        return 0
    from rich.table import Table

    from diagnose.journal.report import when
    from diagnose.text import console

    table = Table(box=None, pad_edge=False)
    for col in ("id", "started", "pack", "mode", "who", "status", "cause", "events"):
        table.add_column(col, justify="right" if col == "events" else "left")
    for i in infos:
        status = i.status if i.is_open else (i.outcome or "closed")
        cause = (i.cause or "") if i.outcome == "resolved" else ""
        table.add_row(*(clean(v) for v in (
            i.id, when(i.started), f"{i.pack_id} {i.pack_version}", i.mode, i.who or "", status,
            cause, str(i.events))))
    console().print(table)
    return 0


def _resume(args: argparse.Namespace) -> int:
    from diagnose.journal.recorder import ensure_open

    journal = _need_reader(args)
    with journal:
        info = journal.session(args.session_id)
        journal.verify_events(info.id)
    ensure_open(info)
    try:
        from diagnose.shell.app import resume
    except ImportError:
        resume = None
    if resume is not None:
        return int(resume(args, info.id) or 0)
    return _resume_scripted(args, info.id)


def _resume_scripted(args: argparse.Namespace, session_id: str) -> int:
    """Without the shell: replay the session and say where it stands (read-only)."""
    from diagnose.journal.recorder import resume_session
    from diagnose.journal.store import Journal

    with Journal(_path(args)) as journal:
        model = _model(args, journal.session(session_id).pack_id, learned=True)
        if model is None:
            raise JournalError(f"the pack of session {session_id} cannot be loaded")
        session = resume_session(journal, session_id, model)
        action = session.next_action()
        say(f"session {session_id}: {len(session.events)} event(s); next: {action.kind} "
            f"{action.id or ''}".rstrip())
    return 0


def _report(args: argparse.Namespace) -> int:
    from diagnose.journal.record import session_record
    from diagnose.journal.report import render_report

    with _need_reader(args) as journal:
        info = journal.session(args.session_id)
        journal.verify_events(info.id)  # no log from an event altered by hand
        model = _model(args, info.pack_id)
        if model is None:  # a pack given by its folder: the folder its notice recorded
            folder = recorded_folder(journal.load_events(info.id))
            found = _model(args, folder) if folder else None
            model = found if getattr(found, "id", None) == info.pack_id else None
        record = session_record(journal, info.id, model)
    write_output(render_report(record, args.format), args.output, **output_options(args))
    return 0


def _learn(args: argparse.Namespace) -> int:
    from diagnose.journal.learn import DEFAULT_WEIGHT, learn, write_overlay
    from diagnose.journal.paths import overlay_path
    from diagnose.kb.loader import load_model

    model = load_model(args.pack, search=args.packs)  # the pack's own priors, never learned ones
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
            result = stats(journal, args.pack, lambda pid: _model(args, pid))
    if args.json:
        print(json_text(result.to_dict(), indent=2))
        return 0
    from diagnose.text import console

    console().print(result)
    return 0


def _backup(args: argparse.Namespace) -> int:
    with _need_reader(args) as journal:
        target = journal.backup(args.target, force=args.force)
    print("integrity: ok")
    say(f"journal {_path(args)} copied to {target}")
    return 0
