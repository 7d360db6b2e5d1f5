"""The shell's commands: a registry of name -> function; the docstring is the help.

Every command takes the running shell and the rest of the line, and does its
work here, through the shell's public methods and attributes (``session``,
``model``, ``console``, ``say``, ``pick``...) and the session API; adding a
command touches this file only, its completion too (``choices``). A command
that cannot do what was asked raises ``InputError``; the shell shows its
message in one line and asks the same question again. A command that changes
the state under the question calls ``shell.restart()`` (or
``shell.show_again()``), and the turn starts anew.

At any question where the shell waits for an answer, a line whose first word
is a command name runs that command instead.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from diagnose.errors import InputError
from diagnose.physics.verdict import unit_text
from diagnose.views import HelpView

if TYPE_CHECKING:
    from diagnose.shell.app import Shell
    from diagnose.shell.complete import Choice

Handler = Callable[["Shell", str], Any]
#: What the argument of a command can be now: (text, meaning) pairs, for completion.
Choices = Callable[["Shell"], Sequence["Choice"]]


@dataclass(frozen=True)
class Command:
    """A shell command: its name, how it is typed, and its function (docstring = help).

    ``choices``, when given, says what its argument can be now (Tab completes it).
    """

    name: str
    usage: str
    func: Handler
    choices: Choices | None = None

    @property
    def help(self) -> str:
        """The first paragraph of the function's docstring, on one line."""
        doc = (self.func.__doc__ or "").strip()
        return " ".join(doc.split("\n\n")[0].split())

    @property
    def details(self) -> tuple[str, ...]:
        """The docstring's further paragraphs, each on one line (what `help NAME` adds)."""
        doc = (self.func.__doc__ or "").strip()
        return tuple(" ".join(p.split()) for p in doc.split("\n\n")[1:] if p.strip())

    def __call__(self, shell: Shell, arg: str) -> Any:
        return self.func(shell, arg)


COMMANDS: dict[str, Command] = {}


def command(usage: str, *, choices: Choices | None = None) -> Callable[[Handler], Handler]:
    """Register the decorated function as the command named by the first word of ``usage``.

    ``choices(shell)``: what its argument can be now, for completion.
    """

    def wrap(func: Handler) -> Handler:
        name = usage.split()[0]
        COMMANDS[name] = Command(name, usage, func, choices)
        return func

    return wrap


def find(word: str) -> Command | None:
    """The command named ``word`` (case-insensitive), or None."""
    return COMMANDS.get(word.strip().lower())


def command_choices() -> tuple[Choice, ...]:
    """Every command as (name, help), for completion."""
    return tuple((c.name, c.help) for c in COMMANDS.values())


def argument_choices(shell: Shell) -> dict[str, tuple[Choice, ...]]:
    """What the argument of each command that takes one can be now: name -> choices."""
    return {c.name: tuple(c.choices(shell)) for c in COMMANDS.values() if c.choices is not None}


def _need(arg: str, what: str, usage: str) -> str:
    if not arg.strip():
        raise InputError(what, f"missing; type: {usage}")
    return arg.strip()


@command("help [COMMAND]", choices=lambda shell: command_choices())
def help_(shell: Shell, arg: str) -> None:
    """Show the commands and how to answer, or the help of one command."""
    topic = arg.strip()
    if topic:
        cmd = find(topic)
        if cmd is None:
            raise InputError("help", f"no command {topic!r}; commands: {', '.join(COMMANDS)}")
        shell.console.print(HelpView(((cmd.usage, cmd.help),), cmd.details))
        return
    rows = tuple((c.usage, c.help) for c in COMMANDS.values())
    shell.console.print(HelpView(rows, (
        ("To answer a check: type an outcome (or its number), a reading with its unit "
         "(3.2 ohm, 23.5V, OL), unsure, or skip. Tab completes; Ctrl-C clears the line; "
         "Ctrl-D asks whether to save and leave."),
        "At a check or repair, more shows the whole card (a long one is cut short).")))


def _check_choices(shell: Shell) -> list[Choice]:
    """Every check: `why` and `do` take any by name (`do` then says why it cannot be done)."""
    return [(c.id, c.title) for c in shell.model.checks.values()]


def _checks_offered(shell: Shell) -> tuple[Choice, ...]:
    """The checks to complete: by phone, only those safe for a caller."""
    phone = shell.session.mode == "phone"
    return tuple((c.id, c.title) for c in shell.model.checks.values() if not phone or c.phone_ok)


