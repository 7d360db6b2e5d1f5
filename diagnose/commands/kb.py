"""`diagnose kb ...`: the trainer's commands (lint, show, graph, schema, test, list, cache,
analyze, new)."""

from __future__ import annotations

import argparse
import json
import sys
from typing import Any

from diagnose.commands import add_output_arguments, output_options, write_output
from diagnose.text import clean, json_text, say


def register(sub: Any) -> None:
    kb = sub.add_parser("kb", help="work on knowledge packs (lint, show, graph, schema, test, ...)",
                        description="Commands for trainers who write and maintain knowledge packs.")
    ks = kb.add_subparsers(dest="kb_command", metavar="KB_COMMAND", required=True)

    p = ks.add_parser("lint", help="check packs for errors; exit 1 on errors",
                      description="Check packs: schema, references, fault tree, effects, units. "
                      "Exit 0 when clean, 1 on errors (and on warnings with --strict).")
    p.add_argument("packs_", nargs="+", metavar="PACK", help="pack id or folder")
    p.add_argument("--strict", action="store_true", help="warnings fail too")
    p.add_argument("--analysis", action="store_true",
                   help="add warnings from the knowledge analysis (ambiguity groups, causes no "
                   "check detects)")
    p.set_defaults(handler=_lint)

    p = ks.add_parser("show", help="summary of a pack and its fault trees")
    p.add_argument("pack", metavar="PACK")
    p.add_argument("--json", action="store_true", help="one JSON object with the counts and ids")
    p.set_defaults(handler=_show)

    p = ks.add_parser("graph", help="export the compiled graph")
    p.add_argument("pack", metavar="PACK")
    p.add_argument("--format", choices=("dot", "mermaid", "graphml", "json"), default="dot")
    add_output_arguments(p)
    p.set_defaults(handler=_graph)

    p = ks.add_parser("schema", help="print the JSON Schema of pack files (for your editor)")
    add_output_arguments(p)
    p.set_defaults(handler=_schema)

    p = ks.add_parser("test", help="run the knowledge test cases stored in a pack")
    p.add_argument("pack", metavar="PACK")
    p.add_argument("--json", action="store_true")
    p.set_defaults(handler=_test)

    p = ks.add_parser("list", help="the packs on the search path")
    p.set_defaults(handler=_list)

    p = ks.add_parser("cache", help="the compiled-pack cache: where it is, how large; clear",
                      description="Packs are kept compiled in the user's cache folder, so that "
                      "they load at once; an entry is used only while the pack's files, the "
                      "packs it builds on, the learned priors and the program are as they were. "
                      "With no action: the folder, its entries and their size.")
    p.add_argument("action", nargs="?", choices=("clear",), help="clear: remove every entry")
    p.set_defaults(handler=_cache)

    from diagnose.commands import kb_quality

    kb_quality.add_analyze_parser(ks)
    kb_quality.add_new_parser(ks)


def _console() -> Any:
    """The console of `kb show` and `kb test`: lines never wrapped in a file or a pipe."""
    from diagnose.text import console

    return console(lines=True)


def load(args: argparse.Namespace, ref: str) -> Any:
    """Pack ``ref`` as the command line asks (search folders, learned priors): the service's."""
    from diagnose.service import Where, open_pack

    return open_pack(ref, Where.of(args))


def _lint(args: argparse.Namespace) -> int:
    from diagnose.kb.lint import lint_paths

    extra = None
    if args.analysis:
        from diagnose.reasoning.testability import analysis_problems

        extra = analysis_problems
    results = lint_paths(args.packs_, search=args.packs, extra=extra)
    out = sys.stdout
    failed = False
    for res in results:
        for prob in res.problems:
            say(prob, file=out)
        verdict = "ok" if res.ok(args.strict) else "FAILED"
        say(f"{res.ref}: {len(res.errors)} error(s), {len(res.warnings)} warning(s): {verdict}",
            file=out)
        failed |= not res.ok(args.strict)
    return 1 if failed else 0


def summary(model: Any) -> dict[str, Any]:
    """The numbers and ids of a pack, as `kb show --json` prints them."""
    measurements = [c for c in model.checks.values() if c.measurement]
    return {
        "pack": model.id, "title": model.title, "version": model.version,
        "builds_on": list(model.packs[:-1]), "content_hash": model.content_hash,
        "path": model.path,
        "complaints": len(model.complaints), "causes": len(model.causes),
        "checks": len(model.checks), "measurements": len(measurements),
        "repairs": len(model.repairs), "cautions": len(model.cautions),
        "parameters": len(model.parameters), "events": len(model.events),
        "tests": len(model.cases),
        "phone_checks": sum(1 for c in model.checks.values() if c.where == "phone"),
        "complaint_ids": list(model.complaints), "cause_ids": list(model.causes),
        "check_ids": list(model.checks), "repair_ids": list(model.repairs),
    }


