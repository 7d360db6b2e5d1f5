"""`diagnose run PACK --answers FILE`: a scripted session, recorded in the journal.

A scripted run is one more face of the session API: it records to the
journal through the same functions as the shell
(:func:`diagnose.journal.recorder.start_session` and ``resume_session``), so
each event is committed before the next step is applied, the session is
listed by `diagnose sessions`, survives a kill, and has a repair log.
`diagnose run --resume ID [--answers FILE]` continues a session of the
journal (started here or in the shell). The whole answers file is first
played in memory: a file with a bad step writes nothing. ``--no-journal``
is a dry run that writes nothing at all.
"""

from __future__ import annotations

import argparse
from collections.abc import Callable
from pathlib import Path
from typing import Any

from diagnose.text import storable

#: The keys an answers file may hold.
ANSWER_KEYS = frozenset({"nameplate", "complaints", "steps", "mode", "max_faults", "identity",
                         "title", "notes", "attach", "end"})


def register(sub: Any) -> None:
    p = sub.add_parser(
        "run", help="a scripted session from an answers file, recorded in the journal",
        description="Play a scripted session: the answers file (YAML or JSON) holds "
        "`nameplate` (parameter: value), `complaints` (a list) and `steps`, each "
        "{check: id, answer: value} (an outcome, a reading with unit, a list of readings, "
        "or unsure), {check: id, skip: true}, {repair: id, cured: true|false} or "
        "{repair: id, skip: true} (it cannot be done now); optional "
        "`identity`, `notes`, `attach` (photos or files: paths from the answers file's folder, "
        "or {file: PATH, caption: TEXT}) and `end` (resolved, visit, escalated or abandoned). "
        "Shows the "
        "ranking and the proposed next action after each step. The session is recorded in "
        "the journal as it goes (see `diagnose sessions`) and closed at a cure or at `end`; "
        "--resume ID continues a session of the journal.")
    p.add_argument("pack", metavar="PACK", nargs="?",
                   help="pack id or folder (with --resume: only for a pack given by its folder)")
    p.add_argument("--answers", metavar="FILE",
                   help="the scripted session (needed unless --resume)")
    p.add_argument("--resume", metavar="ID",
                   help="continue the open session ID: replay its events from the journal, then "
                   "apply FILE (its nameplate values and complaints already there are skipped); "
                   "without --answers, show where it stands")
    p.add_argument("--who", metavar="NAME", type=storable,
                   help="who does the steps, for the repair log (default: the settings file's "
                   "technician)")
    p.add_argument("--take-over", action="store_true",
                   help="with --resume: take the session even while another holder (another "
                   "machine or program) holds it and wrote within the lease (see `diagnose "
                   "resume`)")
    p.add_argument("--no-journal", action="store_true",
                   help="a dry run: show the steps but write nothing to the journal")
    p.add_argument("--json", action="store_true", help="one JSON object instead of text")
    p.add_argument("--max-faults", type=int, choices=(1, 2), default=None,
                   help="1: one cause at a time (default); 2: up to two causes at once")
    p.add_argument("--mode", choices=("site", "phone"), default=None,
                   help="site or phone: only checks a caller can do (default: the file's mode, "
                   "else the settings file's, else site)")
    p.set_defaults(handler=_run)


