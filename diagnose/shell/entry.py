"""How the shell starts: `diagnose start` (a new session) and `diagnose resume ID`.

:func:`main` and :func:`resume` open the pack and the journal through the
service, make the reader (a terminal prompt, or lines of standard input
without a terminal) and the rich console unless the caller gives them, and
hand the session to the flow (:class:`diagnose.shell.app.Shell`). At a
terminal the safety notice is read while the pack loads (see ``startup``).
"""

from __future__ import annotations

import argparse
import os
import sys
from typing import TYPE_CHECKING, Any

from diagnose.shell.app import MENU_ROWS, Shell

if TYPE_CHECKING:
    from diagnose.session import Session


def _console() -> Any:
    from diagnose.text import console

    return console()


def _reader(console: Any, holder: list[Shell]) -> Any:
    """A terminal prompt when stdin is a terminal, else lines from stdin."""
    from diagnose.shell.reader import LineReader, PromptReader, file_history

    if not sys.stdin.isatty():
        return LineReader(sys.stdin, console)
    from prompt_toolkit import PromptSession
    from prompt_toolkit.output import ColorDepth

    depth = ColorDepth.MONOCHROME if os.environ.get("NO_COLOR") else None
    session: Any = PromptSession(history=file_history(), color_depth=depth,
                                 reserve_space_for_menu=MENU_ROWS)
    return PromptReader(session, toolbar=lambda: holder[0].toolbar() if holder else "")


def main(args: argparse.Namespace, *, console: Any = None, reader: Any = None) -> int:
    """`diagnose start` and bare `diagnose`: a new session in the shell.

    At a terminal the safety notice (from the pack's manifest) is shown at once
    and read while the pack loads in the background (see ``startup``); from a
    script, the pack is loaded first and the notice shown as the session starts.

    The settings file gives the mode, the technician (``--who``) and the units
    when the command line does not.

    Raises:
        InputError: no such pack, a bad mode or a broken settings file;
        KnowledgeError: the pack is broken; JournalError: the journal cannot be written.
    """
    from diagnose.kb.locate import DEFAULT_PACK
    from diagnose.service import Where, journal_target, open_journal, open_pack, preferences, start

    where = Where.of(args)
    prefs = preferences(args)

    ref = getattr(args, "pack", None) or DEFAULT_PACK
    mode = getattr(args, "mode", None) or prefs.mode
    who = getattr(args, "who", None) or prefs.technician
    console = console or _console()
    holder: list[Shell] = []
    notice = None
    if reader is None and sys.stdin.isatty():
        from diagnose.shell.startup import manifest_notice

        notice = manifest_notice(ref, getattr(args, "packs", None))
    if notice is not None:
        from diagnose.shell.startup import Preload, read_notice_while_loading
        from diagnose.views import NoticeView

        console.print(NoticeView(notice))
        reader = _reader(console, holder)  # imported first: the loading then has the CPU
        loading = Preload(lambda: open_pack(ref, where))
        try:
            model = read_notice_while_loading(console, reader, notice, loading)
        except EOFError:
            console.print("Left before the diagnosis started: nothing was recorded.",
                          markup=False)
            return 0
    else:
        if console.is_terminal:  # reading and checking a pack takes a moment
            console.print(f"Loading the pack {ref} ...", style="dim", markup=False)
        model = open_pack(ref, where)
    with open_journal(where) as journal:
        session = start(journal, model, where, mode=mode, who=who or None)
        return _run(session, console, reader, journal_target(where), resumed=False,
                    holder=holder, notice_shown=notice is not None, units=prefs.units)


def resume(args: argparse.Namespace, session_id: str, *, console: Any = None,
           reader: Any = None) -> int:
    """Continue session ``session_id`` from the journal in the shell (for `diagnose resume ID`).

    The pack is chosen by the service's one rule (``diagnose.service.recorded_pack``:
    ``args.pack`` when given, else the recorded knowledge by its content hash, from
    the folder the session recorded or its id on the search path); the events are
    replayed and new ones are appended to the same session.

    Raises:
        JournalError: no journal, no such session, or the session is closed;
        InputError: the pack cannot be found, or the session was recorded with another pack.
    """
    from diagnose.service import Where, journal_target, need_journal, open_journal, preferences
    from diagnose.service import resume as resume_session

    where = Where.of(args)
    units = preferences(args).units
    need_journal(where).close()  # a missing journal is said as such, not made anew
    console = console or _console()
    with open_journal(where) as journal:
        who = getattr(args, "who", None) or preferences(args).technician or None
        resumed = resume_session(journal, session_id, where, getattr(args, "pack", None),
                                 visit=True, who=who,
                                 take_over=bool(getattr(args, "take_over", False)))
        if resumed.handover is not None:
            from diagnose.service.holding import handover_line

            console.print(handover_line(resumed.info.id, resumed.handover), markup=False)
        return _run(resumed.session, console, reader, journal_target(where), resumed=True,
                    units=units)


def _run(session: Session, console: Any, reader: Any, path: str | None, *,
         resumed: bool, holder: list[Shell] | None = None, notice_shown: bool = False,
         units: str = "metric") -> int:
    holder = [] if holder is None else holder
    shell = Shell(session, console, reader or _reader(console, holder), journal_path=path,
                  resumed=resumed, notice_shown=notice_shown, units=units)
    holder.append(shell)
    return shell.run()