@command("why [CHECK]", choices=_checks_offered)
def why(shell: Shell, arg: str) -> None:
    """Explain the ranking (which answers moved which cause), or why a check is worth doing.

    The figures: a check's expected information is in bits (1 bit settles a
    question between two equally likely causes; 0.1 bit tells a little), and
    bits/min is that for each minute of work. ECO is the expected minutes to
    the cure if this check is done first and the repairs follow in the best
    order; ECR the expected minutes if you repaired now instead. A check is
    proposed when its ECO is below the ECR (or while nothing points at a cause
    yet); the cards say the same in words ("worth checking first").
    """
    from diagnose.views_reasoning import CheckExplanationView, RankingExplanationView

    s = shell.session
    if arg.strip():
        cid = shell.pick(arg.strip(), _check_choices(shell), "check")
        shell.console.print(CheckExplanationView(s.explain_check(cid)))
        return
    shell.console.print(RankingExplanationView(s.explain_ranking()))
    current = shell.current
    if current and current[0] == "check":
        shell.console.print(CheckExplanationView(s.explain_check(current[1])))


@command("ranking [all]", choices=lambda shell: (("all", "every cause"),))
def ranking(shell: Shell, arg: str) -> None:
    """Show the causes from most to least likely; `ranking all` lists every cause."""
    everything = arg.strip().lower() == "all"
    shell.console.print(shell.ranking_view(top=len(shell.model.causes) if everything else 8))


@command("checks")
def checks(shell: Shell, arg: str) -> None:
    """List every check with its score (expected information per minute) and state.

    Columns: min (its minutes, with what must be done first), bits (what it is
    expected to tell), bits/min, ECO (expected minutes to the cure if it is done
    first; the lowest is proposed when it beats repairing now, the ECR in the
    heading) and why a check is not offered. `help why` says more.
    """
    from diagnose.reasoning.actions import ChecksTable
    from diagnose.views_reasoning import ChecksTableView

    shell.console.print(ChecksTableView(shell.session.checks_table(limit=ChecksTable.shown)))


@command("do CHECK", choices=_checks_offered)
def do(shell: Shell, arg: str) -> None:
    """Do another check than the one proposed: `do air_gap`."""
    arg = _need(arg, "check", "do CHECK")
    s = shell.session
    if not s.evidence.complaints:
        raise InputError("check", "first say what the complaint is")
    cid = shell.pick(arg, _check_choices(shell), "check")
    chk = shell.model.checks[cid]
    if s.mode == "phone" and not chk.phone_ok:
        raise InputError("check", f"{cid} is done on site only; by phone only checks "
                         "safe for a caller are offered")
    from diagnose.reasoning.planner import only_if_matches

    if not only_if_matches(shell.model, s.evidence, chk):
        raise InputError("check", f"{cid} does not apply to this unit (nameplate)")
    if cid in s.evidence.findings:
        shell.warn(f"{cid} was answered before; a new answer replaces the old one")
    shell.restart(("check", cid))


def _parameters(shell: Shell) -> tuple[Choice, ...]:
    return tuple((p.id, p.prompt) for p in shell.model.parameters.values())


@command("nameplate [PARAM VALUE]", choices=_parameters)
def nameplate(shell: Shell, arg: str) -> None:
    """Show the nameplate values, or change one: `nameplate rated_voltage 24V`.

    A value is checked like the first time; the card being asked is shown
    again, as it may depend on the value.
    """
    arg = arg.strip()
    if not arg:
        shell.console.print(_nameplate_table(shell))
        return
    pid, _, text = arg.partition(" ")
    if not text.strip():
        raise InputError("nameplate", "type: nameplate PARAM VALUE")
    pid = shell.pick(pid, _parameters(shell), "parameter")
    value = shell.session.set_nameplate(pid, text.strip())
    shell.say(f"  {pid} = {unit_text(value)}", style="dim")
    if shell.current is not None:
        shell.show_again()


def _nameplate_table(shell: Shell) -> Any:
    from rich.table import Table

    table = Table(show_header=False, box=None, pad_edge=False, title="Nameplate",
                  title_justify="left", title_style="bold")
    table.add_column("parameter", no_wrap=True)
    table.add_column("value", overflow="fold")
    for pid, p in shell.model.parameters.items():
        value = shell.session.evidence.nameplate.get(pid)
        shown = unit_text(value) if value is not None else (
            f"{unit_text(str(p.default))} (default)" if p.default else "not set")
        table.add_row(pid, shown)
    return table


@command("state [STATE VALUE]",
         choices=lambda shell: tuple((v.id, v.title) for v in shell.model.states.values()))
def state(shell: Shell, arg: str) -> None:
    """Show the state of the unit (power, cover, brake), or say it changed: `state power on`.

    With ``STATE VALUE`` the change is recorded (the technician changed it).
    """
    s = shell.session
    states = shell.model.states
    if not states:
        shell.say("This pack keeps no state of the unit.")
        return
    arg = arg.strip()
    if arg:
        var, _, value = arg.partition(" ")
        var = shell.pick(var, [(v.id, v.title) for v in states.values()], "state")
        choices = list(states[var].values.items())
        value = shell.pick(value.strip(), choices, "value") if value.strip() else ""
        if not value:
            raise InputError("state", f"type: state {var} {'|'.join(states[var].values)}")
        s.set_state(var, value)
    now = s.unit_state()
    for var, sv in states.items():
        shell.say(f"  {sv.title}: {sv.values.get(now.get(var, sv.initial), '')}")


