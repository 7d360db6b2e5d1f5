"""What the faces show, as rich renderables: one presentation for the shell and `run`.

Each object is a small frozen value built from the compiled model and the
session's answers (or wrapping a value of a lower layer: a measurement's
verdict, the journal's statistics), and draws itself with
``__rich_console__``; a face computes, then ``console.print(view)``. The
views of the reasoning's results are in :mod:`diagnose.views_reasoning`.
Probabilities are shown by :func:`percent` everywhere (the repair log's
templates use it too). Everything fits 80 columns and reads the same
without colour (NO_COLOR, a pipe, a log file).
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING, Any, NamedTuple

from diagnose.text import clean, percent

if TYPE_CHECKING:
    from diagnose.journal.stats import Stats
    from diagnose.physics.verdict import Verdict

#: Width of the probability bars in the ranking, in characters.
BAR_WIDTH = 20
#: Columns the ranking keeps for the number, the name and the percentage before any bar;
#: a bar narrower than MIN_BAR is left out (a terminal under 40 columns shows names only).
NAME_ROOM = 33
MIN_BAR = 7
#: How many causes the ranking shows unless asked for more.
TOP = 5
#: "None of the known causes" is shown when it is at least this likely, or in the top rows.
UNKNOWN_SHOWN_FROM = 0.05

_LEVEL_STYLE = {"DANGER": "bold white on red", "WARNING": "bold black on dark_orange",
                "CAUTION": "bold black on yellow", "NOTICE": "bold white on blue"}
_LEVEL_MARK = {"DANGER": "!! ", "WARNING": "! ", "CAUTION": "! ", "NOTICE": "i "}
#: Signal words whose cautions are acknowledged before the instructions are shown.
ACKNOWLEDGED_LEVELS = frozenset({"DANGER", "WARNING"})
#: How a compact card is shortened when it does not fit its screen lines, in this order:
#: the fixed causes to a count, why to one line, the parts to one line, every fact to
#: one line, no why, the answer hint to one line, no "acknowledge" line.
SHORTENING = ("fixes", "why", "parts", "facts", "no_why", "hint", "no_note")
#: At most this many lines of why, and of the labelled facts, on a compact card.
WHY_LINES = 2
FACT_LINES = 3
#: Marks a line cut short on a compact card: the rest is behind ``more``.
MORE = "… (more)"


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

    @classmethod
    def of(cls, ranking: Any, top: int = TOP) -> RankingView:
        """The view of a session's ranking (``Session.ranking()``): the one way it is shown.

        The ranking may be the leading entries only, with "none of the known
        causes" among them or after them (``Session.ranking(limit)``): with
        ``top + 1`` of them (:meth:`entries_for`) the view shows what it shows
        of the whole ranking.
        """
        from diagnose.kb.model import UNKNOWN_CAUSE

        rows: list[RankRow] = []
        unknown = None
        for e in ranking.entries:
            row = RankRow(e.cause, e.title, e.p)
            if e.cause == UNKNOWN_CAUSE:
                unknown = row
            else:
                rows.append(row)
        return cls(tuple(rows), unknown, top=top)

    @staticmethod
    def entries_for(top: int = TOP) -> int:
        """How many leading entries of a ranking a view of ``top`` causes needs.

        ``top`` known causes even when "none of the known causes" is among them.
        """
        return top + 1

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
                      title=clean(self.title), title_justify="left", title_style="bold")
        # The names come first: the bars take what is left beyond NAME_ROOM, or go.
        width = min(BAR_WIDTH, options.max_width - NAME_ROOM)
        bars = width >= MIN_BAR
        table.add_column("n", justify="right", no_wrap=True, width=2)
        table.add_column("cause", overflow="fold", ratio=1)
        if bars:
            table.add_column("bar", no_wrap=True, width=width)
        table.add_column("p", justify="right", no_wrap=True, width=4)
        for i, row in enumerate(self.shown(), 1):
            is_unknown = self.unknown is not None and row is self.unknown
            style = "dim italic" if is_unknown else ("bold" if i == 1 else "")
            cells = ["" if is_unknown else str(i), Text(clean(row.title), style=style)]
            if bars:
                cells.append(Text(bar(row.probability, width),
                                  style="cyan" if not is_unknown else "dim"))
            table.add_row(*cells, percent(row.probability))
        yield table


@dataclass(frozen=True)
class CautionView:
    """One caution: its signal word first, then its text.

    ``reminder``: acknowledged earlier in this state; shown on one line.
    ``brief``: shown on one line, cut with an ellipsis (a CAUTION or NOTICE on a
    compact card; ``more`` shows the whole card).
    """

    level: str
    text: str
    reminder: bool = False
    brief: bool = False

    @property
    def pending(self) -> bool:
        """A DANGER or WARNING still to be read in full (not a reminder)."""
        return self.level in ACKNOWLEDGED_LEVELS and not self.reminder

    def __rich_console__(self, console: Any, options: Any) -> Any:
        from rich.text import Text

        line = Text(no_wrap=self.reminder, overflow="ellipsis")
        line.append(f"{_LEVEL_MARK.get(self.level, '  ')}{self.level}",
                    style=_LEVEL_STYLE.get(self.level, "bold"))
        if self.reminder:
            line.append(" (acknowledged, still applies)", style="dim")
        line.append(f"  {clean(self.text)}")
        if self.brief and not self.reminder:
            line = _clip(line, console, options.max_width, 1)
        yield line


def compact_cautions(cautions: Sequence[CautionView]) -> tuple[CautionView, ...]:
    """The cautions as a compact card shows them: pending DANGER/WARNING in full, others brief.

    >>> shown = compact_cautions([CautionView("DANGER", "a"), CautionView("CAUTION", "b")])
    >>> [c.brief for c in shown]
    [False, True]
    """
    return tuple(c if c.pending else replace(c, brief=True) for c in cautions)


def why_text(gain: float | None, minutes: float, *, phone: bool = False,
             numbers: bool = False) -> str:
    """Why a check is proposed, in plain words, from its expected information per minute.

    ``gain`` is the expected reduction of uncertainty (bits) from the check;
    ``phone``: a question to a caller, not work on site; ``numbers``: with the
    figures in bits (as `why` and `checks` show them) rather than words alone.

    >>> why_text(0.9, 2)
    'worth checking first: likely to settle the question quickly (2 min of work)'
    >>> why_text(0.3, 12)
    'likely to tell a fair amount about the cause for 12 min of work'
    >>> why_text(0.9, 2, phone=True, numbers=True)[-51:]
    'quickly (a 2 min question; 0.9 bits, 0.45 bits/min)'
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
    figures = f"; {gain:.2g} bits, {rate:.2g} bits/min" if numbers else ""
    if gain >= 0.25 and rate >= 0.1:
        verb = "asking" if phone else "checking"
        return f"worth {verb} first: likely to settle the question quickly ({cost}{figures})"
    text = f"likely to tell {amount} about the cause for {cost}"
    return f"{text} ({figures[2:]})" if numbers else text


