"""Safe YAML reading that remembers where every value was written.

The result is plain data (dicts, lists, scalars) plus a table from the JSON
path of each value (``("checks", 3, "effects", "coil_open")``) to its
``Source``. The same paths come back in jsonschema errors, so every message
can point at a line.

Only the YAML 1.2 booleans ``true``/``false`` are booleans here: ``yes``,
``no``, ``on`` and ``off`` stay text, because trainers use them as outcome
ids and answers.

Reading is bounded, because packs and answers files come from other people:
a file larger than its limit is not read (:func:`read_text`); anchors and
aliases are refused (packs do not need them, and a few levels of aliases
expand into billions of values); a document may hold at most
:data:`MAX_NODES` values nested at most :data:`MAX_DEPTH` deep; an integer
has at most :data:`MAX_INT_DIGITS` digits. These checks run on the parser's
events, before anything is built from them.

References:
    YAML 1.2.2 specification, section 3.2.2.2 "Anchors and Aliases".
    CVE-2003-1564 and the "billion laughs" expansion attack on XML entities,
    of which an alias bomb is the YAML form.
"""

from __future__ import annotations

import errno
import gc
import os
import re
from dataclasses import dataclass, field
from typing import Any

import yaml

from diagnose.errors import Problem, Source
from diagnose.text import unsafe

Path = tuple[Any, ...]

#: Most bytes read from one pack file.
PACK_FILE_BYTES = 5_000_000
#: Most bytes read from one answers file.
ANSWERS_FILE_BYTES = 1_000_000
#: Most values (scalars, lists, mappings) in one document; a large pack holds a few thousand.
MAX_NODES = 200_000
#: Deepest nesting of lists and mappings; packs use fewer than ten levels.
MAX_DEPTH = 64
#: Most digits in an integer; Python refuses to convert more than 4,300 by default.
MAX_INT_DIGITS = 30

_TAG = "tag:yaml.org,2002:"
# Scalar types whose constructor can fail on text the parser accepts ("!!int abc",
# "2001-13-45"): each such value is built once on its own while scanning, so that
# a failure points at its line.
_CHECKED = {_TAG + kind: kind for kind in ("int", "float", "bool", "null", "timestamp")}


_BASE = getattr(yaml, "CSafeLoader", yaml.SafeLoader)  # libyaml when present: ten times faster


def _libyaml_version() -> tuple[int, ...]:
    try:
        from yaml import _yaml  # type: ignore[attr-defined]

        return tuple(_yaml.get_version())
    except (ImportError, AttributeError, TypeError):
        return ()


#: One pass of libyaml for a clean document (see :func:`read_yaml`): only with libyaml 0.2.6
#: or later, whose scanner itself refuses nesting deeper than 1,000 levels.
FAST = _BASE is not yaml.SafeLoader and _libyaml_version() >= (0, 2, 6)
# Where an anchor or an alias could start: "&" or "*" and a name character, after a line
# break, a space, a flow indicator or a colon. A text without one has neither, for sure.
_MAY_ALIAS = re.compile(r"(?:^|(?<=[\s\[{,:\ufeff]))[&*][^\s\[\]{},]", re.MULTILINE)


class _Loader(_BASE):  # type: ignore[misc, valid-type]
    """SafeLoader (libyaml's when present) with YAML 1.2-style booleans."""


_Loader.yaml_implicit_resolvers = {
    first: [(tag, rx) for tag, rx in resolvers if tag != "tag:yaml.org,2002:bool"]
    for first, resolvers in yaml.SafeLoader.yaml_implicit_resolvers.items()
}
_Loader.add_implicit_resolver(
    "tag:yaml.org,2002:bool", re.compile(r"^(?:true|True|TRUE|false|False|FALSE)$"), list("tTfF")
)


@dataclass
class Document:
    """One YAML file: its data and the position of every value in it.

    ``positions`` holds the 1-based line and column of each path (plain
    numbers, so that a large pack does not weigh on memory and on the
    garbage collector); :meth:`where` gives them as a ``Source``.
    """

    path: str
    data: Any
    positions: dict[Path, tuple[int, int]] = field(default_factory=dict)
    #: The text held no control character and no backslash: no text in it can hold one
    #: (only an escape in double quotes could make one), so no text need be looked at.
    plain: bool = False

    def where(self, path: Path) -> Source:
        """The position of ``path`` or of its closest recorded ancestor."""
        if not self.positions:  # data built in code: the file is all there is
            return Source(self.path)
        p = tuple(path)
        while p:
            if p in self.positions:
                return Source(self.path, *self.positions[p])
            p = p[:-1]
        return Source(self.path, *self.positions.get((), (1, 1)))


