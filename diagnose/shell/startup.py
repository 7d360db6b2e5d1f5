"""The start of a session at a terminal: the safety notice is read while the pack loads.

Reading and compiling a pack takes most of a second (pint's unit registry is
built while the measurements are compiled), and the first thing a person
does is read the safety notice. So at a terminal the shell shows the notice
as the pack's manifest gives it, loads the pack in a background thread, and
asks for Enter once the notice is read; by then the pack is usually ready.
The layers stay as they are: the thread only calls the same loader the
shell would call, and nothing else runs beside it (the unit registry is
created once, in that thread).
"""

from __future__ import annotations

import threading
from collections.abc import Callable
from typing import Any

#: The notice shown when a pack has none of its own.
FALLBACK_NOTICE = ("This tool is an aid. It does not replace the judgement of a qualified "
                   "person. Isolate and lock out power before hands-on work, and follow local "
                   "codes and licensed practice.")
ENTER = "Press Enter once you have read the safety notice (Ctrl-D leaves): "


def manifest_notice(ref: str, search: list[str] | None = None) -> str | None:
    """The notice of pack ``ref`` as its ``pack.yaml`` gives it, without compiling the pack.

    None when the manifest cannot be read (the loader then reports why).

    Raises:
        InputError: no such pack (the same one-line message as the loader's).
    """
    import yaml

    from diagnose.kb.locate import MANIFEST, find_pack

    folder = find_pack(ref, search)
    try:
        with open(folder / MANIFEST, encoding="utf-8") as fh:
            head = yaml.safe_load(fh)
    except (OSError, yaml.YAMLError, UnicodeDecodeError):
        return None
    if not isinstance(head, dict):
        return None
    from diagnose.kb.terms import fill, terms_of

    text, unknown = fill(str(head.get("notice", "") or "").strip(),
                         terms_of(head.get("device"))[0])
    if unknown:
        return None  # never raw braces: the loader reports the unknown term
    return text or FALLBACK_NOTICE


class Preload:
    """``load()`` run in a daemon thread; :meth:`result` waits for it and returns or re-raises."""

    def __init__(self, load: Callable[[], Any]) -> None:
        self._load = load
        self._value: Any = None
        self._error: BaseException | None = None
        self._thread = threading.Thread(target=self._run, name="diagnose-pack-load", daemon=True)
        self._thread.start()

    def _run(self) -> None:
        try:
            self._value = self._load()
        except BaseException as exc:  # noqa: BLE001 - handed to the main thread by result()
            self._error = exc

    @property
    def done(self) -> bool:
        return not self._thread.is_alive()

    def result(self) -> Any:
        while self._thread.is_alive():  # a short timeout keeps Ctrl-C working while waiting
            self._thread.join(0.1)
        if self._error is not None:
            raise self._error
        return self._value


def read_notice_while_loading(console: Any, reader: Any, notice: str, loading: Preload) -> Any:
    """Wait for Enter after the notice (shown already) while the pack loads; the model.

    A line typed at the notice is not an answer to anything, so any line goes
    on. If the pack's own notice turns out to differ from ``notice`` (the file
    changed meanwhile), it is shown again, so that the notice recorded is the
    one seen.

    Raises:
        EOFError: Ctrl-D at the notice: leave before the diagnosis starts.
        DiagnoseError: the pack cannot be loaded (after Enter).
    """
    from diagnose.shell.complete import CompletionState
    from diagnose.views import NoticeView

    while True:
        try:
            reader.ask(ENTER, CompletionState())
            break
        except KeyboardInterrupt:
            continue
    if not loading.done:
        console.print("Loading the pack ...", style="dim", markup=False)
    model = loading.result()
    if (model.notice or FALLBACK_NOTICE).strip() != notice:
        console.print(NoticeView(model.notice or FALLBACK_NOTICE))
    return model

