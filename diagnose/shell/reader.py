"""Where the shell's answers come from: a terminal (prompt_toolkit) or lines of text.

Both readers have one method, ``ask(message, state, default="")``, which
returns the line typed (without its newline, its control characters shown
as placeholders by :func:`diagnose.text.clean`) and raises ``EOFError`` at the
end of the input (Ctrl-D) and ``KeyboardInterrupt`` on Ctrl-C where the
terminal does not clear the line itself. ``state`` is what the completer
offers at that question.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import IO, Any

from diagnose.shell.complete import CompletionState
from diagnose.text import clean

HISTORY_FILE = "history"


def history_path(env: dict[str, str] | None = None) -> Path:
    """The file where the shell keeps what was typed, across sessions (per user), in the
    state folder (:func:`diagnose.paths.state_dir`)."""
    from diagnose.paths import state_dir

    return state_dir(env) / HISTORY_FILE


def file_history() -> Any:
    """A prompt_toolkit history in :func:`history_path`, or in memory if that cannot be written."""
    from prompt_toolkit.history import FileHistory, InMemoryHistory

    path = history_path()
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        path.touch(exist_ok=True)
    except OSError:
        return InMemoryHistory()
    return FileHistory(str(path))


class PromptReader:
    """Answers typed at a terminal, with completion, history, key bindings and a toolbar.

    ``session`` is a ``prompt_toolkit.PromptSession`` made by the caller (a
    pipe input and a dummy output in tests); this reader gives it the
    completer, the key bindings and the bottom toolbar.
    """

    def __init__(self, session: Any, toolbar: Callable[[], Any] | None = None) -> None:
        from diagnose.shell.complete import ShellCompleter
        from diagnose.shell.keys import load_shell_bindings

        self.session = session
        self.state = CompletionState()
        self.completer = ShellCompleter(lambda: self.state)
        self.bindings = load_shell_bindings()
        self.toolbar = toolbar

    def ask(self, message: str, state: CompletionState | None = None, default: str = "") -> str:
        self.state = state or CompletionState()
        kwargs: dict[str, Any] = {"completer": self.completer, "key_bindings": self.bindings,
                                  "complete_while_typing": True, "default": default}
        if self.toolbar is not None:
            kwargs["bottom_toolbar"] = self.toolbar
        return clean(self.session.prompt(clean(message), **kwargs))


class LineReader:
    """Answers read line by line from a stream (a script, a pipe): no terminal needed.

    The question and the answer are echoed to ``console`` so that the output
    reads as a transcript.
    """

    def __init__(self, stream: IO[str], console: Any) -> None:
        self.stream = stream
        self.console = console

    def ask(self, message: str, state: CompletionState | None = None, default: str = "") -> str:
        line = self.stream.readline()
        if not line:
            raise EOFError
        line = clean(line.rstrip("\r\n"))
        self.console.print(f"{clean(message)}{line}", markup=False, highlight=False,
                           soft_wrap=True)
        return line