def _mark(node: yaml.Node) -> tuple[int, int]:
    return node.start_mark.line + 1, node.start_mark.column + 1


def read_text(path: str | os.PathLike[str], limit: int) -> str:
    """The UTF-8 text of the file at ``path``, if it is at most ``limit`` bytes long.

    Raises:
        OSError: the file cannot be read, or is larger than ``limit``
            (``errno.EFBIG``, with a ``strerror`` that gives both sizes).
        UnicodeDecodeError: the file is not UTF-8 text.
    """
    with open(path, encoding="utf-8") as fh:
        size = os.fstat(fh.fileno()).st_size
        if size > limit:
            raise OSError(errno.EFBIG, _too_large(size, limit), str(path))
        text = fh.read(limit + 1)  # a device or a growing file may say size 0
    if len(text) > limit:
        raise OSError(errno.EFBIG, _too_large(None, limit), str(path))
    return text


def _too_large(size: int | None, limit: int) -> str:
    what = f"{size:,} bytes" if size is not None else "more than that"
    return f"file too large ({what}; at most {limit:,} bytes are read)"


def read_yaml(text: str, path: str) -> tuple[Document | None, list[Problem]]:
    """Parse ``text`` safely; return the document and any problems (syntax, duplicate keys).

    Anchors and aliases, more than :data:`MAX_NODES` values, nesting deeper
    than :data:`MAX_DEPTH` and integers of more than :data:`MAX_INT_DIGITS`
    digits are refused with one problem at their place, and no document.

    >>> doc, problems = read_yaml("a: &x [1]\\nb: *x\\n", "f.yaml")
    >>> doc is None, str(problems[0])[:62]
    (True, 'f.yaml:1:4: error: YAML anchor &x: anchors and aliases are not')
    """
    if len(text) > PACK_FILE_BYTES:
        return None, [Problem("error", _too_large(len(text), PACK_FILE_BYTES), Source(path), "io")]
    plain = "\\" not in text and unsafe(text) is None
    if FAST and not _MAY_ALIAS.search(text):
        doc = _read_clean(text, path)
        if doc is not None:
            doc.plain = plain
            return doc, []
    problems: list[Problem] = []
    loader = _Loader(text)
    try:
        refused = _scan(text, path)
        if refused is not None:
            return None, [refused]
        node = loader.get_single_node()
        data = loader.construct_document(node) if node is not None else None
        doc = Document(path, {} if data is None else data, plain=plain)
        if node is not None:
            _walk(node, (), doc, problems, path, loader)
        return doc, problems
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        src = Source(path, mark.line + 1, mark.column + 1) if mark else Source(path)
        what = " ".join(s for s in (exc.context, exc.problem) if s) or "not valid YAML"
        return None, [Problem("error", f"YAML syntax: {_one_line(what)}", src, "yaml")]
    except yaml.reader.ReaderError as exc:  # a character YAML does not allow, at an offset
        first = str(exc).splitlines()[0] if str(exc) else "not valid YAML"
        return None, [Problem("error", f"YAML: {_one_line(first)}",
                              _offset_source(text, path, exc.position), "yaml")]
    except yaml.YAMLError as exc:
        return None, [Problem("error", f"YAML: {_one_line(str(exc))}", Source(path), "yaml")]
    except RecursionError:
        return None, [Problem("error", "YAML: nested too deeply", Source(path), "yaml")]
    except (ValueError, TypeError, KeyError, IndexError, AttributeError, OverflowError) as exc:
        # the scan builds every value that can fail; this is a last guard
        return None, [Problem("error", f"YAML: a value cannot be read ({type(exc).__name__})",
                              Source(path), "yaml")]
    finally:
        loader.dispose()


