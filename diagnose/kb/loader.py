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

from diagnose.errors import KnowledgeError, Problem, Source
from diagnose.kb.locate import MANIFEST, find_pack
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
    """
    problems: list[Problem] = []
    source = PackSource(id=folder.name, folder=display_path(folder))
    try:
        files = [folder / MANIFEST] + sorted(
            p for p in folder.iterdir()
            if p.suffix in (".yaml", ".yml") and p.name != MANIFEST and p.is_file()
        )
    except OSError as exc:
        problems.append(Problem("error", f"cannot read the folder: {exc.strerror}",
                                Source(source.folder), "io"))
        return source, problems
    for f in files:
        shown = display_path(f)
        try:
            text = read_text(f, PACK_FILE_BYTES)
        except UnicodeDecodeError:
            problems.append(Problem("error", "not UTF-8 text", Source(shown), "yaml"))
            continue
        except OSError as exc:
            problems.append(Problem("error", f"cannot read: {exc.strerror}", Source(shown), "io"))
            continue
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
            continue
        source.documents.append(doc)
    manifest = source.manifest
    pid = manifest.get("pack")
    if isinstance(pid, str) and pid:
        source.id = pid
    elif source.documents:
        problems.append(Problem("error", "pack.yaml needs `pack: <id>`", source.documents[0].where(()),
                                "manifest"))
    return source, problems


def read_chain(ref: str, search: list[str] | None = None) -> tuple[list[PackSource], list[Problem]]:
    """The pack ``ref`` and every pack it builds on, base packs first."""
    problems: list[Problem] = []
    order: list[PackSource] = []
    done: set[str] = set()

    def visit(folder: Path, trail: tuple[str, ...]) -> None:
        src, found = read_pack(folder)
        problems.extend(found)
        if src.id in trail:
            cycle = " -> ".join(trail + (src.id,))
            problems.append(Problem("error", f"packs build on each other in a circle: {cycle}",
                                    _manifest_where(src, "builds_on"), "builds-on"))
            return
        if src.id in done:
            return
        bases = src.manifest.get("builds_on") or []
        for i, base in enumerate(bases if isinstance(bases, list) else []):
            if not isinstance(base, str):
                continue
            try:
                base_folder = find_pack(base, search)
            except Exception as exc:  # InputError: an unknown pack id
                where = src.documents[0].where(("builds_on", i)) if src.documents else None
                problems.append(Problem("error", f"builds_on: {getattr(exc, 'message', exc)}",
                                        where, "builds-on"))
                continue
            visit(base_folder, trail + (src.id,))
        if src.id not in done:
            done.add(src.id)
            order.append(src)

    visit(find_pack(ref, search), ())
    return order, problems


def _manifest_where(src: PackSource, key: str) -> Source | None:
    return src.documents[0].where((key,)) if src.documents else None


def check_pack(ref: str, *, search: list[str] | None = None,
               learned: dict[str, float] | None = None) -> tuple[Model | None, list[Problem]]:
    """Read and compile ``ref``; return the model (None on errors) and every problem found."""
    from diagnose.kb.compiler import compile_sources

    sources, problems = read_chain(ref, search)
    if any(p.level == "error" and p.code in ("yaml", "io", "manifest") for p in problems):
        return None, problems
    model, more = compile_sources(sources, learned=learned)
    return model, problems + more


def load_model(ref: str, *, search: list[str] | None = None,
               learned: dict[str, float] | None = None) -> Model:
    """Find, read, validate and compile pack ``ref`` (an id or a folder).

    ``learned`` optionally replaces cause priors (an overlay learned from closed
    repairs); the trainers' YAML is never changed.

    Raises:
        InputError: no such pack.
        KnowledgeError: the pack has errors; ``.problems`` lists all of them.
    """
    model, problems = check_pack(ref, search=search, learned=learned)
    errors = [p for p in problems if p.level == "error"]
    if errors or model is None:
        raise KnowledgeError(errors or problems,
                             f"pack {ref} has {len(errors)} error(s); run `diagnose kb lint {ref}`: "
                             f"{errors[0] if errors else 'cannot be read'}")
    return model
