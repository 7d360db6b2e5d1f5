"""diagnose: a diagnostic assistant for electromagnetic holding brakes.

Layers, lowest first (see DEVELOPERS.md): physics, kb, reasoning,
session/journal, faces (cli, shell, report). A layer imports only from
layers below it.
"""

__version__ = "0.1.0"
