"""Where packs are found: a path, or a pack id on the search path.

The search path is, in order: folders given with ``--packs``, the folders in
the ``DIAGNOSE_PACKS`` environment variable (separated by ``os.pathsep``),
then the packs shipped with the program. Inside a search folder a pack is a
sub-folder holding ``pack.yaml``; it is found by its folder name or by the
``pack:`` id in its manifest.
"""

from __future__ import annotations

import difflib
import os
from pathlib import Path

from diagnose.errors import InputError, Problem, Source

MANIFEST = "pack.yaml"
ENV = "DIAGNOSE_PACKS"
DEFAULT_PACK = "spring-applied-brake"


def shipped_dir() -> Path:
    """The folder of the packs shipped with diagnose (installed or in a checkout)."""
    from importlib.resources import files

    return Path(str(files("diagnose.knowledge")))


def search_path(extra: list[str] | None = None) -> list[Path]:
    dirs = [Path(p).expanduser() for p in (extra or [])]
    env = os.environ.get(ENV, "")
    dirs += [Path(p).expanduser() for p in env.split(os.pathsep) if p.strip()]
    dirs.append(shipped_dir())
    return dirs


def _manifest_id(folder: Path) -> tuple[str | None, Problem | None]:
    """The ``pack:`` id in ``folder``'s manifest, and the problem when it cannot be read.

    The manifest is read within the bounds of :mod:`diagnose.kb.yamlpos`, so that a
    hostile or broken manifest costs no more than a good one.
    """
    from diagnose.kb.loader import display_path
    from diagnose.kb.yamlpos import PACK_FILE_BYTES, read_text, read_yaml

    shown = display_path(folder / MANIFEST)
    try:
        text = read_text(folder / MANIFEST, PACK_FILE_BYTES)
    except UnicodeDecodeError:
        return None, Problem("error", "not UTF-8 text", Source(shown), "yaml")
    except OSError as exc:
        return None, Problem("error", f"cannot read: {exc.strerror or exc}", Source(shown), "io")
    doc, problems = read_yaml(text, shown)
    errors = [p for p in problems if p.level == "error"]
    if doc is None or errors:
        return None, (errors or problems or [Problem("error", "cannot be read", Source(shown))])[0]
    head = doc.data
    pid = head.get("pack") if isinstance(head, dict) else None
    return (pid if isinstance(pid, str) and pid else None), None


def scan(extra: list[str] | None = None) -> tuple[dict[str, Path], list[Problem]]:
    """Every pack id on the search path and its folder, and a problem per unreadable manifest.

    Earlier folders win. A pack whose manifest cannot be read is listed under
    its folder name (so that ``kb lint`` can still find it and say why) and
    has one problem, which names the file and the place in it.
    """
    found: dict[str, Path] = {}
    problems: list[Problem] = []
    for d in search_path(extra):
        try:
            if not d.is_dir():
                continue
            subs = sorted(d.iterdir())
        except OSError:  # a folder we may not list holds no pack we can use
            continue
        for sub in subs:
            try:
                if not (sub / MANIFEST).is_file():
                    continue
            except OSError:
                continue
            pid, problem = _manifest_id(sub)
            if problem is not None:
                problems.append(problem)
            found.setdefault(pid or sub.name, sub)
    return found, problems


def available(extra: list[str] | None = None) -> dict[str, Path]:
    """Every pack id on the search path and its folder (earlier folders win)."""
    return scan(extra)[0]


def find_pack(ref: str, extra: list[str] | None = None) -> Path:
    """The folder of pack ``ref`` (a folder path, a path to pack.yaml, or a pack id).

    Raises:
        InputError: no such pack; the message names the closest known id.
    """
    p = Path(ref).expanduser()
    if p.is_file() and p.name == MANIFEST:
        return p.parent
    if p.is_dir():
        if (p / MANIFEST).is_file():
            return p
        raise InputError("pack", f"{ref} is a folder without {MANIFEST}, so it is not a pack")
    for d in search_path(extra):
        if (d / ref / MANIFEST).is_file():
            return d / ref
    packs = available(extra)
    if ref in packs:
        return packs[ref]
    close = difflib.get_close_matches(ref, list(packs), n=1)
    hint = f"; did you mean {close[0]!r}?" if close else ""
    known = ", ".join(sorted(packs)) or "none"
    raise InputError("pack", f"no pack {ref!r} (known: {known}){hint}")
