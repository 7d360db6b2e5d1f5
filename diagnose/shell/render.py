"""What the shell shows, as rich renderables that a report can reuse.

Each object is a small frozen value built from the compiled model and the
session's answers, and draws itself with ``__rich_console__``; the shell
computes, then ``console.print(obj)``. Everything fits 80 columns and reads
the same without colour (NO_COLOR, a pipe, a log file).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

#: Width of the probability bars in the ranking, in characters.
BAR_WIDTH = 20
#: How many causes the ranking shows unless asked for more.
TOP = 5
#: "None of the known causes" is shown when it is at least this likely, or in the top rows.
UNKNOWN_SHOWN_FROM = 0.05

_LEVEL_STYLE = {"DANGER": "bold white on red", "WARNING": "bold black on dark_orange",
                "CAUTION": "bold black on yellow", "NOTICE": "bold white on blue"}
_LEVEL_MARK = {"DANGER": "!! ", "WARNING": "! ", "CAUTION": "! ", "NOTICE": "i "}


def bar(share: float, width: int = BAR_WIDTH) -> str:
    """A horizontal bar of ``share`` (0..1) in ``width`` characters, with eighth blocks.

    >>> bar(0.5, 8), bar(0.0, 4), bar(1.0, 4)
    ('████    ', '    ', '████')
    """
    share = min(max(share, 0.0), 1.0)
    eighths = round(share * width * 8)
    full, rest = divmod(eighths, 8)
    partial = " ▏▎▍▌▋▊▉"[rest] if rest else ""
    return ("█" * full + partial).ljust(width)[:width]


def percent(p: float) -> str:
    """A probability for people: "62%", "<1%", ">99%".

    >>> percent(0.623), percent(0.001), percent(0.9996), percent(0.0)
    ('62%', '<1%', '>99%', '0%')
    """
    if p <= 0:
        return "0%"
    if p < 0.005:
        return "<1%"
    if p > 0.995 and p < 1:
        return ">99%"
    return f"{p:.0%}"


def minutes_text(minutes: float) -> str:
    """ "5 min", "1 h 30 min".

    >>> minutes_text(5), minutes_text(90), minutes_text(2.5)
    ('5 min', '1 h 30 min', '2.5 min')
    """
    if minutes >= 60:
        h, m = divmod(round(minutes), 60)
        return f"{h} h {m} min" if m else f"{h} h"
    return f"{minutes:g} min"


@dataclass(frozen=True)
class RankRow:
    """One line of the ranking: a cause (or "none of the known causes") and its probability."""

    id: str
    title: str
    probability: float


@dataclass(frozen=True)
class RankingView:
    """The top causes with bars, and the "none of the known causes" line when it matters."""

    rows: tuple[RankRow, ...]
    unknown: RankRow | None = None
    top: int = TOP
    title: str = "Most likely causes"

    def shown(self) -> list[RankRow]:
        rows = list(self.rows[: self.top])
        unk = self.unknown
        if unk is not None and (unk.probability >= UNKNOWN_SHOWN_FROM or (
                rows and unk.probability > rows[-1].probability)):
            rows.append(unk)
        return rows

    def __rich_console__(self, console: Any, options: Any) -> Any:
        from rich.table import Table
        from rich.text import Text

        table = Table(show_header=False, box=None, pad_edge=False, padding=(0, 1),
                      title=self.title, title_justify="left", title_style="bold")
        table.add_column("n", justify="right", no_wrap=True, width=2)
        table.add_column("cause", overflow="fold", ratio=1)
        table.add_column("bar", no_wrap=True, width=BAR_WIDTH)
        table.add_column("p", justify="right", no_wrap=True, width=4)
        for i, row in enumerate(self.shown(), 1):
            is_unknown = self.unknown is not None and row is self.unknown
            style = "dim italic" if is_unknown else ("bold" if i == 1 else "")
            table.add_row("" if is_unknown else str(i), Text(row.title, style=style),
                          Text(bar(row.probability), style="cyan" if not is_unknown else "dim"),
                          percent(row.probability))
        yield table


@dataclass(frozen=True)
class CautionView:
    """One caution: its signal word first, then its text.

    ``reminder``: acknowledged earlier in this state; shown on one line.
    """

    level: str
    text: str
    reminder: bool = False

    def __rich_console__(self, console: Any, options: Any) -> Any:
        from rich.text import Text

        line = Text(no_wrap=self.reminder, overflow="ellipsis")
        line.append(f"{_LEVEL_MARK.get(self.level, '  ')}{self.level}",
                    style=_LEVEL_STYLE.get(self.level, "bold"))
        if self.reminder:
            line.append(" (acknowledged, still applies)", style="dim")
        line.append(f"  {self.text}")
        yield line


def why_text(gain: float | None, minutes: float, *, phone: bool = False) -> str:
    """Why a check is proposed, in plain words, from its expected information per minute.

    ``gain`` is the expected reduction of uncertainty (bits) from the check;
    ``phone``: a question to a caller, not work on site.

    >>> why_text(0.9, 2)
    'it is expected to settle a lot about the cause (0.9 bits) for 2 min of work (0.45 bits/min)'
    >>> why_text(0.9, 2, phone=True)
    'it is expected to settle a lot about the cause (0.9 bits) for a 2 min question (0.45 bits/min)'
    """
    if gain is None:
        return "it is the next step of the plan"
    if gain >= 0.6:
        amount = "a lot"
    elif gain >= 0.25:
        amount = "a fair amount"
    elif gain >= 0.05:
        amount = "a little"
    else:
        amount = "very little"
    rate = gain / minutes if minutes > 0 else gain
    cost = f"a {minutes_text(minutes)} question" if phone else f"{minutes_text(minutes)} of work"
    return (f"it is expected to settle {amount} about the cause ({gain:.2g} bits) "
            f"for {cost} ({rate:.2g} bits/min)")


@dataclass(frozen=True)
class CheckCard:
    """A proposed check: title, why, minutes, tools, then the cautions FIRST, then what to do.

    ``instructions`` is None while a DANGER or WARNING caution still waits for
    its acknowledgement: the card then says so instead of the instructions.
    """

    id: str
    title: str
    minutes: float
    tools: tuple[str, ...] = ()
    cautions: tuple[CautionView, ...] = ()
    why: str = ""
    instructions: str | None = None
    outcomes: tuple[tuple[str, str], ...] = ()  # (id, wording)
    unit: str = ""  # a measurement: the unit of a bare number
    label: str = "Check"
    needs: tuple[str, ...] = ()
    many: bool = False  # a measurement that takes several readings

    def instructions_view(self) -> InstructionsView:
        """The instructions alone (after the acknowledgement of the cautions)."""
        return InstructionsView(self.title, self.instructions or "",
                                _answer_hint(self.outcomes, self.unit, self.many))

    def __rich_console__(self, console: Any, options: Any) -> Any:
        lines = [[("Time", minutes_text(self.minutes)),
                  ("Tools", ", ".join(self.tools) if self.tools else "none")]]
        if self.needs:
            lines.append([("First", "; ".join(self.needs))])
        yield _card(f"{self.label}: {self.title}", self.id, self.cautions, self.why, lines,
                    self.instructions, _answer_hint(self.outcomes, self.unit, self.many))


def _card(title: str, subtitle: str, cautions: Sequence[Any], why: str,
          lines: Sequence[Sequence[tuple[str, str]]], instructions: str | None,
          hint: str) -> Any:
    """A card: the cautions FIRST, why, labelled facts, then the instructions and the hint.

    ``instructions`` None: a DANGER or WARNING still waits for its acknowledgement,
    and the card says so instead of showing what to do.
    """
    from rich.console import Group
    from rich.panel import Panel
    from rich.text import Text

    parts: list[Any] = list(cautions)
    head = Text()
    if why:
        head.append("Why: ", style="bold")
        head.append(why + "\n")
    for n, line in enumerate(lines):
        for i, (label, value) in enumerate(line):
            head.append(("   " if i else ("\n" if n else "")) + f"{label}: ", style="bold")
            head.append(value)
    parts.append(head)
    if instructions is None:
        parts.append(Text("Acknowledge the cautions above to see the instructions.",
                          style="italic"))
    else:
        if instructions:
            parts.append(Text(instructions, style="bold"))
        if hint:
            parts.append(Text(hint, style="dim"))
    return Panel(Group(*parts), title=title, title_align="left", subtitle=subtitle,
                 subtitle_align="right", expand=True)


@dataclass(frozen=True)
class InstructionsView:
    """What to do, shown on its own once the cautions of a card are acknowledged."""

    title: str
    text: str
    hint: str = ""

    def __rich_console__(self, console: Any, options: Any) -> Any:
        from rich.console import Group
        from rich.panel import Panel
        from rich.text import Text

        parts: list[Any] = [Text(self.text or "(no instructions in the pack)", style="bold")]
        if self.hint:
            parts.append(Text(self.hint, style="dim"))
        yield Panel(Group(*parts), title=f"Do: {self.title}", title_align="left", expand=True)


def _answer_hint(outcomes: Sequence[tuple[str, str]], unit: str, many: bool = False) -> str:
    if unit:
        what = ("the readings, separated by spaces (for example 0.35 0.36 0.34)" if many
                else "the reading")
        extra = "; OL for open" if "ohm" in unit else ""
        return f"Answer with {what} (a bare number is in {unit}{extra}), or unsure, or skip."
    if outcomes:
        listed = "; ".join(f"{i}) {oid}: {text}" if text and text != oid else f"{i}) {oid}"
                           for i, (oid, text) in enumerate(outcomes, 1))
        return f"Answer: {listed}; or unsure, or skip."
    return ""


@dataclass(frozen=True)
class RepairCard:
    """A proposed or chosen repair: parts, minutes and cautions first, then what to do."""

    id: str
    title: str
    minutes: float
    parts: tuple[str, ...] = ()
    cautions: tuple[CautionView, ...] = ()
    fixes: tuple[str, ...] = ()
    why: str = ""
    instructions: str | None = None
    confirm: str = ""
    label: str = "Repair"

    def _hint(self) -> str:
        confirm = f" ({self.confirm})" if self.confirm else ""
        return f"When done: is the complaint cured{confirm}? yes / no (skip: cannot be done now)"

    def instructions_view(self) -> InstructionsView:
        """The instructions alone (after the acknowledgement of the cautions)."""
        return InstructionsView(self.title, self.instructions or "", self._hint())

    def __rich_console__(self, console: Any, options: Any) -> Any:
        lines = [[("Time", minutes_text(self.minutes))],
                 [("Parts", "; ".join(self.parts) if self.parts else "none")]]
        if self.fixes:
            lines.append([("Fixes", "; ".join(self.fixes))])
        yield _card(f"{self.label}: {self.title}", self.id, self.cautions, self.why, lines,
                    self.instructions, self._hint())


@dataclass(frozen=True)
class NoticeView:
    """The pack's safety notice, shown once per session."""

    text: str

    def __rich_console__(self, console: Any, options: Any) -> Any:
        from rich.panel import Panel
        from rich.text import Text

        yield Panel(Text(self.text), title="Safety notice", title_align="left",
                    border_style="yellow")


