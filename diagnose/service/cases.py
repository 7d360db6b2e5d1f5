"""Knowledge tests: play each test case of a pack and compare the top cause with ``expect_top``.

A case passes when, after all its steps, the top of the ranking (a cause or
"unknown") is one of ``expect_top``, and each further expectation holds:

* ``expect_below``: each named cause ends below its probability;
* ``expect_absent``: each named cause is ruled out by the nameplate (it is
  not in the ranking at all);
* ``expect_not_asked``: after the nameplate and after every step, the
  planner never proposes these checks, and none of these nameplate
  questions is still to be asked;
* ``expect_offered``: each of these checks was offered as a free
  observation on the card of a repair step of the case.

``diagnose kb test PACK`` runs them.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from diagnose.errors import DiagnoseError, Source
from diagnose.kb.model import Case, Model


@dataclass(frozen=True)
class CaseResult:
    """The outcome of one knowledge test case; ``ranking`` is filled on failure."""

    case: str
    title: str
    passed: bool
    top: str | None
    p: float
    expect_top: tuple[str, ...]
    ranking: tuple[tuple[str, float], ...] = ()
    message: str = ""
    source: Source | None = None

    def to_dict(self) -> dict[str, Any]:
        out: dict[str, Any] = {"case": self.case, "passed": self.passed, "top": self.top,
                               "p": round(self.p, 6), "expect_top": list(self.expect_top)}
        if self.title:
            out["title"] = self.title
        if self.source is not None:
            out["source"] = str(self.source)
        if not self.passed:
            out["ranking"] = [{"cause": c, "p": round(p, 6)} for c, p in self.ranking]
            out["message"] = self.message
        return out

    def __str__(self) -> str:
        where = f"{self.source}: " if self.source else ""
        if self.passed:
            return f"{where}PASS {self.case}: {self.top} ({self.p:.2f})"
        return f"{where}FAIL {self.case}: {self.message}"


def run_case(model: Model, case: Case, *, shown: int = 5) -> CaseResult:
    """Play one case; a step the model or the physics refuses makes it fail with the reason."""
    try:
        session, asked, offered = _play(model, case)
        ranking = session.ranking()
    except DiagnoseError as exc:
        return CaseResult(case.id, case.title, False, None, 0.0, case.expect_top,
                          message=f"step refused: {exc}", source=case.source)
    top = ranking.top
    problems = [] if top.cause in case.expect_top else [
        f"top is {top.cause} ({top.p:.2f}), expected {' or '.join(case.expect_top)}"]
    p_of = {e.cause: e.p for e in ranking.entries}
    for cause, limit in case.expect_below.items():
        if p_of.get(cause, 0.0) >= limit:
            problems.append(f"{cause} is {p_of[cause]:.2f}, expected below {limit:g}")
    present = [c for c in case.expect_absent if c in p_of]
    if present:
        problems.append(f"{', '.join(present)} still in the ranking")
    wrongly = [c for c in case.expect_not_asked if c in asked]
    if wrongly:
        problems.append(f"{', '.join(wrongly)} asked")
    missing = [c for c in case.expect_offered if c not in offered]
    if missing:
        problems.append(f"{', '.join(missing)} not offered during a repair")
    passed = not problems
    listed = tuple((e.cause, e.p) for e in ranking.entries[:shown])
    message = "; ".join(problems)
    return CaseResult(case.id, case.title, passed, top.cause, top.p, case.expect_top,
                      () if passed else listed, message, case.source)


def _play(model: Model, case: Case) -> tuple[Any, set[str], set[str]]:
    """Play ``case`` as :func:`diagnose.session.play_case` does, watching what is asked.

    Returns the session, the checks proposed and nameplate questions left
    open along the way (only when the case expects some not to be), and the
    checks offered on the cards of its repairs.
    """
    from diagnose.session import Session

    session = Session(model, mode=case.mode, max_faults=case.max_faults)
    for param, value in case.nameplate.items():
        session.set_nameplate(param, value)
    asked: set[str] = set()
    offered: set[str] = set()
    watch = bool(case.expect_not_asked)
    if watch:
        asked.update(session.open_parameters())
    for k in case.complaints:
        session.add_complaint(k)

    def proposed() -> None:
        if watch and not session.ended:
            action = session.next_action()
            if action.kind == "check" and action.id:
                asked.add(action.id)

    proposed()
    for step in case.steps:
        if step.repair and not step.skip:
            offered.update(c.id for c in session.repair_observations(step.repair))
        session.apply_step(step)
        proposed()
    return session, asked, offered


def run_cases(model: Model) -> list[CaseResult]:
    """Every test case of ``model``, in listing order."""
    return [run_case(model, case) for case in model.cases.values()]
