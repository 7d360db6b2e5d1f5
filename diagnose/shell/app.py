"""The diagnosis shell: the loop that walks a person from the notice to the cure.

The flow: the pack's safety notice (recorded once per session), the
nameplate, optional site/machine/axis/serial, the complaint(s), then turn
after turn the ranking, the proposed check or repair as a card (cautions
first; DANGER and WARNING need an acknowledgement before the instructions),
and the answer; at the end the cured cause or the escalation and where the
repair log is.

Everything goes through :class:`diagnose.session.Session`, the same API the
scripted run uses, so both write the same events. The shell gets its
``reader`` (a terminal prompt or lines of text, see ``reader``) and its rich
``Console`` from the caller, so tests give a pipe and a string buffer.
What each command does is in ``commands`` (written against the public
methods of :class:`Shell`); how the shell is started is in ``entry``.

A shell that never dies: bad input gets one line of explanation and the
same question again, with nothing lost; Ctrl-C clears the line; Ctrl-D
asks whether to save and leave; an error inside a command is one line.
"""

from __future__ import annotations

import difflib
import re
from collections.abc import Callable, Sequence
from typing import TYPE_CHECKING, Any, NoReturn

from diagnose.errors import DiagnoseError, InputError, JournalError
from diagnose.events import steps_taken
from diagnose.physics.verdict import unit_text
from diagnose.shell import commands
from diagnose.shell.complete import Choice, CompletionState, choose
from diagnose.shell.startup import FALLBACK_NOTICE
from diagnose.views import (
    CautionsView,
    CautionView,
    CheckCard,
    EndView,
    NoticeView,
    RankingView,
    RepairCard,
    VerdictView,
    percent,
    why_text,
)

if TYPE_CHECKING:
    from diagnose.kb.model import Check, Model, Repair
    from diagnose.reasoning.planner import Action
    from diagnose.session import Session

IDENTITY_FIELDS = (("site", "Site or customer"), ("machine", "Machine"), ("axis", "Axis"),
                   ("serial", "{Device} serial number"))
ACK_WORDS = frozenset({"ack", "acknowledge", "acknowledged", "ok", "yes", "y"})
YES = frozenset({"yes", "y", "cured", "true"})
NO = frozenset({"no", "n", "not cured", "false"})
#: What a reading starts with: a number (one of several), or a word for an open circuit.
_READING = re.compile(r"^\s*([+-]?(\d|\.\d)|ol\b|o\.l\.?|inf|\+inf|infinity|open|∞)", re.IGNORECASE)
#: What phone mode means, said when it starts.
PHONE_HINT = ("Phone mode: every card is a question for the caller, safe without tools or "
              "opening covers; the end is a recommendation: resolved, or a site visit with "
              "the parts to bring.")
_MAX_FAILURES = 5  # unexpected errors in a row without new input before the shell gives up
#: Lines a terminal prompt keeps for the completion menu, its own last line included:
#: three completions at a time (they scroll), so that a card keeps its room above.
MENU_ROWS = 4
#: Lines of the bottom toolbar under the prompt.
TOOLBAR_ROWS = 1
#: Commands whose output pushes the card up: its cautions are drawn again after them.
REDRAW_AFTER = frozenset({"ranking", "why", "checks", "help", "nameplate", "state", "calc"})
#: Typed at a card's prompt: the whole card (a compact card cuts lines short).
MORE_WORD = "more"


class Leave(Exception):
    """Raised by `quit` (and Ctrl-D): leave the shell, the session stays resumable."""


class Restart(Exception):
    """The state changed under the current question (undo, do, repair, mode): start the turn anew.

    Raised by :meth:`Shell.restart` and :meth:`Shell.show_again`, which commands call.
    """