def read_answers(path: str) -> dict[str, Any]:
    """The answers file as data (YAML 1.2 booleans; JSON is read as YAML).

    The file is read within the bounds of :mod:`diagnose.kb.yamlpos`: at most
    :data:`~diagnose.kb.yamlpos.ANSWERS_FILE_BYTES`, no anchors or aliases,
    limited nesting and integer length.

    Raises:
        InputError: unreadable, too large, not YAML, or not a mapping with the known keys.
    """
    from diagnose.errors import InputError
    from diagnose.kb.yamlpos import ANSWERS_FILE_BYTES, read_text, read_yaml
    from diagnose.physics.units import excerpt
    from diagnose.session import END_RESULTS

    try:
        text = read_text(Path(path), ANSWERS_FILE_BYTES)
    except (OSError, UnicodeDecodeError) as exc:
        reason = getattr(exc, "strerror", None) or exc
        raise InputError("answers", f"cannot read {path}: {reason}") from None
    doc, problems = read_yaml(text, path)
    errors = [p for p in problems if p.level == "error"]
    if doc is None or errors:
        raise InputError("answers", str(errors[0]) if errors else f"{path} is empty")
    data = doc.data
    if not data and not text.strip():
        raise InputError("answers", f"{path} is empty")
    if not isinstance(data, dict):
        raise InputError("answers", f"{path}: expected a mapping with nameplate, complaints, steps")
    extra = set(data) - ANSWER_KEYS
    if extra:
        raise InputError("answers", f"{path}: unknown key {excerpt(min(extra, key=str))}")
    for key, kind in (("nameplate", dict), ("complaints", list), ("steps", list),
                      ("identity", dict), ("notes", list)):
        if key in data and not isinstance(data[key], kind):
            raise InputError("answers", f"{path}: `{key}` must be a {kind.__name__}")
    if "end" in data and data["end"] not in END_RESULTS:
        raise InputError("answers", f"{path}: `end` must be one of {', '.join(END_RESULTS)}, "
                                    f"not {excerpt(data['end'])}")
    if "attach" in data:
        data["attach"] = _attachments(data["attach"], path)
    return data


def _attachments(items: Any, path: str) -> list[dict[str, str]]:
    """The ``attach`` list of an answers file: ``PATH`` or ``{file: PATH, caption: TEXT}``,
    each path taken from the answers file's folder.

    Raises:
        InputError: not a list of those.
    """
    from diagnose.errors import InputError

    if not isinstance(items, list):
        raise InputError("answers", f"{path}: `attach` must be a list of files")
    out = []
    for item in items:
        entry = item if isinstance(item, dict) else {"file": item}
        if not isinstance(entry.get("file"), str) or set(entry) - {"file", "caption"}:
            raise InputError("answers", f"{path}: each `attach` entry is a path, or `file:` "
                                        "with an optional `caption:`")
        out.append({"file": str(Path(path).parent / Path(entry["file"]).expanduser()),
                    "caption": str(entry.get("caption") or "")})
    return out


def _step_text(step: Any) -> str:
    if not isinstance(step, dict):
        return str(step)
    if "repair" in step:
        done = "skipped" if step.get("skip") else "cured" if step.get("cured") else "not cured"
        return f"repair {step['repair']}: {done}"
    if step.get("skip"):
        return f"{step.get('check')}: skipped"
    return f"{step.get('check')}: {step.get('answer')}"


def _plain(value: Any) -> str:
    """An identity value as the session stores it ("yes"/"no" for booleans)."""
    if isinstance(value, bool):
        return "yes" if value else "no"
    return str(value).strip()


# --- playing the answers file ---------------------------------------------------------------


