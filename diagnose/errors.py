"""The one exception root of the project and its few documented subclasses.

Library layers raise these; only the faces (cli, shell) turn them into a
one-line message and an exit status.
"""

from __future__ import annotations

from dataclasses import dataclass


class DiagnoseError(Exception):
    """Root of every error the project raises on purpose."""


class InputError(DiagnoseError):
    """A value a person typed or passed is not usable.

    ``field`` names the input (a calculator option, a nameplate parameter,
    a check id) so that the message can say which one is wrong. A quoted
    value longer than 80 characters in the message is cut, with its length.
    """

    def __init__(self, field: str, message: str) -> None:
        from diagnose.text import short_values

        field, message = short_values(field), short_values(message)
        super().__init__(f"{field}: {message}")
        self.field = field
        self.message = message


@dataclass(frozen=True)
class Source:
    """Where an entity or a value was written: file, 1-based line and column."""

    file: str
    line: int = 0
    col: int = 0

    def __str__(self) -> str:
        if self.line:
            return f"{self.file}:{self.line}:{self.col or 1}"
        return self.file


@dataclass(frozen=True)
class Problem:
    """One finding of the loader, compiler or lint, tied to a place in a pack."""

    level: str  # "error" or "warning"
    message: str
    source: Source | None = None
    code: str = ""

    def __str__(self) -> str:
        where = f"{self.source}: " if self.source else ""
        tag = f" [{self.code}]" if self.code else ""
        return f"{where}{self.level}: {self.message}{tag}"


class KnowledgeError(DiagnoseError):
    """A knowledge pack cannot be used; carries every problem found, not only the first."""

    def __init__(self, problems: list[Problem] | tuple[Problem, ...], summary: str = "") -> None:
        self.problems = tuple(problems)
        errors = [p for p in self.problems if p.level == "error"]
        first = str(errors[0]) if errors else (summary or "knowledge pack has errors")
        more = f" (and {len(errors) - 1} more)" if len(errors) > 1 else ""
        super().__init__(summary or f"{first}{more}")


class JournalError(DiagnoseError):
    """The journal store cannot be opened or written (damaged, newer, read-only)."""
