"""The shell's own commands on the command line: `diagnose start` and `diagnose resume ID`.

`diagnose start [PACK] [--mode site|phone]` opens the interactive diagnosis
shell on a new session; bare `diagnose` calls :func:`default`, which opens it
on the default pack in site mode (or the settings file's mode); `diagnose
resume ID` continues an open session in it. The shell itself (prompt_toolkit,
rich) is imported only when it runs, so `diagnose --help` stays fast.
"""

from __future__ import annotations

import argparse
from typing import Any

from diagnose.text import storable


def register(sub: Any) -> None:
    p = sub.add_parser(
        "start", help="open the interactive diagnosis shell (the default command)",
        description="Diagnose one unit interactively: safety notice, nameplate, complaint, "
        "then the proposed checks, readings and repairs until the cure or an escalation. "
        "By phone, every step is a question for the caller and the end is a recommendation: "
        "resolved, or a site visit with the parts to bring. At a terminal the pack loads while "
        "the safety notice is read (Enter goes on). Without a terminal, answers are read line "
        "by line from standard input.")
    p.add_argument("pack", nargs="?", metavar="PACK",
                   help="pack id or folder (default: spring-applied-brake)")
    p.add_argument("--mode", choices=("site", "phone"), default=None,
                   help="site: a technician at the unit (default, or the settings file's "
                   "mode); phone: a help-desk agent asking a caller only what is safe without "
                   "tools, ending with a recommendation (resolved, or a site visit with the "
                   "parts to bring)")
    p.add_argument("--who", metavar="NAME", type=storable,
                   help="who does the diagnosis, for the repair log (default: the settings "
                   "file's technician)")
    p.set_defaults(handler=run)

    p = sub.add_parser("resume", help="continue an open diagnosis where it stopped",
                       description="Continue an open session in the shell, exactly where it "
                       "stopped: its events are replayed from the journal and new ones are "
                       "added to it. The pack is the one the session was recorded with (found "
                       "by its content hash in the folder it recorded or by its id on the "
                       "search path); a changed pack is named. Without a terminal, answers are "
                       "read from standard input.")
    p.add_argument("session_id", metavar="ID", help="the session id (see `diagnose sessions`)")
    p.add_argument("--who", metavar="NAME", type=storable,
                   help="the technician who takes up a phone diagnosis at the site visit, for "
                   "the repair log (default: the settings file's technician)")
    p.add_argument("--take-over", action="store_true",
                   help="take the session even while another holder holds it: in a team "
                   "journal a session has one holder at a time (who, which machine, the time "
                   "of the last write); another is refused while the holder wrote within the "
                   "lease (10 minutes, DIAGNOSE_LEASE_MINUTES). The hand-off is recorded")
    p.set_defaults(handler=resume)


def default(args: argparse.Namespace) -> int:
    """Bare `diagnose`: the shell on the default pack, in site mode (or the settings file's)."""
    return run(args)


def run(args: argparse.Namespace) -> int:
    from diagnose.shell.entry import main

    return main(args)


def resume(args: argparse.Namespace) -> int:
    from diagnose.shell.entry import resume as resume_shell

    return resume_shell(args, args.session_id)
