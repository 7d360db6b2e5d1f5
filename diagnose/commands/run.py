"""`diagnose run PACK --answers FILE`: replay a scripted session and show each step."""

from __future__ import annotations

import argparse
import json
from pathlib import Path
from typing import Any


def register(sub: Any) -> None:
    p = sub.add_parser(
        "run", help="replay a scripted session from an answers file",
        description="Replay a scripted session: the answers file (YAML or JSON) holds "
        "`nameplate` (parameter: value), `complaints` (a list) and `steps`, each "
        "{check: id, answer: value} (an outcome, a reading with unit, a list of readings, "
        "or unsure), {check: id, skip: true} or {repair: id, cured: true|false}. Shows the "
        "ranking and the proposed next action after each step.")
    p.add_argument("pack", metavar="PACK", help="pack id or folder")
    p.add_argument("--answers", metavar="FILE", required=True, help="the scripted session")
    p.add_argument("--json", action="store_true", help="one JSON object instead of text")
    p.add_argument("--max-faults", type=int, choices=(1, 2), default=None,
                   help="1: one cause at a time (default); 2: up to two causes at once")
    p.add_argument("--mode", choices=("site", "phone"), default=None,
                   help="site (default) or phone: only checks a caller can do")
    p.set_defaults(handler=_run)


def read_answers(path: str) -> dict[str, Any]:
    """The answers file as data (YAML 1.2 booleans; JSON is read as YAML).

    Raises:
        InputError: unreadable, not YAML, or not a mapping with the known keys.
    """
    from diagnose.errors import InputError
    from diagnose.kb.yamlpos import read_yaml

    try:
        text = Path(path).read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        reason = getattr(exc, "strerror", None) or exc
        raise InputError("answers", f"cannot read {path}: {reason}") from None
    doc, problems = read_yaml(text, path)
    errors = [p for p in problems if p.level == "error"]
    if doc is None or errors:
        raise InputError("answers", str(errors[0]) if errors else f"{path} is empty")
    data = doc.data
    if not isinstance(data, dict):
        raise InputError("answers", f"{path}: expected a mapping with nameplate, complaints, steps")
    extra = set(data) - {"nameplate", "complaints", "steps", "mode", "max_faults", "identity",
                         "title", "notes"}
    if extra:
        raise InputError("answers", f"{path}: unknown key {min(extra)!r}")
    for key, kind in (("nameplate", dict), ("complaints", list), ("steps", list),
                      ("identity", dict), ("notes", list)):
        if key in data and not isinstance(data[key], kind):
            raise InputError("answers", f"{path}: `{key}` must be a {kind.__name__}")
    return data


def _step_text(step: Any) -> str:
    if not isinstance(step, dict):
        return str(step)
    if "repair" in step:
        return f"repair {step['repair']}: {'cured' if step.get('cured') else 'not cured'}"
    if step.get("skip"):
        return f"{step.get('check')}: skipped"
    return f"{step.get('check')}: {step.get('answer')}"


def _run(args: argparse.Namespace) -> int:
    from diagnose.commands.kb import load
    from diagnose.errors import DiagnoseError, InputError
    from diagnose.session import Event, Finding, Session

    data = read_answers(args.answers)
    model = load(args, args.pack)
    mode = args.mode or str(data.get("mode", "site"))
    max_faults = args.max_faults or int(data.get("max_faults", 1))
    session = Session(model, mode=mode, max_faults=max_faults)
    if data.get("identity"):
        session.set_identity(**data["identity"])
    for param, value in (data.get("nameplate") or {}).items():
        session.set_nameplate(str(param), value)
    for k in data.get("complaints") or []:
        session.add_complaint(str(k))

    def snapshot(shown: int | None = 5) -> dict[str, Any]:
        ranking = session.ranking()
        out = {"ranking": ranking.to_list()[:shown] if shown else ranking.to_list(),
               "next": session.next_action().to_dict()}
        if ranking.hypotheses:
            out["hypotheses"] = [{"hypothesis": h.cause, "p": round(h.p, 6)}
                                 for h in ranking.hypotheses[:5]]
        return out

    console = None
    if not args.json:
        from rich.console import Console

        console = Console(width=80) if not Console().is_terminal else Console()
        console.print(f"[bold]{model.title}[/bold] ({model.id} {model.version}), "
                      f"{mode}, up to {max_faults} fault(s)")
        if model.notice:
            console.print(model.notice, style="dim")
        console.print(session.ranking())
        console.print(session.next_action())
    steps_out = []
    for i, step in enumerate(data.get("steps") or [], 1):
        try:
            result = session.apply_step(step)
        except DiagnoseError as exc:
            field = getattr(exc, "field", "")
            raise InputError(f"step {i}", f"{field + ': ' if field else ''}"
                                          f"{getattr(exc, 'message', exc)}") from None
        entry: dict[str, Any] = {"step": step}
        if isinstance(result, Finding):
            entry["finding"] = result.to_dict()
        elif isinstance(result, Event):
            entry["event"] = result.to_dict()["data"] | {"kind": result.kind}
        entry.update(snapshot())
        steps_out.append(entry)
        if console is not None:
            console.rule(f"step {i}: {_step_text(step)}", align="left")
            if isinstance(result, Finding):
                console.print(result)
            console.print(session.ranking())
            console.print(session.next_action())
    for note in data.get("notes") or []:
        session.note(str(note))
    if args.json:
        out = {"pack": model.id, "version": model.version, "mode": mode,
               "max_faults": max_faults, **snapshot(None), "steps": steps_out}
        print(json.dumps(out, indent=2, ensure_ascii=False))
    return 0
