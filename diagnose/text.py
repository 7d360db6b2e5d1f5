"""The one gate for text that comes from outside: packs, answers files, the journal, people.

Such text is data, never instructions to a terminal, a markup language or a
Markdown viewer. Every face passes it through this module before showing it:

* :func:`clean` replaces control characters (C0 except tab and newline, DEL,
  C1, and the Unicode bidirectional overrides) with visible placeholders, so
  that an escape sequence in a pack's notice cannot clear the screen, set the
  terminal's title or plant a hidden link, and a reader still sees that
  something odd was written there.
* :func:`console` makes the rich consoles of the program: markup and emoji
  codes are never read from text (``[/]`` in a title is two brackets and a
  slash), and every character rich writes passes :func:`clean` unless it is
  one of rich's own control sequences (styles, cursor moves).
* :func:`md` escapes a value for Markdown (links, images, emphasis, code, HTML,
  table cells); :func:`code` does the same for a value inside a code span.
* :func:`json_text` writes JSON whose strings hold no raw control character.
* :func:`say` prints a plain line (messages, lists) through :func:`clean`.

References:
    ECMA-48 (ISO/IEC 6429), 5th edition, 1991: the C0 and C1 control sets and
    the escape sequences they introduce.
    Unicode Standard Annex #9, "Unicode Bidirectional Algorithm", section 2
    (the explicit embedding, override and isolate formatting characters).
    CommonMark Spec 0.31.2, section 2.4 "Backslash escapes" (any ASCII
    punctuation may be backslash-escaped) and section 6.1 "Code spans".
"""

from __future__ import annotations

import json
import re
import sys
from functools import lru_cache
from typing import IO, Any

#: C0 controls show as their Unicode control pictures (ESC as U+241B); tab and newline stay.
_C0 = {c: 0x2400 + c for c in range(0x20) if c not in (0x09, 0x0A)}
#: DEL as its control picture, C1 controls and the bidirectional overrides as U+FFFD.
_OTHER = {0x7F: 0x2421, **{c: 0xFFFD for c in range(0x80, 0xA0)},
          **{c: 0xFFFD for c in (*range(0x202A, 0x202F), *range(0x2066, 0x206A))}}
_TABLE = {**_C0, **_OTHER}
_UNSAFE = re.compile("[\x00-\x08\x0b-\x1f\x7f-\x9f\u202a-\u202e\u2066-\u2069]")


def unsafe(text: str) -> str | None:
    """The first control character in ``text`` (as ``U+001B``), or None when it has none.

    >>> unsafe("coil 24 V"), unsafe("a\\x1b[2Jb"), unsafe("tab\\there\\nnewline")
    (None, 'U+001B', None)
    """
    m = _UNSAFE.search(text)
    return None if m is None else f"U+{ord(m.group()):04X}"


def clean(text: Any) -> str:
    """``text`` as a string with every control character replaced by a visible placeholder.

    Tab and newline are kept; ESC becomes U+241B (␛), other C0 controls their
    control pictures, DEL U+2421, C1 controls and bidirectional overrides
    U+FFFD. Text without such characters comes back unchanged (and fast).

    >>> clean("notice\\x1b]0;title\\x07 end")
    'notice␛]0;title␇ end'
    >>> clean("line one\\n\\tline two"), clean(None), clean(42)
    ('line one\\n\\tline two', '', '42')
    """
    if text is None:
        return ""
    text = text if isinstance(text, str) else str(text)
    if _UNSAFE.search(text) is None:
        return text
    return text.translate(_TABLE)


def storable(text: str) -> str:
    """``text`` as valid Unicode: undecodable bytes (lone surrogates) decoded as UTF-8 or ``�``.

    In a C locale Python reads the command line as ASCII and keeps each other
    byte as a lone surrogate ("Zoë" arrives as ``'Zo\\udcc3\\udcab'``), which
    no UTF-8 file or database can hold. The bytes are read again as UTF-8.

    >>> storable("Zo" + chr(0xDCC3) + chr(0xDCAB)), storable("plain")
    ('Zoë', 'plain')
    """
    try:
        text.encode("utf-8")
    except UnicodeEncodeError:
        return text.encode("utf-8", "surrogateescape").decode("utf-8", "replace") \
            if _only_escapes(text) else text.encode("utf-8", "replace").decode("utf-8")
    return text


def _only_escapes(text: str) -> bool:
    """Whether every surrogate in ``text`` is one that ``surrogateescape`` made (U+DC80..U+DCFF)."""
    return all(not 0xD800 <= ord(c) <= 0xDFFF or 0xDC80 <= ord(c) <= 0xDCFF for c in text)