#: What `undo` calls each kind of event it takes back.
_UNDONE = {"nameplate": "nameplate value", "complaint": "complaint", "answer": "answer",
           "reading": "reading", "unsure": "unsure answer", "skip": "skip",
           "skip_repair": "skipped repair", "repair": "repair", "note": "note",
           "mode": "mode change", "identity": "identity", "attachment": "attachment",
           "state": "state of the unit"}


@command("undo")
def undo(shell: Shell, arg: str) -> None:
    """Take back the last answer, repair or note; the ranking goes back with it."""
    event = shell.session.undo()
    if event is None:
        raise InputError("undo", "nothing to undo")
    what = _UNDONE.get(event.kind, event.kind)
    data = event.data
    detail = data.get("check") or data.get("repair") or data.get("param") or data.get(
        "complaint") or data.get("text") or data.get("name") or ""
    shell.say(f"  undone: {what} {detail}".rstrip(), style="yellow")
    shell.restart()


@command("note TEXT")
def note(shell: Shell, arg: str) -> None:
    """Add a note to the repair log: `note customer reports a burnt smell`."""
    shell.session.note(_need(arg, "note", "note TEXT"))
    shell.say("  noted.", style="dim")


@command("attach PATH [caption]")
def attach(shell: Shell, arg: str) -> None:
    """Attach a photo or file to the repair log: `attach disc.jpg worn to the rivets`.

    The file is copied into the journal's attachment store (once per content, up
    to 20 MB; a name ending .jpg or .png must hold a picture). A path with spaces
    goes in quotes.
    """
    from diagnose.service.attach import attach as keep
    from diagnose.service.attach import split_argument

    path, caption = split_argument(_need(arg, "attach", "attach PATH [caption]"))
    event = keep(shell.session, shell.journal_path, path, caption)
    kind = "photo" if event.media_type.startswith("image/") else "file"
    shell.say(f"  attached {kind} {event.name} ({event.size / 1e6:.1f} MB).", style="dim")


def _repairs_offered(shell: Shell) -> tuple[Choice, ...]:
    """The repairs to complete: by phone, only those a caller can do."""
    phone = shell.session.mode == "phone"
    return tuple((r.id, r.title) for r in shell.model.repairs.values()
                 if not phone or r.where == "phone")


@command("repair REPAIR", choices=_repairs_offered)
def repair(shell: Shell, arg: str) -> None:
    """Do a repair now (parts, minutes and cautions first), then say whether it cured."""
    arg = _need(arg, "repair", "repair REPAIR")
    s = shell.session
    if not s.evidence.complaints:
        raise InputError("repair", "first say what the complaint is")
    rid = shell.pick(arg, [(r.id, r.title) for r in shell.model.repairs.values()], "repair")
    if s.mode == "phone" and shell.model.repairs[rid].where != "phone":
        raise InputError("repair", f"{rid} is done on site only; in phone mode the end is "
                         "a site visit with the parts to bring")
    shell.restart(("repair", rid))


def _evaluators(shell: Shell) -> tuple[Choice, ...]:
    from diagnose.physics.registry import EVALUATORS

    return tuple((e.name, e.title) for e in EVALUATORS.values())


@command("calc NAME --INPUT VALUE ...", choices=_evaluators)
def calc(shell: Shell, arg: str) -> None:
    """Work out a measurement by hand:
    `calc coil --rated-voltage 24V --rated-power 20W --ohms 3.2`."""
    from diagnose.shell.calc import run_calc

    shell.console.print(run_calc(arg.strip(), shell.units))


@command("mode phone|site", choices=lambda shell: (("site", "a technician at the unit"),
                                                   ("phone", "guiding a caller")))
def mode(shell: Shell, arg: str) -> None:
    """Switch between site (a technician at the unit) and phone (guiding a caller)."""
    new = _need(arg, "mode", "mode phone|site").lower()
    s = shell.session
    if new not in ("site", "phone"):
        raise InputError("mode", f"expected phone or site, got {new!r}")
    if new == s.mode:
        shell.say(f"  already in {new} mode.", style="dim")
        return
    s.set_mode(new)
    shell.say(f"  now in {new} mode.", style="bold")
    shell.mode_hint()
    shell.restart()


@command("save")
def save(shell: Shell, arg: str) -> None:
    """Make sure everything is in the journal and show how to resume this session later."""
    if shell.journal_path:
        from diagnose.service import resume_command

        shell.say("  Saved: every answer is in the journal as it is given. Resume with:")
        shell.console.print(resume_command(shell.session.session_id, shell.journal_path),
                            soft_wrap=True, markup=False, highlight=False, emoji=False)
    else:
        shell.say("  No journal in use: nothing can be saved.")


@command("quit")
def quit_(shell: Shell, arg: str) -> None:
    """Leave the shell; the session stays in the journal and can be resumed."""
    shell.leave()
