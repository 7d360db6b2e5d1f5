"""How the reasoning's results look on screen: rich renderables over the values of ``reasoning``.

The reasoning package computes values (a ranking, the next action, the
checks table, explanations, a simulation report, a knowledge analysis) and
turns them into data with ``to_dict()``; it draws nothing. Each view here
wraps one such value and draws it with ``__rich_console__``; a face
computes, then ``console.print(ActionView(action))``. Everything fits 80
columns and reads the same without colour.
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from diagnose.reasoning.actions import Action, ChecksTable
    from diagnose.reasoning.analysis import ComplaintAnalysis, Effort, PackAnalysis
    from diagnose.reasoning.explain import CheckExplanation, RankingExplanation
    from diagnose.reasoning.posterior import Ranking
    from diagnose.reasoning.simulate import SimulationReport

__all__ = ["ActionView", "CheckExplanationView", "ChecksTableView", "ComplaintAnalysisView",
           "PackAnalysisView", "RankingExplanationView", "RankingTableView", "SimulationView"]

#: Cut sets listed on screen for a complaint; the JSON and the reports carry them all.
SHOWN_CUT_SETS = 12


# --- the ranking, the next action, the checks -----------------------------------------------

@dataclass(frozen=True)
class RankingTableView:
    """A posterior ranking as a numbered table: cause, p to three places, a bar."""

    ranking: Ranking

    def __rich_console__(self, console: Any, options: Any) -> Iterator[Any]:
        from rich.table import Table

        from diagnose.kb.model import UNKNOWN_CAUSE

        r = self.ranking
        table = Table(title="Ranking" + (" (up to two faults)" if r.max_faults > 1 else ""),
                      title_justify="left", expand=False, box=None, pad_edge=False)
        table.add_column("#", justify="right", style="dim")
        table.add_column("cause", overflow="fold", max_width=44)
        table.add_column("p", justify="right")
        table.add_column("", no_wrap=True)
        for i, e in enumerate(r.entries[: r.shown], 1):
            bar = "█" * round(e.p * 20)
            name = e.title if e.cause == UNKNOWN_CAUSE else f"{e.cause}"
            table.add_row(str(i), name, f"{e.p:.3f}", bar)
        yield table
        rest = len(r.entries) - r.shown
        if rest > 0:
            yield f"  ... and {rest} more"
        if r.hypotheses:
            yield "  leading hypotheses: " + "; ".join(
                f"{h.cause} {h.p:.3f}" for h in r.hypotheses[:3])
        if r.contradiction:
            yield "  The evidence contradicts every known cause: escalate."


@dataclass(frozen=True)
class ActionView:
    """The next action on one line ("Next: Check ..."), with its minutes and bits, or parts."""

    action: Action

    def __rich_console__(self, console: Any, options: Any) -> Iterator[Any]:
        from rich.text import Text

        a = self.action
        line = Text("Next: ", style="bold")
        line.append(str(a))
        yield line
        if a.kind == "check":
            yield Text(f"  {a.minutes:.0f} min, expected information {a.bits:.2f} bits "
                       f"({a.bits_per_minute:.3f} bits/min)", style="dim")
        if a.parts:
            yield Text("  bring: " + ", ".join(a.parts), style="dim")


@dataclass(frozen=True)
class ChecksTableView:
    """Every check with minutes, bits, bits/min, ECO and why it is not offered."""

    table: ChecksTable

    def __rich_console__(self, console: Any, options: Any) -> Iterator[Any]:
        from rich.table import Table

        ct = self.table
        t = Table(title=f"Checks ({ct.mode}); repair now: {ct.ecr:.0f} min expected",
                  title_justify="left", box=None, pad_edge=False)
        t.add_column("check", overflow="fold", max_width=30)
        t.add_column("min", justify="right")
        t.add_column("bits", justify="right")
        t.add_column("bits/min", justify="right")
        t.add_column("ECO", justify="right")
        t.add_column("status", overflow="fold", max_width=18)
        for r in ct.rows[: ct.shown]:
            t.add_row(r.id, f"{r.minutes:.0f}", f"{r.bits:.2f}", f"{r.bits_per_minute:.3f}",
                      "" if r.eco is None else f"{r.eco:.0f}", r.status or "")
        yield t
        if ct.count > ct.shown:
            yield f"  ... and {ct.count - ct.shown} more"


# --- explanations ------------------------------------------------------------------------------

def ratio_text(r: float) -> str:
    """A likelihood ratio for people.

    >>> ratio_text(2.0), ratio_text(0.25), ratio_text(0.0), ratio_text(math.inf)
    ('×2', '÷4', 'rules out', 'rules in')
    """
    if not math.isfinite(r):
        return "rules in"
    if r <= 0:
        return "rules out"
    if r >= 1:
        return f"×{r:.3g}"
    return f"÷{1 / r:.3g}"


@dataclass(frozen=True)
class RankingExplanationView:
    """Why the leading causes lead: a table per cause of the evidence and its ratio."""

    explanation: RankingExplanation

    def __rich_console__(self, console: Any, options: Any) -> Iterator[Any]:
        from rich.table import Table

        for x in self.explanation.leading:
            t = Table(title=f"{x.cause}: p {x.p:.3f} (prior {x.prior:.3f})", title_justify="left",
                      box=None, pad_edge=False, show_header=False)
            t.add_column("evidence", overflow="fold", max_width=52)
            t.add_column("ratio", justify="right", no_wrap=True)
            t.add_column("", no_wrap=True)
            for f in x.factors:
                arrow = "for" if f.ratio > 1 else ("against" if f.ratio < 1 else "neutral")
                t.add_row("  " + f.label, ratio_text(f.ratio), arrow)
            if not x.factors:
                t.add_row("  (no evidence yet: the prior alone)", "", "")
            for note in x.notes:
                t.add_row("  " + note, "", "")
            yield t


@dataclass(frozen=True)
class CheckExplanationView:
    """Why a check: minutes, bits, ECO against ECR, and the top cause after each outcome."""

    explanation: CheckExplanation

    def __rich_console__(self, console: Any, options: Any) -> Iterator[Any]:
        from rich.table import Table

        x = self.explanation
        head = f"{x.check}: {x.minutes:.0f} min"
        if x.needs:
            head += f" (with {', '.join(x.needs)} first)"
        head += f", {x.bits:.2f} bits expected ({x.bits_per_minute:.3f} bits/min)"
        if x.status:
            head += f"; not offered now: {x.status}"
        yield head
        if x.eco is not None:
            yield (f"  expected minutes to a cure: {x.eco:.0f} checking first, "
                   f"{x.ecr:.0f} repairing now")
        t = Table(box=None, pad_edge=False, title=f"now: {x.top} {x.top_p:.2f}",
                  title_justify="left")
        t.add_column("if the answer is", overflow="fold", max_width=26)
        t.add_column("P", justify="right")
        t.add_column("top cause then", overflow="fold", max_width=30)
        t.add_column("p", justify="right")
        for o in x.outcomes:
            t.add_row(o.title, f"{o.p:.2f}", o.top, f"{o.top_p:.2f}")
        yield t


# --- the simulator -----------------------------------------------------------------------------

_POLICY_ROWS = (("mean checks", "mean_checks", "{:.2f}"),
                ("mean minutes", "mean_minutes", "{:.1f}"),
                ("first repair cures", "first_repair_success", "{:.3f}"),
                ("top-1 at 1st repair", "top1_accuracy", "{:.3f}"),
                ("1st repair on cause", "first_repair_hits", "{:.3f}"),
                ("cured", "cured", "{:.3f}"))
_UNKNOWN_ROWS = (("unknown: escalated", "escalated_when_unknown", "{:.3f}"),
                 ("unknown: repairs", "wrong_repairs_when_unknown", "{:.2f}"))


@dataclass(frozen=True)
class SimulationView:
    """The policies side by side, the entropy bound, and planner minutes over chart minutes."""

    report: SimulationReport

    def __rich_console__(self, console: Any, options: Any) -> Iterator[Any]:
        from rich.table import Table

        r = self.report
        t = Table(title=f"{r.pack}: {r.runs} runs, seed {r.seed}, noise {r.noise}",
                  title_justify="left", box=None, pad_edge=False)
        t.add_column("", no_wrap=True)
        for name in r.policies:
            t.add_column(name, justify="right")
        for label, key, fmt in _POLICY_ROWS:
            t.add_row(label, *(fmt.format(getattr(p, key)) for p in r.policies.values()))
        if any(p.unknown_runs for p in r.policies.values()):
            for label, key, fmt in _UNKNOWN_ROWS:
                t.add_row(label, *("n/a" if getattr(p, key) is None
                                   else fmt.format(getattr(p, key))
                                   for p in r.policies.values()))
        yield t
        if r.unknown_rate > 0:
            yield (f"unknown cause in {r.main.unknown_runs} of {r.runs} runs "
                   f"(rate {r.unknown_rate:g}); the figures above the 'unknown' rows "
                   "are over the known-cause runs")
        yield (f"entropy bound: {r.entropy_bound:.2f} checks "
               f"({r.prior_entropy_bits:.2f} bits of cause prior)")
        if "planner" in r.policies and "chart" in r.policies:
            ratio = r.policies["planner"].mean_minutes / max(
                r.policies["chart"].mean_minutes, 1e-9)
            yield f"planner minutes / chart minutes: {ratio:.3f}"


# --- the knowledge analysis --------------------------------------------------------------------

def _num(x: float) -> str:
    """A figure of the analysis: four significant digits, three below 0.01.

    >>> _num(0.058912), _num(0.0012345), _num(0.0), _num(math.inf)
    ('0.05891', '0.00123', '0', 'inf')
    """
    if math.isinf(x):
        return "inf"
    if x == 0:
        return "0"
    if abs(x) >= 0.01:
        return f"{x:.4g}"
    return f"{x:.3g}"


def _pct(x: float) -> str:
    return f"{100 * x:.0f}%"


def effort_line(e: Effort) -> str:
    """The effort to cure of a complaint in words, beside the chart and the entropy bound."""
    bound = ""
    if e.bound_minutes is not None:
        bound = (f"entropy bound {e.bound_minutes:.0f} min, {e.bound_checks:.1f} checks "
                 f"({e.entropy_bits:.2f} bits)")
    if not e.available:
        return f"effort: {e.note}" + (f"; {bound}" if bound else "")
    line = f"effort to cure: {e.expected_minutes:.0f} min, {e.expected_checks:.1f} checks"
    if e.chart_minutes is not None:
        line += f"; chart {e.chart_minutes:.0f} min, {e.chart_checks:.1f} checks"
    line += f"; {bound}" if bound else ""
    if e.escalated_when_unknown is not None and e.wrong_repairs_when_unknown is not None:
        esc = f"planner {_pct(e.escalated_when_unknown)}"
        wrong = f"planner {e.wrong_repairs_when_unknown:.1f}"
        if (e.chart_escalated_when_unknown is not None
                and e.chart_wrong_repairs_when_unknown is not None):
            esc += f", chart {_pct(e.chart_escalated_when_unknown)}"
            wrong += f", chart {e.chart_wrong_repairs_when_unknown:.1f}"
        line += (f"\ncause outside the pack: escalated or 'unknown' first: {esc}; "
                 f"repairs in vain: {wrong}")
    return line


@dataclass(frozen=True)
class ComplaintAnalysisView:
    """One complaint: top-event probability, cut sets, importance, testability, effort."""

    analysis: ComplaintAnalysis

    def __rich_console__(self, console: Any, options: Any) -> Iterator[Any]:
        from rich.text import Text

        a = self.analysis
        yield Text(f"{a.title} ({a.complaint})", style="bold")
        yield Text(
            f"P(top) exact {_num(a.probability)}, rare-event {_num(a.rare_event)}, "
            f"min-cut upper bound {_num(a.upper_bound)}; "
            f"{len(a.cut_sets)} minimal cut set(s)"
        )
        shown = a.cut_sets[:SHOWN_CUT_SETS]
        if any(len(s) > 1 for s in a.cut_sets):
            more = len(a.cut_sets) - len(shown)
            yield Text("cut sets: " + "; ".join(" & ".join(s) for s in shown)
                       + (f"; and {more} more" if more else ""))
        yield self._importance()
        yield from self._testability()
        yield Text(effort_line(a.effort))
        yield Text("")

    def _importance(self) -> Any:
        from rich.table import Table

        imp = Table(title="Importance of each cause", title_justify="left", show_edge=False)
        for head in ("cause", "q", "Birnbaum", "F-V", "RAW", "RRW"):
            imp.add_column(head, justify="left" if head == "cause" else "right")
        for i in sorted(self.analysis.importances, key=lambda i: -i.fussell_vesely):
            imp.add_row(i.cause, _num(i.q), _num(i.birnbaum), _num(i.fussell_vesely),
                        _num(i.risk_achievement_worth), _num(i.risk_reduction_worth))
        return imp

    def _testability(self) -> Iterator[Any]:
        from rich.padding import Padding
        from rich.text import Text

        from diagnose.reasoning.testability import MODES

        a = self.analysis
        titles = {c: t for c, t, _ in a.causes}
        for mode in MODES:
            t = a.testability[mode]
            line = (f"{mode}: detected {_pct(t.detection)}, isolated {_pct(t.isolation)} "
                    f"(by prior)")
            if t.closest is not None:
                line += f"; closest pair {t.closest[0]} / {t.closest[1]} at {t.closest[2]:.2f}"
            if t.undetected:
                line += "; no check detects " + ", ".join(t.undetected)
            yield Text(line)
            for g in t.groups:
                names = ", ".join(f"{c} ({titles.get(c, c)})" for c in g.causes)
                yield Padding(Text(f"ambiguity group: {names}", style="yellow"), (0, 0, 0, 2))
                yield Padding(Text(f"hint: {g.hint}"), (0, 0, 0, 4))


@dataclass(frozen=True)
class PackAnalysisView:
    """The knowledge analysis of a pack: every complaint, then the pack's totals."""

    analysis: PackAnalysis

    def __rich_console__(self, console: Any, options: Any) -> Iterator[Any]:
        from rich.rule import Rule
        from rich.text import Text

        from diagnose.reasoning.testability import MODES

        a = self.analysis
        yield Text(f"Knowledge analysis: {a.title} ({a.pack} {a.version})",
                   style="bold underline")
        yield Text(f"rows told apart at total variation > {a.threshold:g}")
        yield Text("")
        for c in a.complaints:
            yield Rule(style="dim")
            yield ComplaintAnalysisView(c)
        yield Rule("pack", style="dim")
        for mode in MODES:
            line = (f"{mode}: detected {_pct(a.detection[mode])}, isolated "
                    f"{_pct(a.isolation[mode])} of the causes (by prior); "
                    f"{sum(1 for g in a.groups if g.mode == mode)} ambiguity group(s)")
            yield Text(line)
        if a.undetected["site"]:
            yield Text("no check detects: " + ", ".join(a.undetected["site"]), style="yellow")
        if a.idle_checks:
            yield Text("checks that never change any ranking: " + ", ".join(a.idle_checks),
                       style="yellow")
        for note in a.notes:
            yield Text(note, style="dim")
