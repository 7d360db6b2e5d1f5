"""`diagnose kb analyze` and `diagnose kb new`: knowledge quality for trainers.

``diagnose/commands/kb.py`` calls ``add_analyze_parser`` and
``add_new_parser`` from its ``register``. Handlers take ``args`` and return
an exit status; heavy imports stay inside them.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
from typing import Any


def add_analyze_parser(ks: Any) -> None:
    """``kb analyze PACK [--complaint ID] [--json] [--format md|html] [-o FILE [--force]]``."""
    from diagnose.commands import add_output_arguments

    p = ks.add_parser(
        "analyze", help="fault-tree, testability and effort analysis of a pack",
        description="Per complaint and for the pack: minimal cut sets, top-event probability "
        "(exact, rare-event, min-cut upper bound), importance of each cause, detection and "
        "isolation shares, ambiguity groups (site and phone) and the expected effort to cure. "
        "See 'Reading the analysis' in DEVELOPERS.md.")
    p.add_argument("pack", metavar="PACK", help="pack id or folder")
    p.add_argument("--complaint", metavar="ID", help="only this complaint")
    p.add_argument("--json", action="store_true", help="one JSON object (to FILE with -o)")
    p.add_argument("--format", choices=("md", "html"),
                   help="a Markdown or HTML report (default with -o: from the file's suffix)")
    add_output_arguments(p)
    p.add_argument("--threshold", type=float, default=0.1, metavar="TV",
                   help="total variation above which two outcome rows count as told apart "
                   "(default 0.1)")
    p.add_argument("--no-effort", action="store_true",
                   help="leave out the simulated effort (faster)")
    p.add_argument("--runs", type=int, metavar="N", help="simulated sessions per policy")
    p.add_argument("--unknown-rate", type=float, metavar="R",
                   help="share of simulated sessions whose cause is outside the pack, from 0 "
                   "up to 1 (default 0.1): how often each policy escalates on them and how "
                   "many repairs it tries in vain")
    p.set_defaults(handler=analyze_command)


def add_new_parser(ks: Any) -> None:
    """``kb new KIND ID [--pack DIR] [--file FILE] [--evaluator NAME]``, and ``kb new pack ID``."""
    from diagnose.kb.scaffold import KINDS

    p = ks.add_parser(
        "new", help="start a new pack, or write a skeleton of a new entry into a pack",
        description="`kb new pack ID --builds-on electrical-supply [--device NOUN --energised "
        "released|engaged]` writes a new pack folder ID (in this folder, or --folder DIR) with "
        "one complaint, cause, check, repair and test case: lint warns at each text that "
        "still says TODO, and `kb test ID` plays its case. Any other KIND writes a YAML "
        "skeleton of a new cause, check, measurement, repair or complaint into a pack, with "
        "every field to fill marked TODO; lint fails until they are filled.")
    p.add_argument("kind", choices=("pack", *KINDS), metavar="KIND",
                   help="one of: pack, " + ", ".join(KINDS))
    p.add_argument("id", metavar="ID", help="the new entry's id (lower_case_with_underscores), "
                   "or the new pack's id (lower-case-with-hyphens)")
    p.add_argument("--pack", metavar="DIR",
                   help="the pack folder (default: this folder, if it holds pack.yaml)")
    p.add_argument("--file", metavar="FILE",
                   help="append to this file of the pack (default: a new <kind>s-<id>.yaml)")
    p.add_argument("--evaluator", metavar="NAME",
                   help="for a measurement: fill evaluator, inputs and verdicts from the registry")
    new = p.add_argument_group("a new pack (kb new pack ID)")
    new.add_argument("--folder", metavar="DIR",
                     help="make the pack folder ID in DIR (default: this folder)")
    new.add_argument("--builds-on", metavar="PACK", action="append", dest="builds_on",
                     help="a pack whose entries the new one reuses, by id (may be repeated)")
    new.add_argument("--device", metavar="NOUN",
                     help="the word for the device (brake, clutch, ...): the pack's device terms")
    new.add_argument("--energised", choices=("released", "engaged"),
                     help="what energising the coil does to the device (default: released)")
    p.set_defaults(handler=new_command)


def analyze_command(args: argparse.Namespace) -> int:
    from diagnose.commands.kb import load
    from diagnose.errors import InputError
    from diagnose.reasoning.analysis import UNKNOWN_RATE, analyze

    if not 0.0 <= args.threshold < 1.0:
        raise InputError("--threshold", "give a total variation from 0 up to 1")
    if args.runs is not None and args.runs < 1:
        raise InputError("--runs", "give at least 1")
    rate = UNKNOWN_RATE if args.unknown_rate is None else args.unknown_rate
    if not 0.0 <= rate < 1.0:
        raise InputError("--unknown-rate", "give a share from 0 up to 1")
    if args.json and args.format:
        raise InputError("--format", "give either --json or --format")
    from diagnose.commands.progress import progress_bar

    model = load(args, args.pack)
    with progress_bar("analysing", json=args.json) as progress:
        result = analyze(model, complaint=args.complaint, threshold=args.threshold,
                         effort=not args.no_effort, runs=args.runs, unknown_rate=rate,
                         progress=progress)
    if args.json:
        from diagnose.commands import output_options, write_output

        write_output(json.dumps(result.to_dict(), indent=2) + "\n", args.output,
                     **output_options(args))
        if args.output:
            print(f"wrote {args.output}", file=sys.stderr)
    elif args.format or args.output:
        from diagnose.commands import output_options, write_output
        from diagnose.report_analysis import render_analysis

        if args.output:
            fmt = args.format or _format_of(args.output)
            write_output(render_analysis(result, fmt), args.output, **output_options(args))
            print(f"wrote {args.output}", file=sys.stderr)
        else:
            sys.stdout.write(render_analysis(result, args.format))
    else:
        from diagnose.text import console
        from diagnose.views_reasoning import PackAnalysisView

        console(lines=True).print(PackAnalysisView(result))
    return 0


def _format_of(output: str) -> str:
    """The report format a file name asks for: html for .html and .htm, else md."""
    from pathlib import Path

    return "html" if Path(output).suffix.lower() in (".htm", ".html") else "md"


def new_command(args: argparse.Namespace) -> int:
    from diagnose.errors import InputError
    from diagnose.kb.scaffold import pack_folder, write_skeleton

    if args.kind == "pack":
        wrong = [f"--{k}" for k in ("pack", "file", "evaluator") if getattr(args, k, None)]
        why = "is for a new entry of a pack; `kb new pack ID` does not take it"
    else:
        wrong = [f"--{k.replace('_', '-')}" for k in ("folder", "builds_on", "device",
                                                       "energised") if getattr(args, k, None)]
        why = "only `kb new pack ID` takes this option"
    if wrong:
        raise InputError(wrong[0], why)
    if args.kind == "pack":
        return _new_pack(args)
    folder = pack_folder(args.pack)
    path = write_skeleton(folder, args.kind, args.id, file=args.file, evaluator=args.evaluator,
                          journal=getattr(args, "journal", None))
    todo = sum(1 for line in path.read_text(encoding="utf-8").splitlines() if "TODO" in line)
    print(f"wrote {args.kind} {args.id} to {path}; fill the lines marked TODO "
          f"({todo} in the file), then run `diagnose kb lint {folder}`")
    return 0


def _new_pack(args: argparse.Namespace) -> int:
    """``kb new pack ID``: the new pack folder, and what to do next."""
    from diagnose.kb.scaffold import write_pack
    from diagnose.text import say

    folder = write_pack(args.folder or ".", args.id, builds_on=args.builds_on or (),
                        device=args.device, energised=args.energised,
                        search=getattr(args, "packs", None),
                        journal=getattr(args, "journal", None))
    files = sorted(folder.iterdir())
    todo = sum(line.count("TODO") for f in files
               for line in f.read_text(encoding="utf-8").splitlines()
               if not line.lstrip().startswith("#"))
    ref = args.id if args.folder is None else str(folder)
    say(f"wrote pack {args.id} to {folder}{os.sep} ({len(files)} files); write the {todo} "
        f"texts that say TODO, then run `diagnose kb lint {ref}` and `diagnose kb test {ref}`")
    return 0