def play(session: Any, data: dict[str, Any], *,
         on_step: Callable[[int, Any, Any], None] | None = None,
         on_ready: Callable[[], None] | None = None, units: str = "metric",
         journal: str | None = None) -> None:
    """Apply an answers file to ``session``: identity, nameplate, complaints, steps, notes, end.

    What the session holds already (an identity fact, a nameplate value, a
    complaint or a note with the same value) is skipped, so that the file a
    session started with can be given again to continue it. A different
    nameplate value is recorded as a change. At the end the session is closed
    with the file's ``end`` result, or as the shell closes it when a repair
    cured the unit. ``on_ready()`` is called once the nameplate and complaints are
    in, before the first step; ``on_step(n, step, result)`` after each step.
    ``units``: the technician's preferred units; under "inch" a bare number
    read for a length in mm is taken in inches (:func:`preferred_step`).

    Raises:
        InputError: a value or step the pack or the physics refuses; its field
            names the step (``step 3``) for a step.
    """
    from diagnose.errors import DiagnoseError, InputError
    from diagnose.session import normalise_parameter

    mode = data.get("mode")
    if mode is not None and str(mode) != session.mode:
        session.set_mode(str(mode))
    ev = session.evidence
    identity = {str(k): v for k, v in (data.get("identity") or {}).items()
                if ev.identity.get(str(k)) != _plain(v)}
    if identity:
        session.set_identity(**identity)
    for param, value in (data.get("nameplate") or {}).items():
        known = session.model.parameters.get(str(param))
        held = session.evidence.nameplate.get(str(param))
        if known is not None and held is not None and normalise_parameter(known, value) == held:
            continue
        session.set_nameplate(str(param), value)
    for k in data.get("complaints") or []:
        if str(k) not in session.evidence.complaints:
            session.add_complaint(str(k))
    if on_ready is not None:
        on_ready()
    for i, step in enumerate(data.get("steps") or [], 1):
        try:
            result = session.apply_step(preferred_step(session.model, step, units))
        except DiagnoseError as exc:
            field = getattr(exc, "field", "")
            raise InputError(f"step {i}", f"{field + ': ' if field else ''}"
                                          f"{getattr(exc, 'message', exc)}") from None
        if on_step is not None:
            on_step(i, step, result)
    for note in data.get("notes") or []:
        if str(note).strip() not in session.evidence.notes:
            session.note(str(note))
    _attach(session, data.get("attach") or [], journal)
    if session.ended:
        return
    if data.get("end"):
        result = str(data["end"])
        parts: tuple[str, ...] = ()
        if result == "visit":  # the parts the planner would have a technician bring
            try:
                parts = tuple(session.next_action().parts)
            except Exception:  # noqa: BLE001 (no plan: the visit is recorded without parts)
                parts = ()
        session.end(result, parts=parts)
    elif session.evidence.cured:  # as the shell does: a cure closes the diagnosis
        session.end()


def _attach(session: Any, items: list[dict[str, str]], journal: str | None) -> None:
    """The files of an answers file: stored and recorded with a journal, else only checked.

    A file attached already with the same caption (a file given again to go on)
    is not attached twice.
    """
    from diagnose.journal.attachments import check
    from diagnose.service.attach import attach

    done = {(e.sha256, e.caption) for e in session.events if e.kind == "attachment"}
    for item in items:
        kept = check(item["file"])
        if journal and (kept.sha256, item["caption"]) not in done and not session.ended:
            attach(session, journal, item["file"], item["caption"])


def preferred_step(model: Any, step: Any, units: str) -> Any:
    """``step`` with its reading in the preferred units (a bare length in inches under "inch").

    Only ``{check: id, answer: reading}`` of a measurement changes; the
    reading the journal records then carries its unit.
    """
    if units == "metric" or not isinstance(step, dict) or "answer" not in step:
        return step
    check = model.checks.get(str(step.get("check")))
    if check is None:
        return step  # the session says what is wrong with it
    from diagnose.service import preferred_answer

    return {**step, "answer": preferred_answer(check, step["answer"], units)}


def _options(args: argparse.Namespace, data: dict[str, Any]) -> tuple[str | None, int | None]:
    """The mode and number of faults asked for (option first, then the file), or None."""
    from diagnose.errors import InputError

    mode = args.mode or data.get("mode")
    faults = args.max_faults or data.get("max_faults")
    if faults is not None and faults not in (1, 2):
        raise InputError("max_faults", f"expected 1 or 2, got {faults!r}")
    return (str(mode) if mode is not None else None), faults


# --- showing what happens ------------------------------------------------------------------


