"""Knowledge tests: play each test case of a pack and compare the top cause with ``expect_top``.

A case passes when, after all its steps, the top of the ranking (a cause or
"unknown") is one of ``expect_top``. ``diagnose kb test PACK`` runs them.
"""

from __future__ import annotations

from collections.abc import Iterator
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

    def __rich_console__(self, console: Any, options: Any) -> Iterator[Any]:
        from rich.text import Text

        yield Text(str(self), style="green" if self.passed else "bold red")
        if not self.passed and self.ranking:
            for cause, p in self.ranking:
                yield Text(f"    {p:.3f}  {cause}")


def run_case(model: Model, case: Case, *, shown: int = 5) -> CaseResult:
    """Play one case; a step the model or the physics refuses makes it fail with the reason."""
    from diagnose.session import play_case

    try:
        session = play_case(model, case)
        ranking = session.ranking()
    except DiagnoseError as exc:
        return CaseResult(case.id, case.title, False, None, 0.0, case.expect_top,
                          message=f"step refused: {exc}", source=case.source)
    top = ranking.top
    passed = top.cause in case.expect_top
    listed = tuple((e.cause, e.p) for e in ranking.entries[:shown])
    message = "" if passed else (f"top is {top.cause} ({top.p:.2f}), expected "
                                 f"{' or '.join(case.expect_top)}")
    return CaseResult(case.id, case.title, passed, top.cause, top.p, case.expect_top,
                      () if passed else listed, message, case.source)


def run_cases(model: Model) -> list[CaseResult]:
    """Every test case of ``model``, in listing order."""
    return [run_case(model, case) for case in model.cases.values()]
