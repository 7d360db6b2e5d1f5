"""What a help-desk agent hands to the technician who visits the site.

At the end of a phone diagnosis the site visit is prepared from what the
call established: what the caller confirmed (each question and its
answer, in the pack's words), the known causes the answers ruled out, the
leading causes with their likelihood in words, the parts to bring, and the
cautions the site work will carry (those of the repairs for the leading
causes, most serious first). The shell shows it; the repair log records it.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from diagnose.text import likelihood_words, percent

RULED_OUT = 0.02  # below this a cause of the complaint counts as ruled out (as `ruled_out`)
_LEVELS = {"DANGER": 0, "WARNING": 1, "CAUTION": 2, "NOTICE": 3}


@dataclass(frozen=True)
class Handoff:
    """The site visit's brief."""

    confirmed: tuple[str, ...]  # "question: answer"
    ruled_out: tuple[str, ...]  # cause titles
    leading: tuple[str, ...]  # "title: likely (62%)"
    parts: tuple[str, ...]
    cautions: tuple[str, ...]  # "DANGER: text"

    def lines(self, *, ruled_out: int = 3) -> tuple[str, ...]:
        """The brief as lines for a screen or a log (at most ``ruled_out`` causes named)."""
        out = []
        if self.confirmed:
            out.append("The caller confirmed: " + "; ".join(self.confirmed) + ".")
        if self.ruled_out:
            named = "; ".join(self.ruled_out[:ruled_out])
            more = len(self.ruled_out) - ruled_out
            out.append(f"Ruled out: {named}" + (f"; and {more} more." if more > 0 else "."))
        if self.leading:
            out.append("Most likely: " + "; ".join(self.leading) + ".")
        for c in self.cautions:
            out.append(f"On site: {c}")
        return tuple(out)


def handoff(session: Any, parts: Sequence[str] = (), causes: Sequence[str] = ()) -> Handoff:
    """The brief for the visit that ends phone session ``session``.

    ``parts`` and ``causes``: those of the planner's visit (its parts to bring and
    the causes it is for); the leading causes of the ranking when none are given.
    """
    model, ev = session.model, session.evidence
    confirmed = []
    for cid, weights in ev.findings.items():
        chk = model.checks.get(cid)
        if chk is None or len(weights) != 1:
            continue
        outcome = next(iter(weights))
        words = chk.outcome_titles.get(outcome) or outcome.replace("_", " ")
        confirmed.append(f"{chk.title}: {words}")
    ruled, _total = session.ruled_out(RULED_OUT)
    ranking = [e for e in session.ranking().entries if e.cause in model.causes]
    wanted = list(causes) or [e.cause for e in ranking[:3]]
    p = {e.cause: e.p for e in ranking}
    leading = tuple(f"{model.causes[c].title}: {likelihood_words(p.get(c, 0.0))} "
                    f"({percent(p.get(c, 0.0))})" for c in wanted if c in model.causes)
    return Handoff(tuple(confirmed), tuple(model.causes[c].title for c in ruled), leading,
                   tuple(parts), _site_cautions(session, wanted))


def _site_cautions(session: Any, causes: Sequence[str]) -> tuple[str, ...]:
    """The cautions of the repairs for ``causes``, once each, most serious first."""
    model = session.model
    found: dict[str, Any] = {}
    for rep in model.repairs.values():
        if not set(rep.fixes) & set(causes):
            continue
        for cid in session.card_cautions(rep.id):
            c = model.cautions.get(cid)
            if c is not None:
                found.setdefault(cid, c)
    ordered = sorted(found.values(), key=lambda c: (_LEVELS.get(c.level, 9), c.id))
    return tuple(f"{c.level}: {c.text}" for c in ordered)