class Shell:
    """One diagnosis session driven interactively.

    Args:
        session: the session (new, or replayed from the journal to resume).
        console: a rich Console for everything shown.
        reader: where answers come from (``ask(message, state, default) -> str``).
        journal_path: where the events go, for the "saved" and "repair log" lines.
        resumed: True when the session was replayed from the journal.
        notice_shown: True when the safety notice was shown already (at a terminal
            it is read while the pack loads, see ``startup``).
        units: the technician's preferred units ("metric" or "inch"): the unit of a
            bare length reading, and how the figures of a verdict are shown.
    """

    def __init__(self, session: Session, console: Any, reader: Any, *,
                 journal_path: str | None = None, resumed: bool = False,
                 notice_shown: bool = False, units: str = "metric") -> None:
        self.session = session
        self.units = units
        self.notice_shown = notice_shown
        self.model: Model = session.model
        self.console = console
        self.reader = reader
        self.journal_path = journal_path
        self.resumed = resumed
        self._identity_done = resumed and bool(session.evidence.complaints or
                                               session.evidence.identity)
        self._more_complaints_done = resumed and bool(session.evidence.complaints)
        self._forced: tuple[str, str] | None = None  # ("check"|"repair", id) chosen by the person
        self._turn_forced: tuple[str, str] | None = None  # what this turn was chosen to be
        self._current: tuple[str, str] | None = None  # what the current question is about
        # the card of the current question: (id, card(shown)), for `more` and the redraw
        self._card: tuple[str, Callable[[bool], Any]] | None = None
        self._closing_offered = False

    # --- the loop ------------------------------------------------------------------------
    def run(self) -> int:
        """Run the flow until the end of the diagnosis or `quit`; returns an exit status."""
        if self.resumed:
            self.say(f"Resuming session {self.session.session_id} ({self.model.title}, "
                     f"{self.session.mode} mode, {self.steps()} step(s) so far).", style="bold")
            from diagnose.service import session_note

            note = session_note(self.session)
            if note:
                self.warn(note)
            last = self.session.events[-1].kind if self.session.events else ""
            if last in ("reopen", "handover"):  # another person goes on: the notice is theirs
                self.console.print(NoticeView(self.session.notice or FALLBACK_NOTICE))
            if last == "reopen":
                self.say("The phone diagnosis ended with a site visit: it goes on here, on "
                         "site, with the caller's answers kept. Every caution is "
                         "acknowledged afresh on site.", style="bold")
        else:
            if not self.notice_shown:
                self.console.print(NoticeView(self.session.notice or FALLBACK_NOTICE))
            self.say(f"Session {self.session.session_id}: {self.model.title} "
                     f"({self.model.id} {self.model.version}), {self.session.mode} mode. "
                     "Type help for the commands.")
        self.mode_hint()
        failures = 0
        while True:
            try:
                if self._step():
                    return 0
                failures = 0
            except Restart:
                failures = 0
                continue
            except Leave:
                self._goodbye()
                return 0
            except KeyboardInterrupt:
                self.say("(interrupted; the question is asked again)")
            except JournalError as exc:
                failures += 1
                self.failure(f"journal: {exc}")
            except DiagnoseError as exc:
                failures += 1
                self.failure(str(exc))
            except Exception as exc:  # noqa: BLE001 - the shell never dies: one line, go on
                failures += 1
                self.failure(f"internal error ({type(exc).__name__}: {exc}); "
                             "the session so far is saved")
            if failures >= _MAX_FAILURES:
                self.failure("too many errors in a row; leaving (the session is saved)")
                self._goodbye()
                return 1

    def _step(self) -> bool:
        """One stage of the flow; True when the diagnosis is over."""
        s = self.session
        ev = s.evidence
        if s.ended:
            self._show_end_of_closed()
            return True
        missing = s.open_parameters()
        if missing:
            if not ev.nameplate:
                self.heading("Unit identification: the nameplate")
                self.say("Enter keeps the value in brackets; `defaults` keeps it for every "
                         "value still to come; `unknown` where allowed.", style="dim")
            self.ask_parameter(missing[0])
            return False
        if not self._identity_done:
            self.ask_identity()
            return False
        if not ev.complaints:  # none yet, or undone: another one is asked after the first
            self._more_complaints_done = False
            self.ask_complaint(first=True)
            return False
        if not self._more_complaints_done:
            self.ask_complaint(first=False)
            return False
        return self.turn()

    # --- output helpers ------------------------------------------------------------------
    def say(self, text: str, style: str | None = None, *, wrap: bool = True) -> None:
        """Plain text (no markup), wrapped at the console width unless ``wrap`` is False."""
        self.console.print(text, style=style, markup=False, highlight=False, soft_wrap=not wrap)

    def heading(self, text: str) -> None:
        from rich.rule import Rule

        self.console.print(Rule(text, align="left", style="dim"))

    def error(self, text: str) -> None:
        """One line that says why the input was not taken."""
        self.say(f"Not accepted: {text}", style="red", wrap=False)

    def failure(self, text: str) -> None:
        """One line about a failure that is not the person's input."""
        self.say(f"Error: {text}", style="bold red", wrap=False)

    def warn(self, text: str) -> None:
        self.say(f"Note: {text}", style="yellow")

    # --- asking ----------------------------------------------------------------------------
    def ask(self, message: str, parse: Callable[[str], Any], *,
            answers: Sequence[Choice] = (), empty: str | None = None,
            default: str = "") -> Any:
        """Ask until ``parse`` accepts the line; commands run in between.

        ``empty``: the one-line explanation for an empty line (None: an empty line
        is passed to ``parse``). ``parse`` raises InputError to refuse.
        """
        answer_ids = {a.lower() for a, _ in answers}
        more = self._card_now() is not None and MORE_WORD not in answer_ids
        offered = tuple(answers) + (((MORE_WORD, "show the whole card"),) if more else ())
        state = CompletionState(answers=offered, commands=commands.command_choices(),
                                arguments=commands.argument_choices(self))
        while True:
            try:
                line = self.reader.ask(wrap_prompt(message, self.console.width), state, default)
            except KeyboardInterrupt:
                continue
            except EOFError:
                self.on_end_of_input()
                continue
            text = line.strip()
            if not text:
                if empty is not None:
                    self.error(empty)
                    continue
            else:
                if more and text.lower() == MORE_WORD:
                    self.show_more()
                    continue
                word, _, rest = text.partition(" ")
                cmd = commands.find(word)
                if cmd is not None and text.lower() not in answer_ids:
                    if self.run_command(cmd, rest) and cmd.name in REDRAW_AFTER:
                        self.redraw_cautions()
                    continue
            try:
                return parse(text)
            except InputError as exc:
                self.error(_message(exc))

    def run_command(self, cmd: commands.Command, arg: str) -> bool:
        """Run a command typed at a question; False when it was refused (one line said why)."""
        try:
            cmd(self, arg)
        except (Restart, Leave):
            raise
        except InputError as exc:
            self.error(_message(exc))
            return False
        except DiagnoseError as exc:
            self.error(str(exc))
            return False
        return True

    # --- the card on screen ------------------------------------------------------------------
    def _card_now(self) -> tuple[str, Callable[[bool], Any]] | None:
        """The card of the question being asked, or None (no card, or a stale one)."""
        if self._card is None or self._current is None or self._current[1] != self._card[0]:
            return None
        return self._card

    def card_room(self, prompt: str) -> int:
        """The screen lines a card may take so that it and ``prompt`` are on screen together.

        At a terminal the prompt keeps :data:`MENU_ROWS` lines for the completion
        menu (its own last line included) above the toolbar; a prompt wrapped to
        several lines takes the lines above its last.
        """
        lines = wrap_prompt(prompt, self.console.width).count("\n") + 1
        return max(self.console.height - (lines - 1) - MENU_ROWS - TOOLBAR_ROWS, 1)

    def show_more(self) -> None:
        """`more` at a card's prompt: the whole card; its cautions again if it is too tall."""
        found = self._card_now()
        if found is None:
            return
        item_id, card = found
        whole = card(not self.session.pending_cautions(item_id))
        self.console.print(whole)
        if len(self.console.render_lines(whole, pad=False)) > self.card_room(""):
            self.redraw_cautions()

    def redraw_cautions(self) -> None:
        """The current card's cautions again, just above the prompt that is asked again.

        Pending DANGER/WARNING in full, the others on one line each; nothing when
        no card is being asked or it has no cautions.
        """
        found = self._card_now()
        if found is None:
            return
        item_id, card = found
        shown = card(not self.session.pending_cautions(item_id))
        if shown.cautions:
            self.console.print(CautionsView(f"{shown.label}: {shown.title}",
                                            tuple(shown.cautions)))

    def on_end_of_input(self) -> None:
        """Ctrl-D (or the end of a script): ask whether to save and leave."""
        self.say("")
        try:
            line = self.reader.ask(wrap_prompt("Save and leave? (yes / no to stay / abandon to "
                                               "close the diagnosis unsolved) ",
                                               self.console.width), CompletionState(
                                       answers=(("yes", "leave; resume later"),
                                                ("no", "stay"),
                                                ("abandon", "close without a result"))))
        except (EOFError, KeyboardInterrupt):
            raise Leave from None
        word = line.strip().lower()
        if word in ("no", "n", "stay"):
            return
        if word == "abandon":
            self.session.end("abandoned", text="abandoned from the shell")
            self.say("The diagnosis is closed as abandoned.")
            raise Leave
        raise Leave

    # --- stages ------------------------------------------------------------------------------
    def ask_parameter(self, pid: str) -> None:
        """One nameplate value, checked as typed.

        Enter keeps the default, `defaults` the defaults of all of them; a value
        kept so is recorded as assumed (not read off the unit), and every verdict
        that uses it says so.
        """
        p = self.model.parameters[pid]
        hints = []
        if p.choices:
            hints.append("/".join(p.choices))
        elif p.unit:
            span = ""
            if p.min is not None or p.max is not None:
                lo = "" if p.min is None else f"{p.min:g}"
                hi = "" if p.max is None else f"{p.max:g}"
                span = f", {lo}..{hi}"
            hints.append(f"{unit_text(p.unit)}{span}")
        if p.unknown_allowed:
            hints.append("or unknown")
        hint = f" ({'; '.join(hints)})" if hints else ""
        default = f" [{unit_text(str(p.default))}]" if p.default else ""
        answers: list[Choice] = [(c, "") for c in p.choices]
        if p.unknown_allowed:
            answers.append(("unknown", "not on the nameplate"))
        answers.append(("defaults", "keep the default of this value and of all still to come"))

        def parse(text: str) -> list[tuple[str, str]]:
            if text.lower() == "defaults":
                return self._keep_defaults()
            if not text:
                if p.default is None:
                    raise InputError(pid, "an answer is needed (there is no default)")
                return [(pid, self.session.set_nameplate(pid, str(p.default), assumed=True))]
            return [(pid, self.session.set_nameplate(pid, text))]

        for param, value in self.ask(f"{p.prompt}{hint}{default}: ", parse, answers=answers):
            mark = " (assumed: the pack's default)" if param in self.session.evidence.assumed \
                else ""
            self.say(f"  {param} = {unit_text(value)}{mark}", style="dim")

    def _keep_defaults(self) -> list[tuple[str, str]]:
        """Set every nameplate value still open that has a default; those without are asked."""
        done = []
        kept: set[str] = set()
        while True:  # in order: an answer may make later questions moot
            todo = [p for p in self.session.open_parameters() if p not in kept
                    and self.model.parameters[p].default is not None]
            if not todo:
                break
            pid = todo[0]
            kept.add(pid)
            default = str(self.model.parameters[pid].default)
            done.append((pid, self.session.set_nameplate(pid, default, assumed=True)))
        if not done:
            raise InputError("defaults", "no value still to come has a default")
        return done

    def ask_identity(self) -> None:
        """Optional facts for the log; Enter skips each."""
        self.heading("For the repair log (optional: Enter skips)")
        fields: dict[str, str] = {}
        device = self.model.terms.get("Device") or "Unit"
        for key, label in IDENTITY_FIELDS:
            label = label.replace("{Device}", device)
            text = self.ask(f"{label}: ", lambda t: t)
            if text:
                fields[key] = text
        if fields:
            self.session.set_identity(**fields)
            self.show_history(fields)
        self._identity_done = True

    def show_history(self, identity: dict[str, str]) -> None:
        """The earlier jobs on this unit, and a recent finding raised as a recurrence."""
        if not self.journal_path:
            return
        from diagnose.service.history import RECURRENCE_FACTOR, history, recurrences

        jobs = history(self.journal_path, identity, self.model, self.session)
        if not jobs:
            return
        self.heading("Earlier jobs on this unit")
        for job in jobs:
            found = job.finding_title or "no finding recorded"
            cure = f"; cured by: {job.repair}" if job.repair else ""
            self.say(f"  {job.started[:10]} ({job.session_id}): {'; '.join(job.complaints)}"
                     f" -> {found}{cure}")
        for cause, (days, ids) in recurrences(jobs, self.model).items():
            self.session.note_history(cause, RECURRENCE_FACTOR, days=days, sessions=ids)
            when = "today" if days == 0 else "yesterday" if days == 1 else f"{days} days ago"
            self.say(f"  Found on this unit {when}: {self.model.causes[cause].title}. It starts "
                     f"{RECURRENCE_FACTOR:g} times as likely (undo takes this back).",
                     style="yellow")

    def complaint_choices(self, *, both: bool = False) -> list[Choice]:
        """Complaints not yet reported: (id, title), the caller's wording in phone mode.

        ``both``: the title and the caller's wording together, so that either matches.
        """
        phone = self.session.mode == "phone"
        done = set(self.session.evidence.complaints)
        out = []
        for k in self.model.complaints.values():
            if k.id in done or k.hidden:  # a device pack's `hide`
                continue
            shown = (k.caller_title or k.title) if phone else k.title
            out.append((k.id, f"{k.title} / {k.caller_title}" if both and k.caller_title
                        else shown))
        return out

    def ask_complaint(self, *, first: bool) -> None:
        choices = self.complaint_choices()
        if first:
            from rich.table import Table

            self.heading("The complaint")
            table = Table(show_header=False, box=None, pad_edge=False, padding=(0, 1))
            table.add_column("n", justify="right", no_wrap=True)
            table.add_column("complaint", overflow="fold", ratio=1)
            table.add_column("id", style="dim", overflow="fold", max_width=28)
            for i, (cid, title) in enumerate(choices, 1):
                table.add_row(f"{i})", title, cid)
            self.console.print(table)
        if not first and not choices:
            self._more_complaints_done = True
            return

        def parse(text: str) -> str | None:
            if not text:
                if first:
                    raise InputError("complaint", "type a number or words of the complaint "
                                     "(Tab completes)")
                return None
            return self.pick(text, self.complaint_choices(both=True), "complaint")

        msg = ("Complaint (number or words of it): " if first else
               "Another complaint? (number or words; Enter to go on): ")
        cid = self.ask(msg, parse, answers=choices)
        if cid is None:
            self._more_complaints_done = True
            return
        self.session.add_complaint(cid)
        self.say(f"  complaint: {self.model.complaints[cid].title}", style="dim")

    def pick(self, text: str, choices: Sequence[Choice], what: str) -> str:
        """The id of ``choices`` that ``text`` names: a number, an id, or words of the title."""
        t = text.strip()
        if t.isdigit():
            n = int(t)
            if 1 <= n <= len(choices):
                return choices[n - 1][0]
            raise InputError(what, f"there is no number {n}; choose 1 to {len(choices)}")
        found = choose(t, choices)
        if len(found) > 1:  # prefer the one that has every typed word whole
            whole = [c for c in found if _has_words(t, c[1])]
            found = whole if len(whole) == 1 else found
        if len(found) == 1:
            return found[0][0]
        if len(found) > 1:
            listed = ", ".join(c for c, _ in found[:5])
            raise InputError(what, f"{t!r} fits several: {listed}; type more of it")
        close = difflib.get_close_matches(t, [c for c, _ in choices], n=1)
        hint = f"; did you mean {close[0]}?" if close else ""
        raise InputError(what, f"no {what} matches {t!r}{hint}")

    # --- the turn ---------------------------------------------------------------------------
    def turn(self) -> bool:
        """Ranking, the next check or repair, and its answer. True when the diagnosis ended."""
        s = self.session
        forced, self._forced = self._forced, None
        self._turn_forced = forced
        self._card = None
        if forced is not None:
            kind, item = forced
            action = None
        elif s.evidence.cured:  # the end is known without asking the planner
            from diagnose.reasoning.planner import Action

            action = Action("done", reason="a repair cured the unit")
            kind, item = "done", ""
        elif s.evidence.pending_repair:  # left during a repair: take it up again
            kind, item, action = "repair", s.evidence.pending_repair, None
        else:
            action = s.next_action()
            kind, item = action.kind, action.id or ""
        if kind in ("done", "escalate", "visit"):
            return self.finish(action)
        self.console.print("")
        self.console.print(self.ranking_view())
        if kind == "check":
            self.check_turn(item, action)
        elif kind == "repair":
            self.repair_turn(item, action)
        return False

    def ranking_view(self, top: int = 5) -> RankingView:
        """The leading causes as the shell shows them (only those are ranked)."""
        return RankingView.of(self.session.ranking(limit=RankingView.entries_for(top)), top=top)

    def cautions(self, ids: Sequence[str], reminded: Sequence[str] = ()
                 ) -> tuple[CautionView, ...]:
        """Cautions most serious first; those in ``reminded`` as one-line reminders."""
        order = {"DANGER": 0, "WARNING": 1, "CAUTION": 2, "NOTICE": 3}
        found = [self.model.cautions[c] for c in ids if c in self.model.cautions]
        found.sort(key=lambda c: (c.id in reminded, order.get(c.level, 9)))
        return tuple(CautionView(c.level, c.text, c.id in reminded) for c in found)

    def card_cautions(self, item_id: str) -> tuple[CautionView, ...]:
        """A card's cautions now: its own and its hazards', standing ones as reminders."""
        s = self.session
        return self.cautions(s.card_cautions(item_id), [c.id for c in s.reminders(item_id)])

    def check_card(self, chk: Check, action: Action | None, *, shown: bool) -> CheckCard:
        phone = self.session.mode == "phone"
        why = self._why_check(chk, action)
        outcomes = tuple((o, chk.outcome_titles.get(o, "")) for o in chk.outcomes)
        instructions = (chk.caller or chk.ask) if phone else chk.ask
        return CheckCard(chk.id, chk.title, chk.minutes, tuple(chk.tools),
                         self.card_cautions(chk.id), why, instructions if shown else None,
                         outcomes, self._bare_unit_words(chk),
                         "Ask the caller" if phone else "Check",
                         needs=() if phone else self.session.setup_for(chk.id), many=_many(chk),
                         readings=self._reading_words(chk))

    def _bare_unit_words(self, chk: Check) -> str:
        """The unit a bare number of this check's reading is taken in, for its card ("" none)."""
        if chk.measurement is None:
            return ""
        from diagnose.physics.units import bare_unit

        bare = bare_unit(chk.measurement.unit, self.units)
        return "inches" if bare == "in" and bare != chk.measurement.unit else unit_text(bare)

    def _reading_words(self, chk: Check) -> tuple[tuple[str, str], ...]:
        """The named readings of the check's card, each with the unit of a bare number."""
        m = chk.measurement
        if m is None or not m.also:
            return ()
        from diagnose.physics.units import bare_unit

        return tuple((r.name, unit_text(bare_unit(r.unit, self.units))) for r in m.readings)

    def _why_check(self, chk: Check, action: Action | None) -> str:
        phone = self.session.mode == "phone"
        if action is not None and action.kind == "check" and action.id == chk.id:
            if action.target:
                target = self.model.checks.get(action.target) or self.model.repairs.get(
                    action.target)
                name = target.title if target is not None else action.target
                others = [x for x in self.session.waiting_for(chk.id) if x != action.target]
                more = f" (and {len(others)} more step{'s' if len(others) > 1 else ''} wait " \
                    "for it)" if others else ""
                return f"it must be done first, before: {name}{more}"
            reason = action.reason
            base = why_text(action.bits, action.minutes, phone=phone)
            return f"{reason}; {base}" if reason else base
        try:
            x = self.session.explain_check(chk.id)
        except DiagnoseError:
            return "you chose it"
        return f"you chose it; {why_text(x.bits, x.minutes, phone=phone)}"

    def acknowledge(self, item_id: str) -> bool:
        """Ask for the acknowledgement of the card's pending DANGER/WARNING cautions.

        Each check or repair card asks for its own, recorded with the card's id.
        Returns False when the person chose to skip the check or repair instead.
        """
        pending = self.session.pending_cautions(item_id)
        if not pending:
            return True
        levels = _levels(pending)

        def parse(text: str) -> bool:
            word = text.lower()
            if word in ACK_WORDS:
                return True
            if word == "skip":
                return False
            raise InputError("acknowledge", f"type ack to confirm you have read the {levels} "
                             "above, or skip")

        ok = self.ask(self.ack_prompt(item_id), parse,
                      answers=(("ack", "I have read the cautions"),
                               ("skip", "cannot be done now")),
                      empty=f"type ack to confirm you have read the {levels} above")
        if not ok:
            return False
        for c in pending:
            self.session.acknowledge(c.id, item_id)
        self.say(f"  acknowledged: {', '.join(c.id for c in pending)}", style="dim")
        return True

    def ack_prompt(self, item_id: str) -> str:
        """The question that asks for the acknowledgement of the card's pending cautions."""
        levels = _levels(self.session.pending_cautions(item_id))
        return f"Type ack to confirm you have read the {levels} above (or skip): "

    def present(self, item_id: str, card: Callable[[bool], Any], prompt: str = "") -> bool:
        """Show the card of a check or repair; instructions only once its cautions are acknowledged.

        ``card(shown)`` makes the card with (True) or without (False) its
        instructions; ``prompt`` is the question asked after it. The card is
        compact (see ``render.SHORTENING``), so that it is on screen together with
        the acknowledgement's prompt, or with ``prompt``; ``more`` shows it whole.
        Returns False when the person chose to skip it instead.
        """
        from dataclasses import replace

        self._card = (item_id, card)
        standing = self.session.reminders(item_id)
        if standing:  # shown as one-line reminders: on the record too
            self.session.remind(item_id, [c.id for c in standing])
        if not self.session.pending_cautions(item_id):
            self.console.print(replace(card(True), fit=self.card_room(prompt)))
            return True
        self.console.print(replace(card(False), fit=self.card_room(self.ack_prompt(item_id))))
        if not self.acknowledge(item_id):
            return False
        self.console.print(card(True).instructions_view())
        return True

    def check_turn(self, check_id: str, action: Action | None) -> None:
        from diagnose.service import preferred_answer

        s = self.session
        chk = self.model.checks[check_id]
        self._current = ("check", check_id)
        if chk.measurement is not None:
            from diagnose.physics.units import bare_unit

            bare = bare_unit(chk.measurement.unit, self.units)
            msg = f"Reading ({unit_text(bare)} if no unit is given), unsure or skip: "
        else:
            msg = f"Answer ({'/'.join(chk.outcomes)}, unsure, skip): "
        if not self.present(check_id, lambda shown: self.check_card(chk, action, shown=shown),
                            msg):
            s.skip(check_id)
            self.say(f"  skipped {check_id}: another check is proposed", style="dim")
            return
        measured = chk.measurement is not None
        outcomes: list[Choice] = [(o, chk.outcome_titles.get(o, "")) for o in chk.outcomes]
        answers = outcomes + [("unsure", "done, but the answer is not clear"),
                              ("skip", "cannot be done now: propose another")]

        def parse(text: str) -> Any:
            low = text.lower()
            if low == "skip":
                s.skip(check_id)
                return None
            if low == "unsure":
                return s.unsure(check_id)
            if not measured:
                if low.isdigit():
                    n = int(low)
                    if not 1 <= n <= len(outcomes):
                        raise InputError(check_id, f"there is no answer {n}; "
                                         f"choose 1 to {len(outcomes)}")
                    return s.answer(check_id, outcomes[n - 1][0])
                found = answer_matches(text, outcomes)
                if len(found) == 1:
                    return s.answer(check_id, found[0])
                listed = ", ".join(o for o, _ in outcomes)
                raise InputError(check_id, f"{text!r} is not an answer ({listed}, unsure "
                                 "or skip) nor a command (help lists them)")
            named = [o for o, _ in outcomes if o.lower() == low]
            if named:  # a verdict typed by name ("ok", "open")
                return s.answer(check_id, named[0])
            if chk.measurement.also and "=" in text:  # named readings, all at once
                return s.answer(check_id, preferred_answer(chk, text, self.units))
            if not _READING.match(text):
                raise InputError(check_id, f"{text!r} is not a reading (a number with its unit, "
                                 f"such as 3.2 {chk.measurement.unit}, or OL for open), nor a "
                                 "command (help lists them)")
            try:
                return s.answer(check_id, preferred_answer(chk, text, self.units))
            except InputError as exc:
                more = ("; type: nameplate PARAM VALUE" if "nameplate value" in exc.message
                        else "")
                raise InputError(exc.field, f"{exc.message}{more} (or unsure, skip, help)"
                                 ) from None

        if measured and chk.measurement.also:  # several named readings: one prompt each
            finding = self._named_readings(chk, parse, answers)
        else:
            finding = self.ask(msg, parse, answers=answers,
                               empty="type the answer, unsure or skip (Tab completes; help "
                               "lists the commands)")
        self._current = None
        if finding is None:
            self.say(f"  skipped {check_id}: another check is proposed", style="dim")
            return
        self.show_finding(chk, finding)

    def _named_readings(self, chk: Check, parse: Callable[[str], Any],
                        answers: Sequence[Choice]) -> Any:
        """Ask each named reading of ``chk`` in turn (volts, then the gap), then answer it.

        The first prompt also takes them all at once (``gap=0.6 mm volts=23.5 V``),
        an outcome by name, unsure or skip; a later one takes a reading, or
        unsure or skip for the whole check.
        """
        from diagnose.physics.units import bare_unit
        from diagnose.service import named_reading, preferred_answer

        m = chk.measurement
        assert m is not None
        got: dict[str, str] = {}
        done = object()

        def one(name: str, last: bool) -> Callable[[str], Any]:
            def take(text: str) -> Any:
                low = text.lower()
                if low in ("skip", "unsure") or "=" in text or not _READING.match(text):
                    if got and "=" in text:
                        raise InputError(chk.id, f"type the {name} reading alone, or unsure "
                                                 "or skip")
                    return parse(text)
                got[name] = named_reading(chk, name, text, self.units)
                if not last:
                    return done
                return self.session.answer(chk.id, preferred_answer(chk, dict(got), "metric"))
            return take

        for i, r in enumerate(m.readings):
            bare = bare_unit(r.unit, self.units)
            about = f" ({r.ask})" if r.ask else ""
            msg = (f"Reading {i + 1} of {len(m.readings)}: {r.name}{about}, in "
                   f"{unit_text(bare)} if no unit is given; unsure or skip: ")
            result = self.ask(msg, one(r.name, i == len(m.readings) - 1),
                              answers=answers if i == 0 else answers[-2:],
                              empty=f"type the {r.name} reading, unsure or skip")
            if result is not done:
                return result
        return None

    def show_finding(self, chk: Check, finding: Any) -> None:
        from rich.text import Text

        if finding.outcome is None:
            self.say(f"  {chk.id}: unsure (recorded; no evidence either way)", style="dim")
            return
        if finding.verdict is not None:
            self.console.print(VerdictView(finding.verdict, self.units))
            if finding.soft:
                self.say("  near a band edge: counted as "
                         + ", ".join(f"{o} {w:.0%}" for o, w in finding.weights.items()))
            if finding.assumed:
                from diagnose.session import assumed_note

                defaults = {k: p.default for k, p in self.model.parameters.items()}
                self.say(f"  {assumed_note(self.session.evidence, finding.assumed, defaults)}",
                         style="yellow")
            return
        wording = chk.outcome_titles.get(finding.outcome, "")
        line = Text(f"  {chk.title}: ", style="bold")
        line.append(finding.outcome + (f" ({wording})" if wording else ""))
        self.console.print(line)

    def repair_card(self, rep: Repair, action: Action | None, *, shown: bool) -> RepairCard:
        fixes = tuple(self.model.causes[c].title for c in rep.fixes if c in self.model.causes)
        why = ""
        if action is not None and action.kind == "repair" and action.id == rep.id:
            why = f"{action.reason} (P that it fixes the cause: {percent(action.p)})"
        else:
            why = "you chose it"
        confirm = ""
        if rep.confirm and rep.confirm in self.model.checks:
            confirm = f"confirm with: {self.model.checks[rep.confirm].title}"
        return RepairCard(rep.id, rep.title, rep.minutes, tuple(rep.parts),
                          self.card_cautions(rep.id), fixes, why,
                          rep.ask if shown else None, confirm,
                          "The caller tries" if self.session.mode == "phone" else "Repair")

    def repair_turn(self, repair_id: str, action: Action | None) -> None:
        s = self.session
        rep = self.model.repairs[repair_id]
        self._current = ("repair", repair_id)
        asked = ("Has the caller done it? Is the complaint cured?" if s.mode == "phone"
                 else "Repair done. Is the complaint cured?")
        if not self.present(repair_id, lambda shown: self.repair_card(rep, action, shown=shown),
                            f"{asked} (yes/no, skip): "):
            self.skip_repair(repair_id)
            return

        def parse(text: str) -> bool | None:
            low = " ".join(text.lower().split())
            if low in YES:
                return True
            if low in NO:
                return False
            if low == "skip":
                return None
            raise InputError("cured", "answer yes or no, or skip if it cannot be done now "
                             "(or choose another step with do CHECK or repair REPAIR)")

        if s.evidence.pending_repair != repair_id:
            s.start_repair(repair_id)
        if s.mode == "site":
            self.observe_during(repair_id)
        cured = self.ask(f"{asked} (yes/no, skip): ", parse,
                         answers=(("yes", "cured"), ("no", "not cured"),
                                  ("skip", "cannot be done now: propose another step")),
                         empty="answer yes or no (or skip)")
        if cured is None:
            self.skip_repair(repair_id)
            return
        parts = self.ask_parts(rep) if s.mode == "site" else []
        s.repair(repair_id, cured, parts)
        self._current = None
        if cured:
            self.say(f"  {rep.title}: cured.", style="green")
        else:
            self.say(f"  {rep.title}: not cured; the ranking is updated.", style="yellow")

    def ask_parts(self, rep: Repair) -> list[dict[str, Any]]:
        """The parts fitted at the repair, for the log (Enter: none)."""
        from diagnose.service.parts import HINT, parse_parts

        listed = list(rep.parts)
        for i, part in enumerate(listed, 1):
            self.say(f"  {i}) {part}", style="dim")
        return self.ask(f"Parts fitted ({HINT}): ", lambda t: parse_parts(t, listed),
                        answers=tuple((str(i), p) for i, p in enumerate(listed, 1)))

    def observe_during(self, repair_id: str) -> None:
        """The checks in plain sight while the repair has the unit apart: no extra minutes.

        Each answer is recorded as the check's answer, so a repair that does not
        cure never needs a second removal just to look.
        """
        s = self.session
        for chk in s.repair_observations(repair_id):
            if chk.measurement is not None:
                continue
            outcomes: list[Choice] = [(o, chk.outcome_titles.get(o, "")) for o in chk.outcomes]
            self.say(f"While it is apart, look at: {chk.title} (no extra minutes)",
                     style="bold")
            for i, (o, wording) in enumerate(outcomes, 1):
                self.say(f"  {i}. {o}" + (f": {wording}" if wording else ""))

            def parse(text: str, outcomes: list[Choice] = outcomes) -> str | None:
                low = text.lower()
                if low in ("skip", "not seen"):
                    return None
                if low.isdigit() and 1 <= int(low) <= len(outcomes):
                    return outcomes[int(low) - 1][0]
                found = answer_matches(text, outcomes)
                if len(found) == 1:
                    return found[0]
                raise InputError(chk.id, "type the number or words of what you see, or skip "
                                 "if you cannot see it")

            seen = self.ask("What do you see? (number, words, or skip): ", parse,
                            answers=tuple(outcomes) + (("skip", "not seen"),),
                            empty="type what you see, or skip")
            if seen is not None:
                s.answer(chk.id, seen)
                self.say(f"  {chk.title}: {seen}", style="dim")

    def skip_repair(self, repair_id: str) -> None:
        """The repair cannot be done now (no part, no access): the planner proposes another step."""
        self.session.skip_repair(repair_id)
        self._current = None
        self.say(f"  skipped {repair_id}: it is not proposed again (undo takes that back)",
                 style="dim")

    # --- the end -----------------------------------------------------------------------------
    def finish(self, action: Action | None) -> bool:
        """Show the result and close the diagnosis; True when it is closed."""
        s = self.session
        assert action is not None
        self.console.print("")
        self.console.print(self.ranking_view())
        view = self.end_view(action)
        self.console.print(view)
        if action.kind != "done":
            def parse(text: str) -> bool:
                if text.lower() in YES:
                    return True
                raise InputError("close", "type yes to close the diagnosis with this result, "
                                 "or a command such as do CHECK, repair REPAIR or undo")

            self.ask("Close the diagnosis with this result? (yes, or a command): ", parse,
                     answers=(("yes", "close the diagnosis"),),
                     empty="type yes to close, or a command (help lists them)")
        finding = None
        if s.evidence.cured:
            result = "resolved"
            finding = self.ask_finding()
        else:
            result = {"visit": "visit", "escalate": "escalated"}.get(action.kind, "abandoned")
        s.end(result, parts=action.parts, finding=finding)
        self.say(f"Session {s.session_id} is closed.", style="bold")
        return True

    def ask_finding(self) -> str:
        """What the technician found: the cause the cure confirms (the leading one by Enter)."""
        s = self.session
        cured = [r for r, c in s.evidence.repairs if c]
        rep = self.model.repairs.get(cured[-1]) if cured else None
        fixes = [c for c in (rep.fixes if rep else ()) if c in self.model.causes]
        ranked = [e.cause for e in s.ranking().entries if e.cause in self.model.causes]
        choices = sorted(fixes, key=ranked.index) if fixes else ranked[:5]
        top = choices[0] if choices else "unknown"
        for i, c in enumerate(choices, 1):
            self.say(f"  {i}) {self.model.causes[c].title}", style="dim")

        def parse(text: str) -> str:
            low = text.strip().lower()
            if not low:
                return top
            if low.isdigit() and 1 <= int(low) <= len(choices):
                return choices[int(low) - 1]
            if low in self.model.causes or low == "unknown":
                return low
            if len(low.split()) >= 3:  # what was found, in words: kept for the log
                s.note(f"Finding: {text.strip()}")
                self.say("  kept as a note for the repair log; now the cause it was "
                         f"(1 to {len(choices)}, a cause id, unknown; Enter: {title})",
                         style="dim")
                return noted
            raise InputError("finding", f"a number 1 to {len(choices)}, a cause id, or "
                                        "unknown (none of the known causes); a sentence is "
                                        "kept as a note")

        noted = object()
        title = self.model.causes[top].title if top in self.model.causes else top
        while True:
            found = self.ask(f"What did you find? [{title}]: ", parse,
                             answers=tuple((c, self.model.causes[c].title) for c in choices)
                             + (("unknown", "none of the known causes"),))
            if found is not noted:
                return found

    def end_view(self, action: Action) -> EndView:
        s = self.session
        ev = s.evidence
        top = s.ranking(limit=1).top
        title = self.model.causes[top.cause].title if top.cause in self.model.causes else top.title
        phone = s.mode == "phone"
        if action.kind == "done" and ev.cured:
            cured = [r for r, c in ev.repairs if c]
            rep = self.model.repairs.get(cured[-1]) if cured else None
            head = "Resolved by phone." if phone else "Cured."
            return EndView("cured", f"{head} Cause: {title} ({percent(top.p)}).",
                           (f"{'What' if phone else 'Repair that'} cured it: {rep.title}"
                            if rep else "",), log=self.log_hint())
        if action.kind == "visit":
            from diagnose.service.handoff import handoff

            brief = handoff(s, action.parts, action.causes)
            return EndView("visit", "Recommendation: send a technician to the site.",
                           (*brief.lines(), _sentence(action.reason)),
                           tuple(action.parts), self.log_hint())
        if action.kind == "escalate":
            head = ("Recommendation: a site visit with an application engineer; none of the "
                    "known causes fits." if phone else "None of the known causes fits: escalate "
                    "to an application engineer or the manufacturer.")
            # of the two leading entries, one at least is a known cause (when any is left)
            known = next((e for e in s.ranking(limit=2).entries if e.cause in self.model.causes),
                         None)
            ruled, total = s.ruled_out()
            lines = [_sentence(action.reason)]
            if total:
                lines.append(f"Ruled out: {len(ruled)} of the {total} known causes of the "
                             "complaint (each below 2 %).")
            if known is not None:
                lines.append(f"Leading known cause: {known.title} ({percent(known.p)}).")
            return EndView("unknown", head, tuple(lines), log=self.log_hint())
        return EndView("stopped", _sentence(action.reason) or "Nothing more to do.",
                       log=self.log_hint())

    def _show_end_of_closed(self) -> None:
        end = self.session.evidence.end or {}
        self.say(f"This diagnosis is closed ({end.get('result', 'closed')}). "
                 f"Repair log: {self.log_hint()}")

    def log_hint(self) -> str:
        """Where the repair log is: the report command and the journal file."""
        sid = self.session.session_id
        if self.journal_path:
            from diagnose.paths import mask_url

            return f"diagnose report {sid} (journal {mask_url(self.journal_path)})"
        return "none: no journal in use, the events were not stored"

    def _goodbye(self) -> None:
        s = self.session
        if s.ended:
            return
        if self.journal_path:
            from diagnose.service import resume_command

            self.say("Saved. Resume with:", style="bold")
            # on a line of its own and never folded, so that it can be copied as it is
            self.console.print(resume_command(s.session_id, self.journal_path), soft_wrap=True,
                               markup=False, highlight=False, emoji=False)
        else:
            self.say("Left without a journal: nothing was stored.", style="bold")

    # --- the toolbar ----------------------------------------------------------------------
    def steps(self) -> int:
        return steps_taken(self.session.events)

    def toolbar(self) -> str:
        """mode | session | steps | the leading cause: the bottom toolbar's text.

        The leading cause by its title, shortened to the room left; the pack is
        named at the start of the session and by `help`.
        """
        s = self.session
        cause, share = "-", ""
        try:
            if s.evidence.complaints:
                top = s.ranking(limit=1).top
                cause, share = top.title or top.cause, f" {percent(top.p)}"
        except Exception:  # noqa: BLE001 - drawn on every key, it must never fail
            cause, share = "-", ""
        head = f" {s.mode} | session {s.session_id} | step {self.steps()} | "
        room = _width() - len(head) - len(share) - 1
        if len(cause) > room:  # shorten the cause's title, keep its probability
            cause = cause[: max(room - 1, 1)].rstrip() + "…"
        return f"{head}{cause}{share} "

    # --- what the commands call ------------------------------------------------------------
    def mode_hint(self) -> None:
        """What the mode means, said as it starts (phone mode only)."""
        if self.session.mode == "phone":
            self.say(PHONE_HINT, style="dim")

    @property
    def current(self) -> tuple[str, str] | None:
        """What the question being asked is about: ("check"|"repair", id), or None."""
        return self._current

    def restart(self, then: tuple[str, str] | None = None) -> NoReturn:
        """Start the turn anew: the state changed under the question (undo, mode...).

        ``then``: the ("check"|"repair", id) the person chose to do next.
        """
        if then is not None:
            self._forced = then
        raise Restart

    def show_again(self) -> NoReturn:
        """Start the turn anew on the same question: its card may depend on what changed."""
        self._forced = self._turn_forced
        raise Restart

    def leave(self) -> NoReturn:
        """Leave the shell (`quit`); the session stays resumable."""
        raise Leave


