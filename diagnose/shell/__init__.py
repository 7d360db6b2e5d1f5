"""The interactive face: a diagnosis shell on prompt_toolkit (input) and rich (output).

``diagnose.shell.app`` holds the question flow; the rest are small parts:
``commands`` (every shell command, its help and its completion, in one
place), ``entry`` (start and resume: the pack, the journal, the reader),
``cli`` (the `start` and `resume` subcommands), ``complete`` (completers),
``keys`` (key bindings), ``reader`` (input from a terminal or, without one,
line by line), ``startup`` (at a terminal, the safety notice is read while
the pack loads). What is shown comes from ``diagnose.views``. Nothing heavy
is imported here.
"""