class _View:
    """What a run shows: rich text after each step, or one JSON object at the end."""

    def __init__(self, session: Any, as_json: bool, units: str = "metric") -> None:
        self.session = session
        self.units = units
        self.steps: list[dict[str, Any]] = []
        self.console: Any = None
        if not as_json:
            from diagnose.text import console

            probe = console()
            self.console = probe if probe.is_terminal else console(width=80)

    def snapshot(self, shown: int | None = 5) -> dict[str, Any]:
        s = self.session
        ranking = s.ranking()
        out = {"ranking": ranking.to_list()[:shown] if shown else ranking.to_list(),
               "next": s.next_action().to_dict()}
        if ranking.hypotheses:
            out["hypotheses"] = [{"hypothesis": h.cause, "p": round(h.p, 6)}
                                 for h in ranking.hypotheses[:5]]
        return out

    def say(self, text: str, style: str | None = None) -> None:
        if self.console is not None:
            self.console.print(text, style=style, markup=False, highlight=False)

    def start(self, *, resumed: bool, journal: str | None) -> None:
        s = self.session
        if self.console is None:
            return
        model = s.model
        where = (f"recorded in the journal {journal}" if journal else
                 "a dry run (--no-journal): nothing is written to the journal")
        from rich.text import Text

        from diagnose.text import clean

        self.console.print(Text.assemble((clean(model.title), "bold"),
                                         f" ({clean(model.id)} {clean(model.version)}), "
                                         f"{s.mode}, up to {s.max_faults} fault(s)"))
        if resumed:
            self.say(f"Resuming session {s.session_id} ({_steps_so_far(s)} step(s) so far), "
                     f"{where}.", style="bold")
            from diagnose.service import session_note

            note = session_note(s)
            if note:
                self.say(f"Note: {note}.", style="yellow")
        else:
            if model.notice:
                self.say(model.notice, style="dim")
            self.say(f"Session {s.session_id}, {where}." if journal else
                     f"{where[0].upper()}{where[1:]}.", style="bold")

    def ready(self) -> None:
        """The ranking and the next action once the nameplate and complaints are in."""
        if self.console is not None:
            from diagnose.views_reasoning import ActionView

            self.console.rule("the complaint", align="left")
            self.console.print(_ranking_view(self.session))
            self.console.print(ActionView(self.session.next_action()))

    def step(self, i: int, step: Any, result: Any) -> None:
        from diagnose.session import Event, Finding

        entry: dict[str, Any] = {"step": step}
        if isinstance(result, Finding):
            entry["finding"] = result.to_dict()
        elif isinstance(result, Event):
            entry["event"] = result.to_dict()["data"] | {"kind": result.kind}
        entry.update(self.snapshot())
        self.steps.append(entry)
        if self.console is not None:
            from diagnose.views_reasoning import ActionView

            self.console.rule(f"step {i}: {_step_text(step)}", align="left")
            if isinstance(result, Finding):
                from diagnose.views import FindingView

                self.console.print(FindingView(result, self.units))
                if result.assumed:
                    from diagnose.session import assumed_note

                    s = self.session
                    defaults = {k: p.default for k, p in s.model.parameters.items()}
                    self.say(f"  {assumed_note(s.evidence, result.assumed, defaults)}")
            self.console.print(_ranking_view(self.session))
            self.console.print(ActionView(self.session.next_action()))

    def finish(self, *, recorded: bool, resumed: bool, journal: str | None) -> None:
        s = self.session
        end = dict(s.evidence.end) if s.ended else None
        sid = s.session_id if recorded else None
        if self.console is None:
            model = s.model
            out = {"session": sid, "journal": journal, "resumed": resumed,
                   "status": "closed" if end else "open", "end": end, "pack": model.id,
                   "version": model.version, "mode": s.mode, "max_faults": s.max_faults,
                   "pack_changed": s.pack_changed, **self.snapshot(None), "steps": self.steps}
            from diagnose.text import json_text

            print(json_text(out, indent=2))
            return
        if not recorded:
            self.say("A dry run (--no-journal): nothing was written to the journal.",
                     style="bold")
        elif end:
            self.say(f"Session {sid} is closed ({end.get('result')}); its repair log: "
                     f"diagnose report {sid}", style="bold")
        else:
            self.say(f"Session {sid} is open; continue it with: diagnose run --resume {sid} "
                     f"--answers FILE (or in the shell: diagnose resume {sid})", style="bold")


def _ranking_view(session: Any) -> Any:
    from diagnose.views import RankingView

    return RankingView.of(session.ranking(limit=RankingView.entries_for()))


def _steps_so_far(session: Any) -> int:
    from diagnose.events import steps_taken

    return steps_taken(session.events)


# --- the command ---------------------------------------------------------------------------


def _run(args: argparse.Namespace) -> int:
    from diagnose.errors import InputError

    if args.resume is None:
        if not args.pack:
            raise InputError("PACK", "name the pack (id or folder), or give --resume ID")
        if not args.answers:
            raise InputError("--answers", "the answers file is needed (or --resume ID to "
                                          "continue a session of the journal)")
    data = read_answers(args.answers) if args.answers else {}
    if args.resume is not None:
        return _resume(args, data)
    return _start(args, data)