def _read_clean(text: str, path: str) -> Document | None:
    """The document of ``text`` read in one pass of libyaml, when it is clean; else None.

    Clean: no anchor or alias (the caller has made sure), at most
    :data:`MAX_NODES` values nested at most :data:`MAX_DEPTH` deep, every
    scalar readable as its type (integers of at most :data:`MAX_INT_DIGITS`
    digits), no key twice in a mapping. The data and the positions are the
    ones the exact reader gives; on any doubt the exact reader (an event scan
    first, then the document) reads the text again and says what and where.
    """
    loader = _Loader(text)
    paused = gc.isenabled()
    gc.disable()  # many objects and no cycle: the collector would only walk them again and again
    try:
        node = loader.get_single_node()
        if node is None:
            return Document(path, {})
        built = _Builder(loader).document(node)
    except Exception:  # noqa: BLE001 (whatever it is, the exact reader says it at its place)
        return None
    finally:
        loader.dispose()
        if paused:
            gc.enable()
    if built is None:
        return None
    data, positions = built
    return Document(path, {} if data is None else data, positions)


_MAP = _TAG + "map"
_SEQ = _TAG + "seq"
#: Scalar types built once per distinct text ("0.1", "true", "~"): the same value every time.
_SHARED = frozenset(_TAG + kind for kind in ("int", "float", "bool", "null"))


class _Refused(Exception):
    """Something the one pass does not read: the exact reader reads the text again."""


class _Builder:
    """The data and the positions of a clean document in one walk over libyaml's nodes.

    Builds what ``construct_document`` builds for plain mappings, sequences and
    the scalar types of :data:`_CHECKED` and text, and records what
    :func:`_walk` records; refuses (:class:`_Refused`) the rest: other tags
    (merge keys, sets, binary, local tags), a key twice, a key that is not a
    scalar, too many values, nesting too deep, a scalar :func:`_long_scalar`
    refuses.
    """

    def __init__(self, loader: Any) -> None:
        self.loader = loader
        self.positions: dict[Path, tuple[int, int]] = {}
        self.count = 0
        self.scalars: dict[tuple[str, str], Any] = {}

    def document(self, root: yaml.Node) -> tuple[Any, dict[Path, tuple[int, int]]] | None:
        try:
            data = self.value(root, (), 0, root.start_mark)
        except _Refused:
            return None
        return data, self.positions

    def scalar(self, node: yaml.Node) -> Any:
        if node.__class__ is not yaml.ScalarNode:
            raise _Refused
        tag = node.tag
        if tag == _STR:
            return node.value
        if tag not in _CHECKED or _long_scalar(node):
            raise _Refused
        if tag not in _SHARED:  # a timestamp: a new object each time, as the constructor makes
            return self.loader.construct_object(node)
        key = (tag, node.value)
        found = self.scalars.get(key, self)
        if found is self:
            found = self.scalars[key] = self.loader.yaml_constructors[tag](self.loader, node)
        return found

    def value(self, node: yaml.Node, at: Path, level: int, mark: Any) -> Any:
        self.count += 1
        if self.count > MAX_NODES:
            raise _Refused
        self.positions[at] = (mark.line + 1, mark.column + 1)
        cls = node.__class__
        if cls is yaml.ScalarNode:
            return self.scalar(node)
        level += 1
        if level > MAX_DEPTH:
            raise _Refused
        if cls is yaml.MappingNode and node.tag == _MAP:
            out: dict[Any, Any] = {}
            for key_node, value_node in node.value:
                key = self.scalar(key_node)
                if key in out:
                    raise _Refused
                self.count += 1  # the key
                out[key] = self.value(value_node, at + (key,), level, key_node.start_mark)
            return out
        if cls is yaml.SequenceNode and node.tag == _SEQ:
            return [self.value(item, at + (i,), level, item.start_mark)
                    for i, item in enumerate(node.value)]
        raise _Refused


_STR = _TAG + "str"


def _long_scalar(node: yaml.ScalarNode) -> bool:
    """A scalar :func:`_bad_scalar` refuses for its length alone (its type being built anyway)."""
    kind = _CHECKED.get(node.tag)
    if kind is None:
        return False
    if kind == "int":
        return sum(ch.isalnum() for ch in node.value) > MAX_INT_DIGITS
    return len(node.value) > 1000


