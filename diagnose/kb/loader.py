"""Reading pack folders (and the packs they build on) into documents.

``load_model`` is what the rest of the program calls: it finds, reads,
validates and compiles a pack, and raises one ``KnowledgeError`` carrying
every problem found. ``check_pack`` returns the problems instead, for lint.
"""

from __future__ import annotations

import hashlib
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from diagnose.errors import InputError, KnowledgeError, Problem, Source
from diagnose.kb.locate import MANIFEST, find_pack, find_pack_id, names_a_path
from diagnose.kb.yamlpos import PACK_FILE_BYTES, Document, read_text, read_yaml

if TYPE_CHECKING:
    from diagnose.kb.model import Model


@dataclass
class PackSource:
    """One pack folder as read: its manifest and all its YAML documents."""

    id: str
    folder: str
    documents: list[Document] = field(default_factory=list)

    @property
    def manifest(self) -> dict[str, Any]:
        data = self.documents[0].data if self.documents else {}
        return data if isinstance(data, dict) else {}


def display_path(path: Path | str) -> str:
    """A path as people want to read it: relative to the working folder when inside it."""
    p = os.path.abspath(path)
    rel = os.path.relpath(p)
    return p if rel.startswith("..") else rel


def read_pack(folder: Path) -> tuple[PackSource, list[Problem]]:
    """Read ``pack.yaml`` first, then every other ``*.yaml``/``*.yml`` file, sorted by name.

    Each file is read within the bounds of :mod:`diagnose.kb.yamlpos` (at most
    :data:`~diagnose.kb.yamlpos.PACK_FILE_BYTES`, no aliases, limited nesting).
    A pack folder is closed: a file whose real path is outside the folder's
    real path (a symbolic link out of it) is not read and is one error; the
    other files are read. Sub-folders are not read. When the manifest cannot
    be read, nothing else is.
    """
    problems: list[Problem] = []
    source = PackSource(id=folder.name, folder=display_path(folder))
    try:
        root = os.path.realpath(folder)
        files = [folder / MANIFEST] + sorted(
            p for p in folder.iterdir()
            if p.suffix in (".yaml", ".yml") and p.name != MANIFEST and p.is_file()
        )
    except (OSError, ValueError) as exc:
        problems.append(Problem("error", f"cannot read the folder: {_reason(exc)}",
                                Source(source.folder), "io"))
        return source, problems
    for f in files:
        shown = display_path(f)
        text, problem = _read_inside(f, root, shown)
        if problem is not None:
            problems.append(problem)
            if f.name == MANIFEST:
                return source, problems
            continue
        assert text is not None
        doc, found = read_yaml(text, shown)
        problems += found
        if doc is None:
            if f.name == MANIFEST:
                return source, problems
            continue
        doc.text_hash = hashlib.sha256(f.name.encode() + b"\0" + text.encode()).hexdigest()  # type: ignore[attr-defined]
        if not isinstance(doc.data, dict):
            problems.append(Problem("error", "a pack file must be a mapping of sections",
                                    doc.where(()), "schema"))
            if f.name == MANIFEST:
                return source, problems
            continue
        source.documents.append(doc)
    manifest = source.manifest
    pid = manifest.get("pack")
    if isinstance(pid, str) and pid:
        source.id = pid
    elif source.documents:
        problems.append(Problem("error", "pack.yaml needs `pack: <id>`",
                                source.documents[0].where(()), "manifest"))
    return source, problems


def _read_inside(path: Path, root: str, shown: str) -> tuple[str | None, Problem | None]:
    """The text of ``path`` if its real path is inside ``root``, else the problem that stops it.

    The real path is what is opened, so that the link cannot be changed between
    the check and the read.
    """
    try:
        real = os.path.realpath(path)
        inside = os.path.commonpath([root, real]) == root
    except (OSError, ValueError) as exc:
        return None, Problem("error", f"cannot read: {_reason(exc)}", Source(shown), "io")
    if not inside:
        return None, Problem("error", "points outside the pack folder; a pack reads only its "
                                      "own files", Source(shown), "outside")
    try:
        return read_text(real, PACK_FILE_BYTES), None
    except UnicodeDecodeError:
        return None, Problem("error", "not UTF-8 text; save the file as UTF-8", Source(shown),
                             "yaml")
    except OSError as exc:
        return None, Problem("error", f"cannot read: {_reason(exc)}", Source(shown), "io")


def _reason(exc: Exception) -> str:
    return getattr(exc, "strerror", None) or str(exc) or type(exc).__name__