@dataclass(frozen=True)
class EndView:
    """The end of a diagnosis: the cured cause, or the escalation, and where the log is."""

    outcome: str  # "cured", "site visit", "unknown", "stopped"
    headline: str
    details: tuple[str, ...] = ()
    parts: tuple[str, ...] = ()
    log: str = ""

    def __rich_console__(self, console: Any, options: Any) -> Any:
        from rich.console import Group
        from rich.panel import Panel
        from rich.text import Text

        body: list[Any] = [Text(self.headline, style="bold")]
        body += [Text(d) for d in self.details if d]
        if self.parts:
            body.append(Text("Parts to bring: " + "; ".join(self.parts)))
        if self.log:
            body.append(Text(f"Repair log: {self.log}"))
        style = "green" if self.outcome == "cured" else "yellow"
        yield Panel(Group(*body), title="Result", title_align="left", border_style=style)


@dataclass(frozen=True)
class HelpView:
    """The shell's commands and their one-line help."""

    rows: tuple[tuple[str, str], ...]
    extra: tuple[str, ...] = field(default_factory=tuple)

    def __rich_console__(self, console: Any, options: Any) -> Any:
        from rich.table import Table
        from rich.text import Text

        table = Table(show_header=False, box=None, pad_edge=False, padding=(0, 2, 0, 0))
        table.add_column("command", style="bold", no_wrap=True)
        table.add_column("help", overflow="fold")
        for name, text in self.rows:
            table.add_row(name, text)
        yield table
        for line in self.extra:
            yield Text(line)