def excerpt(text: Any, limit: int = 80) -> str:
    """``text`` cleaned and cut to about ``limit`` characters, saying how long it was.

    >>> excerpt("x" * 100, 10)
    'xxxxxxxxxx… (100 characters)'
    >>> excerpt("short")
    'short'
    """
    s = clean(text)
    if len(s) <= limit:
        return s
    return f"{s[:limit]}… ({len(s):,} characters)"


#: A quoted value (a Python repr in single or double quotes) in a message.
_QUOTED = r"(?<![\w'\"])(?:'(?:[^'\\\n]|\\.){%d,}'|\"(?:[^\"\\\n]|\\.){%d,}\")(?!\w)"


def short_values(message: str, limit: int = 80) -> str:
    """``message`` with every quoted value longer than ``limit`` cut, saying its length.

    Messages quote the value they refuse (``'abc' does not match ...``); a
    value of five megabytes is cut to its first ``limit`` characters.

    >>> short_values("'" + "x" * 100 + "' is not a known check", 8)
    "'xxxxxxxx…' (102 characters) is not a known check"
    >>> short_values("no pack 'ab' (known: " + "p, " * 40 + "q); did you mean 'a'?", 8)[-30:]
    "p, p, p, q); did you mean 'a'?"
    """
    rx = re.compile(_QUOTED % (limit + 1, limit + 1))
    return rx.sub(lambda m: f"{m.group()[:limit + 1]}…{m.group()[0]} "
                            f"({len(m.group()):,} characters)", message)


#: Characters backslash-escaped in Markdown text: what starts links, images, emphasis,
#: code, strikethrough, headings and table cells. ``&``, ``<`` and ``>`` become entities
#: (no HTML, no entity of the writer's making, in any Markdown flavour).
_MD_SPECIAL = re.compile(r"([\\`*_\[\]|~#!])")


def md(value: Any) -> str:
    """A value for Markdown text: shown as typed, never a link, image, emphasis or HTML.

    Control characters are cleaned, Markdown punctuation is backslash-escaped
    and line breaks become spaces (a value never starts a new block or table row).

    >>> print(md("[click](javascript:alert(1)) **now** <b>"))
    \\[click\\](javascript:alert(1)) \\*\\*now\\*\\* &lt;b&gt;
    >>> md(None)
    ''
    """
    if value is None:
        return ""
    s = clean(value).replace("\r", " ").replace("\n", " ")
    s = s.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
    return _MD_SPECIAL.sub(r"\\\1", s)


class Code(str):
    """A value already made safe for a Markdown code span; :func:`md_finalize` keeps it as it is."""


def code(value: Any) -> Code:
    """A value for a Markdown code span (between single backticks): no backtick, no break.

    Backslash escapes do not work inside a code span, so a backtick (which
    would end the span) becomes an apostrophe.

    >>> code("coil_open"), code("a`b")
    ('coil_open', "a'b")
    """
    if value is None:
        return Code("")
    return Code(clean(value).replace("`", "'").replace("\r", " ").replace("\n", " "))


def md_finalize(value: Any) -> str:
    """What a Markdown template prints for ``{{ value }}``: :func:`md`, or a :class:`Code`."""
    if isinstance(value, Code):
        return str(value)
    return md(value)


def templates(folder: str, fmt: str, **filters: Any) -> Any:
    """A Jinja2 environment over ``folder`` for Markdown (``md``) or HTML (``html``) output.

    Every ``{{ value }}`` passes the gate: Markdown output escapes it
    (:func:`md_finalize`; the ``code`` filter marks a value for a code span),
    HTML output cleans it and autoescapes it. A missing value is an error
    (``StrictUndefined``), never an empty cell.
    """
    from jinja2 import Environment, FileSystemLoader, StrictUndefined

    env = Environment(loader=FileSystemLoader(folder), undefined=StrictUndefined,
                      trim_blocks=True, lstrip_blocks=True, keep_trailing_newline=True,
                      autoescape=fmt == "html", finalize=md_finalize if fmt == "md" else clean)
    env.filters.update(code=code, **filters)
    return env


#: Characters JSON leaves raw that a terminal may still read as controls: DEL, C1, overrides.
_JSON_RAW = re.compile("[\x7f-\x9f\u202a-\u202e\u2066-\u2069]")