def _start(args: argparse.Namespace, data: dict[str, Any]) -> int:
    from diagnose.service import Where, journal_label, open_journal, open_pack, preferences, start

    where = Where.of(args)
    prefs = preferences(args)
    model = open_pack(args.pack, where)
    mode, faults = _options(args, data)
    mode, faults = mode or prefs.mode, faults or 1
    if "mode" in data:
        data = {**data, "mode": mode}  # the --mode option wins over the file's
    if args.no_journal:
        session = start(None, model, where, mode=mode, max_faults=faults)
        return _play(args, session, data, recorded=False, resumed=False, journal=None,
                     units=prefs.units)
    # a bad step: nothing is written
    play(start(None, model, where, mode=mode, max_faults=faults), data, units=prefs.units)
    with open_journal(where) as journal:
        session = start(journal, model, where, mode=mode, max_faults=faults,
                        who=args.who or prefs.technician)
        try:
            return _play(args, session, data, recorded=True, resumed=False,
                         journal=journal_label(where), units=prefs.units)
        except Exception as exc:
            _close_stopped(session, exc)
            raise


def _close_stopped(session: Any, exc: BaseException) -> None:
    """Close a session this run started when the run fails part-way (no orphan open session).

    The answers file was played in memory first, so such a failure is not the
    file's: the output, the journal or a bug. The session is closed as
    abandoned with the reason; when even that cannot be written, it stays open
    and ``diagnose sessions`` lists it.
    """
    from diagnose.text import excerpt

    if session.ended:
        return
    try:
        session.end("abandoned", text=f"the scripted run stopped: {type(exc).__name__}: "
                                      f"{excerpt(exc, 120)}")
    except Exception:  # noqa: BLE001 (the first failure is the one to report)
        pass


def _resume(args: argparse.Namespace, data: dict[str, Any]) -> int:
    from diagnose.errors import InputError
    from diagnose.journal.recorder import ensure_open
    from diagnose.service import (
        Where,
        journal_label,
        need_journal,
        open_journal,
        preferences,
        recorded_events,
        recorded_pack,
    )
    from diagnose.session import Session

    where = Where.of(args)
    units = preferences(args).units
    sid = args.resume
    with need_journal(where) as reader:
        info = reader.session(sid)  # the short id, the UUID or a prefix of it
        sid = info.id
        ensure_open(info)
        events = recorded_events(reader, sid)
    choice = recorded_pack(info, events, where, args.pack)
    old = Session.replay(choice.model, events)  # in memory: checks the pack and the answers
    mode, faults = _options(args, data)
    if faults is not None and faults != old.max_faults:
        raise InputError("max_faults", f"session {sid} ranks up to {old.max_faults} "
                         "fault(s) at once; that cannot change")
    if mode is not None:
        data = {**data, "mode": mode}
    if data:
        play(old, data, units=units)
    if args.no_journal:
        session = Session.replay(choice.model, events)
        return _play(args, session, data, recorded=False, resumed=True, journal=None,
                     units=units)
    from diagnose.service import resume
    from diagnose.service.holding import handover_line
    from diagnose.text import say

    with open_journal(where) as journal:
        resumed = resume(journal, sid, where, args.pack, choice=choice, who=args.who,
                         take_over=args.take_over)
        if resumed.handover is not None and not args.json:
            say(handover_line(sid, resumed.handover))
        session = resumed.session
        return _play(args, session, data, recorded=True, resumed=True,
                     journal=journal_label(where), units=units)


def _play(args: argparse.Namespace, session: Any, data: dict[str, Any], *, recorded: bool,
          resumed: bool, journal: str | None, units: str = "metric") -> int:
    """Show the start, apply the answers file step by step, show the end."""
    view = _View(session, args.json, units)
    view.start(resumed=resumed, journal=journal if recorded else None)
    if data:
        play(session, data, on_step=view.step, on_ready=view.ready, units=units,
             journal=journal if recorded else None)
    else:
        view.ready()
    view.finish(recorded=recorded, resumed=resumed, journal=journal)
    return 0