def answer_matches(text: str, outcomes: Sequence[Choice]) -> list[str]:
    """The outcomes ``text`` names: its id or its wording in full, else a unique start of an id.

    Stricter than completion: an answer changes the ranking, so "no" must not
    be taken for "none of these".

    >>> answer_matches("no click", [("click", "a clear click"), ("silent", "no click")])
    ['silent']
    >>> answer_matches("sil", [("click", "a clear click"), ("silent", "no click")])
    ['silent']
    >>> answer_matches("no", [("brake_fault", "a brake fault"), ("other", "none")])
    []
    """
    def squash(t: str) -> str:
        return " ".join(t.lower().replace("_", " ").replace("-", " ").split())

    key = squash(text)
    exact = [o for o, wording in outcomes if key in (squash(o), squash(wording))]
    if exact:
        return exact
    if len(key) < 2:
        return []
    return [o for o, _ in outcomes if squash(o).startswith(key)]


def _many(chk: Check) -> bool:
    """Whether the check's measurement takes several readings (an air gap at three points)."""
    from diagnose.physics.registry import EVALUATORS

    m = chk.measurement
    spec = EVALUATORS.get(m.evaluator) if m is not None else None
    if m is None or spec is None:
        return False
    inp = spec.input(m.reading or spec.reading or "")
    return bool(inp is not None and inp.many)