def read_chain(ref: str, search: list[str] | None = None) -> tuple[list[PackSource], list[Problem]]:
    """The pack ``ref`` and every pack it builds on, base packs first.

    ``ref`` may be a folder or an id; the entries of ``builds_on`` are ids only,
    found on the search path before anything of the base pack is read. An
    entry written as a path, or listed twice, is an error at its place and is
    not followed; each pack folder is read once, however often it is named.
    """
    problems: list[Problem] = []
    order: list[PackSource] = []
    done: set[str] = set()
    read: dict[str, PackSource] = {}
    found: dict[str, Path | InputError] = {}

    def load(folder: Path) -> PackSource:
        key = os.path.realpath(folder)
        if key not in read:
            src, more = read_pack(folder)
            problems.extend(more)
            read[key] = src
        return read[key]

    def resolve(base: str) -> Path | InputError:
        if base not in found:
            try:
                found[base] = find_pack_id(base, search)
            except InputError as exc:
                found[base] = exc
        return found[base]

    def visit(folder: Path, trail: tuple[str, ...]) -> None:
        src = load(folder)
        if src.id in trail:
            cycle = " -> ".join(trail + (src.id,))
            problems.append(Problem("error", f"packs build on each other in a circle: {cycle}",
                                    _manifest_where(src, "builds_on"), "builds-on"))
            return
        if src.id in done:
            return
        bases = src.manifest.get("builds_on") or []
        first: dict[str, int] = {}
        for i, base in enumerate(bases if isinstance(bases, list) else []):
            if not isinstance(base, str):
                continue  # the schema says what an entry must be
            where = src.documents[0].where(("builds_on", i))
            if names_a_path(base):
                problems.append(Problem("error", f"builds_on names a pack by its id, not a path: "
                                                 f"{_quoted(base)}", where, "builds-on"))
                continue
            if base in first:
                was = src.documents[0].where(("builds_on", first[base]))
                problems.append(Problem("error", f"builds_on lists {_quoted(base)} twice (first "
                                                 f"at line {was.line}, column {was.col}); a pack "
                                                 "is built on once", where, "builds-on"))
                continue
            first[base] = i
            base_folder = resolve(base)
            if isinstance(base_folder, InputError):
                problems.append(Problem("error", f"builds_on: {base_folder.message}", where,
                                        "builds-on"))
                continue
            visit(base_folder, trail + (src.id,))
        if src.id not in done:
            done.add(src.id)
            order.append(src)

    visit(find_pack(ref, search), ())
    return order, problems


def _quoted(text: str, limit: int = 60) -> str:
    """``text`` quoted, and cut short with its length when it is long."""
    if len(text) <= limit:
        return repr(text)
    return f"{text[:limit]!r}... ({len(text):,} characters)"


def _manifest_where(src: PackSource, key: str) -> Source | None:
    return src.documents[0].where((key,)) if src.documents else None


def check_pack(ref: str, *, search: list[str] | None = None,
               learned: dict[str, float] | None = None,
               cache: bool = False) -> tuple[Model | None, list[Problem]]:
    """Read and compile ``ref``; return the model (None on errors) and every problem found.

    With ``cache`` the compiled-pack cache (:mod:`diagnose.kb.cache`) is asked
    first, and a pack read anew is kept there; lint never asks it, since it
    reports what the YAML says, where.
    """
    return _compiled(ref, search, learned, cache=cache)


def _compiled(ref: str, search: list[str] | None, learned: dict[str, float] | None, *,
              cache: bool) -> tuple[Model | None, list[Problem]]:
    """The one way to a compiled pack: the cache's entry when asked for and current, else
    the YAML read, checked and compiled (and then kept in the cache when asked for)."""
    found = None
    if cache:
        from diagnose.kb import cache as pack_cache

        found = pack_cache.lookup(ref, search, learned)
        if found.hit:
            return found.model, list(found.problems or ())
    import gc

    from diagnose.kb.compiler import compile_sources

    paused = gc.isenabled()
    gc.disable()  # a large pack is many objects and few cycles: the collector would only
    try:          # walk them again and again (a tenth of the time of 10,000 causes)
        sources, problems = read_chain(ref, search)
        if any(p.level == "error" and p.code in ("yaml", "io", "manifest") for p in problems):
            return None, problems
        model, more = compile_sources(sources, learned=learned)
    finally:
        if paused:
            gc.enable()
    problems = problems + _not_again(more, problems)
    if found is not None and model is not None:
        pack_cache.store(found, sources, model, problems, search=search, learned=learned)
    return model, problems


def _not_again(more: list[Problem], found: list[Problem]) -> list[Problem]:
    """``more`` without the schema's findings on ``builds_on`` entries reported in ``found``.

    An entry written as a path or listed twice is reported once, by
    :func:`read_chain`, at its place; the schema would say it again (a pattern
    it does not match, a list with an item twice).
    """
    said = {p.source for p in found if p.code == "builds-on" and p.source is not None
            and p.message.startswith(("builds_on names", "builds_on lists"))}
    twice = any(p.code == "builds-on" and p.message.startswith("builds_on lists") for p in found)
    return [p for p in more if not (
        p.code == "schema" and p.message.startswith("`builds_on")
        and (p.source in said or (twice and p.message.endswith("has non-unique elements"))))]


def load_model(ref: str, *, search: list[str] | None = None,
               learned: dict[str, float] | None = None, cache: bool = False) -> Model:
    """Find, read, validate and compile pack ``ref`` (an id or a folder).

    ``learned`` optionally replaces cause priors (an overlay learned from closed
    repairs); the trainers' YAML is never changed. ``cache``: through the
    compiled-pack cache (see :func:`check_pack`); the faces ask for it.

    Raises:
        InputError: no such pack.
        KnowledgeError: the pack has errors; ``.problems`` lists all of them.
    """
    model, problems = check_pack(ref, search=search, learned=learned, cache=cache)
    errors = [p for p in problems if p.level == "error"]
    if errors or model is None:
        raise KnowledgeError(errors or problems,
                             f"pack {ref} has {len(errors)} error(s); run "
                             f"`diagnose kb lint {ref}`: "
                             f"{errors[0] if errors else 'cannot be read'}")
    return model
