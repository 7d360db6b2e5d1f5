"""The shell's commands: a registry of name -> function; the docstring is the help.

Every command takes the running shell and the rest of the line, and works
through the shell's methods (which call the session API). A command that
cannot do what was asked raises ``InputError``; the shell shows its message
in one line and asks the same question again.

At any question where the shell waits for an answer, a line whose first word
is a command name runs that command instead.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from diagnose.errors import InputError

if TYPE_CHECKING:
    from diagnose.shell.app import Shell

Handler = Callable[["Shell", str], Any]


@dataclass(frozen=True)
class Command:
    """A shell command: its name, how it is typed, and its function (docstring = help)."""

    name: str
    usage: str
    func: Handler

    @property
    def help(self) -> str:
        """The first paragraph of the function's docstring, on one line."""
        doc = (self.func.__doc__ or "").strip()
        return " ".join(doc.split("\n\n")[0].split())

    def __call__(self, shell: Shell, arg: str) -> Any:
        return self.func(shell, arg)


COMMANDS: dict[str, Command] = {}


def command(usage: str) -> Callable[[Handler], Handler]:
    """Register the decorated function as the command named by the first word of ``usage``."""

    def wrap(func: Handler) -> Handler:
        name = usage.split()[0]
        COMMANDS[name] = Command(name, usage, func)
        return func

    return wrap


def find(word: str) -> Command | None:
    """The command named ``word`` (case-insensitive), or None."""
    return COMMANDS.get(word.strip().lower())


def _need(arg: str, what: str, usage: str) -> str:
    if not arg.strip():
        raise InputError(what, f"missing; type: {usage}")
    return arg.strip()


@command("help [COMMAND]")
def help_(shell: Shell, arg: str) -> None:
    """Show the commands and how to answer, or the help of one command."""
    shell.show_help(arg.strip())


@command("why [CHECK]")
def why(shell: Shell, arg: str) -> None:
    """Explain the ranking (which answers moved which cause), or why a check is worth doing."""
    shell.show_why(arg.strip())


@command("ranking [all]")
def ranking(shell: Shell, arg: str) -> None:
    """Show the causes from most to least likely; `ranking all` lists every cause."""
    shell.show_ranking(everything=arg.strip().lower() == "all")


@command("checks")
def checks(shell: Shell, arg: str) -> None:
    """List every check with its score (expected information per minute) and state."""
    shell.show_checks()


@command("do CHECK")
def do(shell: Shell, arg: str) -> None:
    """Do another check than the one proposed: `do coil_resistance`."""
    shell.choose_check(_need(arg, "check", "do CHECK"))


@command("nameplate [PARAM VALUE]")
def nameplate(shell: Shell, arg: str) -> None:
    """Show the nameplate values, or change one: `nameplate rated_voltage 24V`."""
    shell.nameplate(arg.strip())


@command("state [STATE VALUE]")
def state(shell: Shell, arg: str) -> None:
    """Show the state of the unit (power, cover, brake), or say it changed: `state power on`."""
    shell.unit_state(arg.strip())


@command("undo")
def undo(shell: Shell, arg: str) -> None:
    """Take back the last answer, repair or note; the ranking goes back with it."""
    shell.undo()


@command("note TEXT")
def note(shell: Shell, arg: str) -> None:
    """Add a note to the repair log: `note customer reports a burnt smell`."""
    shell.add_note(_need(arg, "note", "note TEXT"))


@command("repair REPAIR")
def repair(shell: Shell, arg: str) -> None:
    """Do a repair now (parts, minutes and cautions first), then say whether it cured."""
    shell.choose_repair(_need(arg, "repair", "repair REPAIR"))


@command("calc NAME --INPUT VALUE ...")
def calc(shell: Shell, arg: str) -> None:
    """Work out a measurement by hand: `calc coil --rated-voltage 24V --rated-power 20W --ohms 3.2`."""
    shell.calc(arg.strip())


@command("mode phone|site")
def mode(shell: Shell, arg: str) -> None:
    """Switch between site (a technician at the unit) and phone (guiding a caller)."""
    shell.set_mode(_need(arg, "mode", "mode phone|site").lower())


@command("save")
def save(shell: Shell, arg: str) -> None:
    """Make sure everything is in the journal and show how to resume this session later."""
    shell.save()


@command("quit")
def quit_(shell: Shell, arg: str) -> None:
    """Leave the shell; the session stays in the journal and can be resumed."""
    shell.leave()