def json_text(data: Any, **options: Any) -> str:
    """``json.dumps(data, **options)`` with DEL, C1 and overrides as ``\\u`` escapes.

    The result is the same JSON (a reader gets the same strings back) but
    holds no raw character a terminal would act on; C0 controls are already
    escaped by the json module. Other characters are written as they are
    (``ensure_ascii=False``) when standard output is UTF-8, else as ``\\u``
    escapes, so that no value is lost to a terminal that cannot show it.

    >>> json_text({"who": "a\\x9b2Jb"})
    '{"who": "a\\\\u009b2Jb"}'
    """
    options.setdefault("ensure_ascii", not _utf8(sys.stdout))
    out = json.dumps(data, **options)
    return _JSON_RAW.sub(lambda m: f"\\u{ord(m.group()):04x}", out)


def _utf8(stream: Any) -> bool:
    """Whether ``stream`` writes UTF-8 (or is not a text stream with an encoding at all)."""
    encoding = getattr(stream, "encoding", None) or "utf-8"
    return encoding.lower().replace("-", "").replace("_", "") in ("utf8", "utf8sig")


def percent(p: float) -> str:
    """A probability for people, the one way every face shows it: "62%", "<1%", ">99%".

    >>> percent(0.623), percent(0.001), percent(0.9996), percent(0.0)
    ('62%', '<1%', '>99%', '0%')
    """
    if p <= 0:
        return "0%"
    if p < 0.005:
        return "<1%"
    if p > 0.995 and p < 1:
        return ">99%"
    return f"{p:.0%}"


def likelihood_words(p: float) -> str:
    """A probability in words for a caller or a customer (the figure goes beside it).

    >>> [likelihood_words(x) for x in (0.95, 0.7, 0.4, 0.15, 0.03)]
    ['almost certain', 'likely', 'possible', 'less likely', 'unlikely']
    """
    if p >= 0.9:
        return "almost certain"
    if p >= 0.6:
        return "likely"
    if p >= 0.3:
        return "possible"
    if p >= 0.1:
        return "less likely"
    return "unlikely"


def say(*parts: Any, file: IO[str] | None = None, sep: str = " ") -> None:
    """Print one line of plain text (a message, a list row) through :func:`clean`."""
    print(clean(sep.join(str(p) for p in parts)), file=file if file is not None else sys.stdout)


#: The width of a console for line-oriented output that writes to no terminal: no line is
#: wrapped (a file or a pipe has no edge), while rules and expanding blocks keep 80 columns.
UNBOUNDED = 1_000_000


def console(*, lines: bool = False, **options: Any) -> Any:
    """A rich ``Console`` for the program's output: no markup, no emoji codes, text gated.

    Options are those of ``rich.console.Console``; ``markup``, ``emoji`` and
    ``highlight`` default to False. ``lines=True`` is for output read line by
    line (``path:line:col`` messages, results people grep): when it goes to a
    file or a pipe rather than a terminal, no line is wrapped.
    """
    for key in ("markup", "emoji", "highlight"):
        options.setdefault(key, False)
    con = _gated_console_class()(**options)
    if not lines or con.is_terminal or "width" in options:
        return con
    return _gated_console_class(unbounded=True)(**{**options, "width": UNBOUNDED})


@lru_cache(maxsize=2)
def _gated_console_class(unbounded: bool = False) -> Any:
    """``rich.console.Console`` with a gate where its buffer becomes text (imported late).

    ``unbounded``: for a console of :data:`UNBOUNDED` width, a rule is drawn 80
    columns wide and a block that would expand to the width takes its content's.
    """
    from rich.console import Console
    from rich.rule import Rule
    from rich.segment import Segment

    class GatedConsole(Console):
        """A console that cleans the text of every segment it writes, but not its own controls.

        Rich keeps what it writes as segments: text with a style, or one of its
        own control codes. Only the text is cleaned; the styles and controls are
        rich's, rendered as rich renders them.
        """

        def _render_buffer(self, buffer: Any) -> str:
            return str(super()._render_buffer(
                seg if seg.control else Segment(clean(seg.text), seg.style, None)
                for seg in buffer))

    if not unbounded:
        return GatedConsole

    class LineConsole(GatedConsole):
        """A gated console whose text lines are never wrapped (see :func:`console`)."""

        def render(self, renderable: Any, options: Any = None) -> Any:
            from copy import copy

            options = options or self.options
            whole = options.max_width > UNBOUNDED // 2  # the whole width, not a table cell
            if whole and isinstance(renderable, Rule):
                options = options.update_width(80)
            elif whole and getattr(renderable, "expand", None) is True:
                renderable = copy(renderable)
                renderable.expand = False
            return super().render(renderable, options)

    return LineConsole
