"""The shell's key bindings, in one place."""

from __future__ import annotations

from typing import Any


def load_shell_bindings() -> Any:
    """The key bindings of the diagnosis shell (a prompt_toolkit ``KeyBindings``).

    Ctrl-C clears the current input instead of leaving; Ctrl-D on an empty
    line ends the input (the shell then asks whether to save and leave); F1
    shows the help.
    """
    from prompt_toolkit.key_binding import KeyBindings

    kb = KeyBindings()

    @kb.add("c-c")
    def _clear(event: Any) -> None:
        """Clear the current input and stay at the same question."""
        event.app.current_buffer.reset()

    @kb.add("f1")
    def _help(event: Any) -> None:
        """Show the help: as if `help` had been typed."""
        event.app.current_buffer.text = "help"
        event.app.current_buffer.validate_and_handle()

    @kb.add("escape", "escape")
    def _clear_too(event: Any) -> None:
        """Clear the current input (Esc Esc)."""
        event.app.current_buffer.reset()

    return kb