class _Fact(NamedTuple):
    """A labelled fact of a card ("Time", "2 min"); ``folded`` stands for it when space is short."""

    label: str
    value: str
    folded: str = ""


@dataclass(frozen=True)
class CheckCard:
    """A proposed check: title, why, minutes, tools, then the cautions FIRST, then what to do.

    ``instructions`` is None while a DANGER or WARNING caution still waits for
    its acknowledgement: the card then says so instead of the instructions.
    ``fit``: the screen lines the card may take (a compact card, see
    :data:`SHORTENING`); None shows the whole card.
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
    fit: int | None = None
    readings: tuple[tuple[str, str], ...] = ()  # named readings: (name, unit words), in turn

    def instructions_view(self) -> InstructionsView:
        """The instructions alone (once acknowledged), below the cautions on one line each."""
        return InstructionsView(self.title, self.instructions or "",
                                _answer_hint(self.outcomes, self.unit, self.many, self.readings),
                                _one_line(self.cautions))

    def __rich_console__(self, console: Any, options: Any) -> Any:
        lines = [[_Fact("Time", minutes_text(self.minutes)),
                  _Fact("Tools", ", ".join(self.tools) if self.tools else "none")]]
        if self.needs:
            lines.append([_Fact("First", "; ".join(self.needs))])
        yield _fitted(_CardLayout(f"{self.label}: {self.title}", self.id, self.cautions,
                                 self.why, lines, self.instructions,
                                 _answer_hint(self.outcomes, self.unit, self.many, self.readings)),
                      self.fit, console, options)


@dataclass(frozen=True)
class _CardLayout:
    """What a card shows, before it is laid out: the cautions FIRST, why, facts, then what to do.

    ``instructions`` None: a DANGER or WARNING still waits for its
    acknowledgement, and the card says so instead of showing what to do.
    """

    title: str
    subtitle: str
    cautions: Sequence[CautionView]
    why: str
    lines: Sequence[Sequence[_Fact]]
    instructions: str | None
    hint: str

    def panel(self, console: Any, width: int, shortened: frozenset[str] | None) -> Any:
        """The card as a panel ``width`` columns wide; ``shortened`` None: the whole card.

        Otherwise a compact card: pending DANGER/WARNING in full, other cautions on
        one line, why on at most :data:`WHY_LINES` lines, with the steps of
        :data:`SHORTENING` named in ``shortened`` applied.
        """
        from rich.console import Group
        from rich.panel import Panel
        from rich.text import Text

        inner = max(width - 4, 10)  # the border and the padding
        compact = shortened is not None
        cut = shortened or frozenset()
        parts: list[Any] = list(compact_cautions(self.cautions) if compact else self.cautions)
        if self.why and "no_why" not in cut:
            why = Text()
            why.append("Why: ", style="bold")
            why.append(clean(self.why))
            if compact:
                why = _clip(why, console, inner, 1 if "why" in cut else WHY_LINES)
            parts.append(why)
        parts += self.fact_lines(console, inner, cut if compact else None)
        if self.instructions is None:
            if "no_note" not in cut:
                parts.append(Text("Acknowledge the cautions above to see the instructions.",
                                  style="italic"))
        else:
            if self.instructions:
                parts.append(Text(clean(self.instructions), style="bold"))
            if self.hint:
                hint = Text(clean(self.hint), style="dim")
                parts.append(_clip(hint, console, inner, 1) if "hint" in cut else hint)
        return Panel(Group(*parts), title=Text(clean(self.title)), title_align="left",
                     subtitle=Text(clean(self.subtitle)), subtitle_align="right", expand=True)

    def fact_lines(self, console: Any, inner: int, cut: frozenset[str] | None) -> list[Any]:
        """The labelled facts, a line of text each (they wrap unless ``cut`` shortens them)."""
        from rich.text import Text

        out = []
        for line in self.lines:
            text = Text()
            for i, fact in enumerate(line):
                text.append(("   " if i else "") + f"{fact.label}: ", style="bold")
                folded = cut is not None and "fixes" in cut and fact.label == "Fixes"
                text.append(clean(fact.folded if folded and fact.folded else fact.value))
            labels = {fact.label for fact in line}
            if cut is not None and ("facts" in cut or ("parts" in cut and "Parts" in labels)):
                text = _clip(text, console, inner, 1)
            out.append(text)
        return out

    def count_fact_lines(self, console: Any, width: int, cut: frozenset[str]) -> int:
        """How many screen lines the labelled facts take on a compact card."""
        inner = max(width - 4, 10)
        return sum(len(t.wrap(console, inner)) for t in self.fact_lines(console, inner, cut))


def _fitted(layout: _CardLayout, fit: int | None, console: Any, options: Any) -> Any:
    """The card laid out to take at most ``fit`` lines (None: the whole card).

    The whole card when it fits; else a compact card (CAUTION, NOTICE and
    reminders on one line each, why on at most :data:`WHY_LINES` lines, the facts
    down to :data:`FACT_LINES` lines), then the steps of :data:`SHORTENING` in
    order until it fits. The pending DANGER and WARNING cautions are never
    shortened.
    """
    width = options.max_width
    whole = layout.panel(console, width, None)
    measure = options.update(height=None)
    if fit is None or len(console.render_lines(whole, measure, pad=False)) <= fit:
        return whole
    cut: set[str] = set()
    for step in ("fixes", "parts", "facts"):
        if layout.count_fact_lines(console, width, frozenset(cut)) <= FACT_LINES:
            break
        cut.add(step)
    panel = layout.panel(console, width, frozenset(cut))
    for step in SHORTENING:
        if len(console.render_lines(panel, measure, pad=False)) <= fit:
            break
        if step not in cut:
            cut.add(step)
            panel = layout.panel(console, width, frozenset(cut))
    return panel


def _clip(text: Any, console: Any, width: int, lines: int) -> Any:
    """``text`` wrapped to ``width`` and cut to its first ``lines`` lines, marked :data:`MORE`."""
    from rich.text import Text

    wrapped = text.wrap(console, width)
    if len(wrapped) <= lines:
        return text
    kept = list(wrapped[:lines])
    last = kept[-1]
    last.rstrip()
    last.truncate(width - len(MORE), overflow="crop")
    last.rstrip()
    last.append(MORE, style="dim")
    out = Text("\n").join(kept)
    out.no_wrap = True
    out.overflow = "crop"
    return out


def _one_line(cautions: Sequence[CautionView]) -> tuple[CautionView, ...]:
    """Every caution on one line: acknowledged ones as reminders, the others cut short."""
    return tuple(replace(c, brief=True) for c in cautions)


@dataclass(frozen=True)
class InstructionsView:
    """What to do, shown on its own once the cautions of a card are acknowledged.

    ``cautions`` (on one line each) stay above the instructions, so that they are on
    screen together with the answer's prompt.
    """

    title: str
    text: str
    hint: str = ""
    cautions: tuple[CautionView, ...] = ()

    def __rich_console__(self, console: Any, options: Any) -> Any:
        from rich.console import Group
        from rich.panel import Panel
        from rich.text import Text

        parts: list[Any] = list(self.cautions)
        parts.append(Text(clean(self.text) or "(no instructions in the pack)", style="bold"))
        if self.hint:
            parts.append(Text(clean(self.hint), style="dim"))
        yield Panel(Group(*parts), title=Text(f"Do: {clean(self.title)}"), title_align="left",
                    expand=True)


@dataclass(frozen=True)
class CautionsView:
    """The cautions of the card being asked, drawn again just above its prompt.

    Shown after a command's output pushed the card up: pending DANGER/WARNING in
    full, the others on one line each.
    """

    title: str
    cautions: tuple[CautionView, ...]
    subtitle: str = "more: the whole card"

    def __rich_console__(self, console: Any, options: Any) -> Any:
        from rich.console import Group
        from rich.panel import Panel
        from rich.text import Text

        yield Panel(Group(*compact_cautions(self.cautions)), title=Text(clean(self.title)),
                    title_align="left", subtitle=Text(clean(self.subtitle)),
                    subtitle_align="right",
                    expand=True)


def _answer_hint(outcomes: Sequence[tuple[str, str]], unit: str, many: bool = False,
                 readings: Sequence[tuple[str, str]] = ()) -> str:
    if readings:
        listed = ", ".join(f"{name} (a bare number in {words})" if words else name
                           for name, words in readings)
        example = " ".join(f"{name}=…" for name, _ in readings)
        return (f"Answer with the readings in turn: {listed}; or all at once, as {example}; "
                "or unsure, or skip.")
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
    """A proposed or chosen repair: parts, minutes and cautions first, then what to do.

    ``fit``: the screen lines the card may take (a compact card); None: the whole card.
    """

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
    fit: int | None = None

    def _hint(self) -> str:
        confirm = f" ({self.confirm})" if self.confirm else ""
        return f"When done: is the complaint cured{confirm}? yes / no (skip: cannot be done now)"

    def instructions_view(self) -> InstructionsView:
        """The instructions alone (once acknowledged), below the cautions on one line each."""
        return InstructionsView(self.title, self.instructions or "", self._hint(),
                                _one_line(self.cautions))

    def __rich_console__(self, console: Any, options: Any) -> Any:
        lines = [[_Fact("Time", minutes_text(self.minutes)),
                  _Fact("Parts", "; ".join(self.parts) if self.parts else "none")]]
        if self.fixes:
            n = len(self.fixes)
            lines.append([_Fact("Fixes", "; ".join(self.fixes),
                               f"{n} cause{'s' if n != 1 else ''} (more)")])
        yield _fitted(_CardLayout(f"{self.label}: {self.title}", self.id, self.cautions,
                                 self.why, lines, self.instructions, self._hint()),
                      self.fit, console, options)


@dataclass(frozen=True)
class NoticeView:
    """The pack's safety notice, shown once per session."""

    text: str

    def __rich_console__(self, console: Any, options: Any) -> Any:
        from rich.panel import Panel
        from rich.text import Text

        yield Panel(Text(clean(self.text)), title="Safety notice", title_align="left",
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

        body: list[Any] = [Text(clean(self.headline), style="bold")]
        body += [Text(clean(d)) for d in self.details if d]
        if self.parts:
            body.append(Text("Parts to bring: " + clean("; ".join(self.parts))))
        if self.log:
            body.append(Text(f"Repair log: {clean(self.log)}"))
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
            table.add_row(Text(clean(name)), Text(clean(text)))
        yield table
        for line in self.extra:
            yield Text(clean(line))


@dataclass(frozen=True)
class VerdictView:
    """A measurement's verdict: a small table of the figures, then the verdict line and summary.

    ``units``: the technician's preference; under "inch" lengths are shown in
    inches with millimetres beside them (:func:`preferred_figures`).
    """

    verdict: Verdict
    units: str = "metric"

    def __rich_console__(self, console: Any, options: Any) -> Iterator[Any]:
        from rich.table import Table
        from rich.text import Text

        from diagnose.physics.verdict import GOOD_VERDICTS, format_number, unit_text

        v = self.verdict
        table = Table(box=None, show_header=False, pad_edge=False, title=v.evaluator,
                      title_justify="left", title_style="bold")
        table.add_column("figure", overflow="fold")
        table.add_column("value", justify="right", no_wrap=True)
        table.add_column("unit", no_wrap=True)
        for label, value, unit, beside in preferred_figures(v.figures, self.units):
            table.add_row(label, format_number(value),
                          unit_text(unit) + (f" ({beside})" if beside else ""))
        if v.figures:
            yield table
        style = "bold green" if v.verdict in GOOD_VERDICTS else "bold red"
        line = Text("verdict: ")
        line.append(v.label, style=style)
        if v.fallback:
            line.append(f"  (plain verdict: {v.fallback.replace('_', ' ')})")
        if v.weights:
            shares = ", ".join(f"{name.replace('_', ' ')} {share:.0%}"
                               for name, share in v.weights.items())
            line.append(f"  (near a band edge: {shares})")
        yield line
        if v.summary:
            yield Text(v.summary)


def preferred_figures(figures: Any, units: str = "metric"
                      ) -> Iterator[tuple[str, float, str, str]]:
    """``(label, value, unit, beside)`` of a verdict's figures in the preferred ``units``.

    Under "metric" the figures as they are (``beside`` ""). Under "inch" a
    length is given in inches with its millimetres beside it, and a figure
    keyed ``X_mm`` that only repeats figure ``X`` in millimetres is left out
    (its value is the one beside ``X`` now).
    """
    from diagnose.physics.verdict import preferred_figure

    for key, fig in figures.items():
        if units == "metric":
            yield fig.label, fig.value, fig.unit, ""
            continue
        if key.endswith("_mm") and key[:-3] in figures:
            continue
        value, unit, beside = preferred_figure(fig.value, fig.unit, units)
        yield fig.label, value, unit, beside


@dataclass(frozen=True)
class StatsView:
    """The statistics of a journal: counts, end results, minutes to the cure, the top tables."""

    stats: Stats

    def __rich_console__(self, console: Any, options: Any) -> Iterator[Any]:
        from rich.table import Table

        st = self.stats
        scope = f"pack {st.pack}" if st.pack else "all packs"
        yield (f"{st.sessions} session(s) of {scope}: {st.open} open, {st.closed} closed, "
               f"{st.cures} cured, {st.escalated} escalated")
        if st.results:
            yield "end results: " + ", ".join(f"{k} {v}" for k, v in st.results.items())
        if st.mean_minutes_to_cure is not None:
            yield (f"mean minutes to the cure: {st.mean_minutes_to_cure:.1f} on the clock, "
                   f"{st.mean_work_minutes_to_cure:.1f} by the pack's estimates")
        rate = st.first_repair_rate
        if rate is not None:
            yield (f"first repair cured: {st.first_repair_cured} of {st.with_repair} "
                   f"({rate:.0%})")
        for title, rows, label in (("Confirmed causes", st.causes, "cause"),
                                   ("Checks used most", st.checks, "check")):
            if not rows:
                continue
            table = Table(title=title, title_justify="left", box=None, pad_edge=False)
            table.add_column("#", justify="right")
            table.add_column(label, overflow="fold")
            table.add_column("id", style="dim", overflow="fold")
            for ident, name, n in rows:
                table.add_row(str(n), name, ident)
            yield table


@dataclass(frozen=True)
class FindingView:
    """What a check's answer or reading established (``diagnose.session.Finding``), for `run`.

    ``units``: the technician's preference, as for :class:`VerdictView`.
    """

    finding: Any
    units: str = "metric"

    def __rich_console__(self, console: Any, options: Any) -> Any:
        from rich.text import Text

        f = self.finding
        if f.outcome is None:
            yield Text(f"{clean(f.check)}: unsure (no evidence)")
            return
        what = ", ".join(f"{o} {w:.2f}" for o, w in f.weights.items()) if f.soft else f.outcome
        yield Text(clean(f"{f.check}: {what}" + (" (near a band edge)" if f.soft else "")))
        if f.verdict is not None:
            from diagnose.physics.verdict import unit_text

            if f.verdict.summary:
                yield Text(f"  {clean(f.verdict.summary)}")
            for label, value, unit, beside in preferred_figures(f.verdict.figures, self.units):
                yield Text(f"  {clean(label)}: {value:.4g} {unit_text(unit)}".rstrip()
                           + (f" ({beside})" if beside else ""))


@dataclass(frozen=True)
class CaseResultView:
    """One knowledge test case's result (``diagnose.service.cases.CaseResult``), for `kb test`."""

    result: Any

    def __rich_console__(self, console: Any, options: Any) -> Any:
        from rich.text import Text

        r = self.result
        yield Text(clean(str(r)), style="green" if r.passed else "bold red")
        if not r.passed and r.ranking:
            for cause, p in r.ranking:
                yield Text(f"    {p:.3f}  {clean(cause)}")