def _has_words(typed: str, text: str) -> bool:
    """Whether every word typed is a whole word of ``text`` (case-insensitive).

    >>> _has_words("release", "Brake will not release"), _has_words("release", "releases late")
    (True, False)
    """
    words = set(re.findall(r"\w+", text.lower()))
    return all(w in words for w in re.findall(r"\w+", typed.lower()))


def wrap_prompt(message: str, width: int) -> str:
    """``message`` with line breaks between words, so that no line is wider than ``width - 1``.

    A terminal prompt breaks a long message anywhere, even inside a word; this
    breaks it between words first. The trailing space (before the answer) stays.

    >>> wrap_prompt("Supply (converter/battery/rectified) [converter]: ", 30)
    'Supply\\n(converter/battery/rectified)\\n[converter]: '
    >>> wrap_prompt("Short: ", 80)
    'Short: '
    """
    limit = max(width - 1, 10)
    body = message.rstrip(" ")
    tail = message[len(body):]
    if all(len(line) <= limit for line in (body + tail).split("\n")):
        return message
    out: list[str] = []
    for para in body.split("\n"):
        line = ""
        for word in para.split(" "):
            if line and len(line) + 1 + len(word) > limit:
                out.append(line)
                line = word
            else:
                line = f"{line} {word}" if line else word
        out.append(line)
    if len(out[-1]) + len(tail) > limit and " " in out[-1]:  # room for the trailing space
        head, _, last = out[-1].rpartition(" ")
        out[-1:] = [head, last]
    return "\n".join(out) + tail


def _levels(pending: Sequence[Any]) -> str:
    """ "DANGER", "WARNING" or "DANGER and WARNING": the signal words to acknowledge."""
    return " and ".join(sorted({c.level for c in pending},
                               key=lambda lv: ("DANGER", "WARNING").index(lv)))


def _width() -> int:
    """The terminal's width in columns (80 when unknown)."""
    import shutil

    return shutil.get_terminal_size((80, 24)).columns


def _sentence(text: str) -> str:
    """ "nothing more to learn" -> "Nothing more to learn." ("" stays "")."""
    text = text.strip()
    if not text:
        return ""
    return text[0].upper() + text[1:] + ("" if text.endswith(".") else ".")


def _message(exc: InputError) -> str:
    return f"{exc.field}: {exc.message}" if exc.field else exc.message
