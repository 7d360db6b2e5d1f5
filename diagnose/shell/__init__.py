"""The interactive face: a diagnosis shell on prompt_toolkit (input) and rich (output).

``diagnose.shell.app`` holds the loop; the rest are small parts it uses:
``commands`` (the shell's command registry), ``render`` (what is shown),
``complete`` (completers), ``keys`` (key bindings), ``reader`` (input from a
terminal or, without one, line by line), ``startup`` (at a terminal, the
safety notice is read while the pack loads). Nothing heavy is imported here.
"""
