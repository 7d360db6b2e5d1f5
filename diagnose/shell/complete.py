"""Completion for the shell: answers, commands and their arguments, from live state.

The completer holds no state of its own: it calls ``state()`` on every key
press and completes from what that returns, so it always offers the current
question's outcomes, the checks still open, and so on. Matching is by any
word: "rel" finds "Brake will not release", "coil res" finds
"Coil resistance, leads disconnected".
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

Choice = tuple[str, str]  # (text to insert, what it means)


@dataclass(frozen=True)
class CompletionState:
    """What can be typed at the current question.

    ``answers`` complete the first word (outcomes, yes/no, complaints...);
    ``commands`` too, when the question takes commands; ``arguments`` maps
    a command name to the choices of its argument.
    """

    answers: Sequence[Choice] = ()
    commands: Sequence[Choice] = ()
    arguments: Mapping[str, Sequence[Choice]] = field(default_factory=dict)


def matches(query: str, text: str, meaning: str = "") -> bool:
    """Whether every typed word starts some word of ``text`` or ``meaning`` (case-insensitive).

    >>> matches("rel", "will_not_release", "Brake will not release")
    True
    >>> matches("coil res", "coil_resistance", "Coil resistance, leads disconnected")
    True
    >>> matches("fuse", "coil_open", "Coil winding open")
    False
    """
    typed = query.lower().split()
    if not typed:
        return True
    words = _words(text) + _words(meaning)
    whole = text.lower()
    return all(any(w.startswith(t) for w in words) or whole.startswith(t) for t in typed)


def _words(text: str) -> list[str]:
    out: list[str] = []
    word = []
    for ch in text.lower():
        if ch.isalnum():
            word.append(ch)
        elif word:
            out.append("".join(word))
            word = []
    if word:
        out.append("".join(word))
    return out


def choose(query: str, choices: Iterable[Choice]) -> list[Choice]:
    """The choices that ``query`` matches; an exact id first.

    >>> choose("silent", [("click", "a clear click"), ("silent", "no click")])
    [('silent', 'no click')]
    """
    pool = list(choices)
    q = query.strip().lower()
    exact = [c for c in pool if c[0].lower() == q]
    if exact:
        return exact
    return [c for c in pool if matches(q, c[0], c[1])]


def __getattr__(name: str) -> Any:
    """``ShellCompleter`` is made when first asked for: piped input never imports prompt_toolkit."""
    if name == "ShellCompleter":
        from diagnose.shell.completer import ShellCompleter

        return ShellCompleter
    raise AttributeError(name)