def _scan(text: str, path: str) -> Problem | None:
    """The first thing in ``text`` that is refused before building it, or None.

    Walks the parser's events: an alias or an anchor, the value after
    :data:`MAX_NODES`, nesting below :data:`MAX_DEPTH`, and a scalar its
    type cannot hold (an integer too long, "!!int abc", a date 2001-13-45).
    Syntax errors propagate as ``yaml.YAMLError``.
    """
    loader = _Loader(text)
    nodes = depth = 0
    try:
        while loader.check_event():
            event = loader.get_event()
            at = _event_mark(path, event)
            if isinstance(event, yaml.AliasEvent):
                return Problem("error", f"YAML alias *{_short(event.anchor)}: {_NO_ALIASES}",
                               at, "yaml")
            if isinstance(event, yaml.NodeEvent) and event.anchor is not None:
                return Problem("error", f"YAML anchor &{_short(event.anchor)}: {_NO_ALIASES}",
                               at, "yaml")
            if isinstance(event, yaml.CollectionStartEvent):
                nodes += 1
                depth += 1
                if depth > MAX_DEPTH:
                    return Problem("error", f"YAML: nested too deeply (more than {MAX_DEPTH} "
                                            "levels of lists and mappings)", at, "yaml")
            elif isinstance(event, yaml.CollectionEndEvent):
                depth -= 1
            elif isinstance(event, yaml.ScalarEvent):
                nodes += 1
                bad = _bad_scalar(loader, event)
                if bad:
                    return Problem("error", bad, at, "yaml")
            if nodes > MAX_NODES:
                return Problem("error", f"YAML: too many values (more than {MAX_NODES:,} "
                                        "in one file)", at, "yaml")
        return None
    finally:
        loader.dispose()


_NO_ALIASES = "anchors and aliases are not allowed in packs and answers files; write the value out"


def _one_line(text: str, limit: int = 200) -> str:
    """A parser's message on one line and cut short (it may quote a whole tag or key)."""
    text = " ".join(text.split())
    return text if len(text) <= limit else f"{text[:limit]}..."


def _offset_source(text: str, path: str, offset: int) -> Source:
    line = text.count("\n", 0, offset) + 1
    return Source(path, line, offset - (text.rfind("\n", 0, offset) + 1) + 1)


def _event_mark(path: str, event: yaml.Event) -> Source:
    mark = event.start_mark
    return Source(path, mark.line + 1, mark.column + 1) if mark else Source(path)


def _short(text: str, limit: int = 40) -> str:
    return text if len(text) <= limit else f"{text[:limit]}... ({len(text)} characters)"


def _bad_scalar(loader: Any, event: yaml.ScalarEvent) -> str | None:
    """Why the scalar of ``event`` cannot be built as its type, or None when it can."""
    tag = event.tag
    if tag is None or tag == "!":
        tag = loader.resolve(yaml.ScalarNode, event.value, event.implicit)
    kind = _CHECKED.get(tag)
    if kind is None:
        return None
    value = event.value
    if kind == "int":
        digits = sum(ch.isalnum() for ch in value)
        if digits > MAX_INT_DIGITS:
            return (f"integer of {digits:,} digits: at most {MAX_INT_DIGITS} are read; "
                    "write a large number as a float (1e40) or in quotes")
    elif len(value) > 1000:
        return f"a {kind} of {len(value):,} characters is too long"
    try:
        loader.yaml_constructors[tag](loader, yaml.ScalarNode(tag, value))
    except (ValueError, TypeError, KeyError, IndexError, AttributeError, OverflowError,
            yaml.YAMLError):
        return f"{_short(value)!r} is not a valid {kind}"
    return None


def _walk(node: yaml.Node, at: Path, doc: Document, problems: list[Problem], path: str,
          loader: Any) -> None:
    doc.positions[at] = _mark(node)
    if isinstance(node, yaml.MappingNode):
        seen: dict[Any, tuple[int, int]] = {}
        for key_node, value_node in node.value:
            key = _scalar_key(key_node, loader)
            here = _mark(key_node)
            if key in seen:
                problems.append(Problem(
                    "error", f"key {key!r} appears twice in one mapping (first at line "
                    f"{seen[key][0]}); YAML keeps only the last", Source(path, *here),
                    "duplicate-key"))
            seen[key] = here
            _walk(value_node, at + (key,), doc, problems, path, loader)
            doc.positions[at + (key,)] = here  # point at the key, where people look
    elif isinstance(node, yaml.SequenceNode):
        for i, item in enumerate(node.value):
            _walk(item, at + (i,), doc, problems, path, loader)


def _scalar_key(node: yaml.Node, loader: Any) -> Any:
    """The constructed value of a key (numbers stay numbers), as the loader makes it."""
    if not isinstance(node, yaml.ScalarNode):
        return str(node.value)
    try:
        return loader.construct_object(node)
    except yaml.YAMLError:
        return node.value
