"""Lint: every problem of one or more packs, as lines a trainer can jump to."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

from diagnose.errors import DiagnoseError, Problem


@dataclass
class LintResult:
    """The problems of one pack; ``ok`` says whether it passes (warnings fail only if strict)."""

    ref: str
    problems: list[Problem] = field(default_factory=list)

    @property
    def errors(self) -> list[Problem]:
        return [p for p in self.problems if p.level == "error"]

    @property
    def warnings(self) -> list[Problem]:
        return [p for p in self.problems if p.level == "warning"]

    def ok(self, strict: bool = False) -> bool:
        return not self.errors and not (strict and self.warnings)


def lint_paths(refs: list[str], *, search: list[str] | None = None,
               extra: Callable[[object], list[Problem]] | None = None) -> list[LintResult]:
    """Lint each pack in ``refs``; ``extra(model)`` adds further findings (the analysis)."""
    from diagnose.kb.loader import check_pack

    results = []
    for ref in refs:
        res = LintResult(ref)
        try:
            model, problems = check_pack(ref, search=search)
        except DiagnoseError as exc:
            res.problems.append(Problem("error", str(exc), None, "pack"))
            results.append(res)
            continue
        res.problems.extend(problems)
        if model is not None and extra is not None:
            res.problems.extend(extra(model))
        results.append(res)
    return results