def _show(args: argparse.Namespace) -> int:
    model = load(args, args.pack)
    data = summary(model)
    from diagnose.service import Where, learned_overlay

    learned = learned_overlay(model.id, Where.of(args))
    data["learned_priors"] = str(learned.path) if learned else None
    if args.json:
        print(json_text(data, indent=2))
        return 0
    from rich.table import Table
    from rich.text import Text
    from rich.tree import Tree

    con = _console()
    con.print(Text.assemble((clean(model.title), "bold"),
                            f" ({clean(model.id)} {clean(model.version)}, "
                            f"hash {model.content_hash})"))
    if len(model.packs) > 1:
        con.print(f"builds on: {', '.join(model.packs[:-1])}")
    if learned:
        con.print(Text.assemble(("learned priors in use:", "yellow"),
                                f" {clean(learned.path)} ({learned.sessions} closed session(s)); "
                                "--no-learned ignores them"))
    t = Table(show_header=False, box=None)
    for key in ("complaints", "causes", "checks", "measurements", "repairs", "cautions",
                "parameters", "tests"):
        t.add_row(key, str(data[key]))
    con.print(t)
    for comp in model.complaints.values():
        tree = Tree(_label(comp.title, f"{comp.id} ({comp.gate.kind})", "bold"))
        _grow(tree, comp.gate, model)
        con.print(tree)
    return 0


def _grow(tree: Any, gate: Any, model: Any) -> None:
    for x in gate.inputs:
        if x in model.causes:
            c = model.causes[x]
            tree.add(_label(c.title, f"{c.id}, prior {c.prior:g}"))
        elif x in model.events:
            ev = model.events[x]
            label = ev.kind if ev.kind != "k_of_n" else f"{ev.k} of {len(ev.inputs)}"
            _grow(tree.add(_label(ev.title, f"{ev.id} ({label})")), ev, model)


def _label(title: str, detail: str, style: str = "") -> Any:
    """A tree line: the title (in ``style``) and the ids after it, dimmed; never read as markup."""
    from rich.text import Text

    return Text.assemble((clean(title), style), " ", (clean(detail), "dim"))


def _graph(args: argparse.Namespace) -> int:
    from diagnose.kb.compiler import build_graph
    from diagnose.kb.export import export

    model = load(args, args.pack)
    write_output(export(build_graph(model), args.format), args.output, **output_options(args))
    return 0


def _schema(args: argparse.Namespace) -> int:
    from diagnose.kb.schema import pack_schema

    write_output(json.dumps(pack_schema(), indent=2) + "\n", args.output, **output_options(args))
    return 0


def _test(args: argparse.Namespace) -> int:
    from diagnose.commands.progress import progress_bar
    from diagnose.service.cases import run_case

    model = load(args, args.pack)
    cases = list(model.cases.values())
    results = []
    with progress_bar("testing", json=args.json) as progress:
        for case in cases:  # as run_cases does, one case at a time for the bar
            results.append(run_case(model, case))
            if progress is not None:
                progress(len(results), len(cases))
    if args.json:
        print(json_text([r.to_dict() for r in results], indent=2))
    else:
        from diagnose.views import CaseResultView

        con = _console()
        for r in results:
            con.print(CaseResultView(r))
        passed = sum(1 for r in results if r.passed)
        con.print(f"{model.id}: {passed} of {len(results)} case(s) passed")
    if not results:
        say(f"diagnose: pack {model.id} has no test cases", file=sys.stderr)
        return 1
    return 0 if all(r.passed for r in results) else 1


def _list(args: argparse.Namespace) -> int:
    import sys

    from diagnose.kb.locate import scan

    packs, problems = scan(args.packs)
    for pid, folder in packs.items():
        say(f"{pid}\t{folder}")
    for problem in problems:  # one line per broken manifest; the others are listed
        say(f"diagnose: {problem}", file=sys.stderr)
    return 0


def _cache(args: argparse.Namespace) -> int:
    from diagnose.kb import cache

    if args.action == "clear":
        done = cache.clear()
        if done.why:
            say(f"diagnose: the compiled-pack cache is not used: {done.why}", file=sys.stderr)
            return 0
        say(f"removed {done.entries} compiled pack(s), {_size(done.bytes)}, from {done.folder}")
        return 0
    found = cache.info()
    say(f"folder: {found.folder if found.folder is not None else 'none'}")
    if found.why and found.folder is not None and found.folder.exists():
        say(f"not used: {found.why}")
    say(f"entries: {found.entries}")
    say(f"size: {_size(found.bytes)}")
    return 0


def _size(n: int) -> str:
    """Bytes as people read them.

    >>> _size(0), _size(2048), _size(5_300_000)
    ('0 bytes', '2.0 kB', '5.3 MB')
    """
    if n < 1000:
        return f"{n} bytes"
    if n < 1_000_000:
        return f"{n / 1000:.1f} kB"
    return f"{n / 1_000_000:.1f} MB"
