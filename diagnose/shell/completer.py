"""The shell's completer for prompt_toolkit: Tab over what :class:`CompletionState` offers.

Kept apart from :mod:`diagnose.shell.complete` so that a shell reading piped
input (no terminal, no completion) never imports prompt_toolkit.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Sequence
from typing import Any

from prompt_toolkit.completion import Completer, Completion

from diagnose.shell.complete import Choice, CompletionState, matches


class ShellCompleter(Completer):
    """A prompt_toolkit completer over ``state()`` (see :class:`CompletionState`)."""

    def __init__(self, state: Callable[[], CompletionState]) -> None:
        self.state = state

    def get_completions(self, document: Any, complete_event: Any) -> Iterator[Completion]:
        st = self.state()
        before = document.text_before_cursor
        stripped = before.lstrip()
        head, sep, rest = stripped.partition(" ")
        if sep and head.lower() in st.arguments:
            pool: Sequence[Choice] = st.arguments[head.lower()]
            query = rest
        elif sep and st.commands and head.lower() in {c for c, _ in st.commands}:
            return
        else:
            pool = list(st.answers) + [c for c in st.commands
                                       if c[0] not in {a for a, _ in st.answers}]
            query = stripped
        for text, meaning in pool:
            if matches(query, text, meaning):
                yield Completion(text, start_position=-len(query), display=text,
                                 display_meta=meaning or None)
