"""The compiled-pack cache: a pack read, checked and compiled once, then loaded at once.

The compiled :class:`~diagnose.kb.model.Model` of a pack (with the warnings
its compilation gave) is kept in the user's cache folder, in ``models`` under
:func:`diagnose.paths.cache_dir` (``$XDG_CACHE_HOME/diagnose/models``, on Linux
``~/.cache/diagnose/models`` by default), one file a pack folder and
learned-priors overlay. An entry is used only when everything that made the
model is as it was:

* the text of every YAML file of the pack and of each pack it builds on (a
  hash of each file's name and text, read anew every time; a file added,
  removed or renamed counts too), and the model's content hash agrees;
* the folder each ``builds_on`` id leads to on the search path, and the paths
  the model's messages show (seen from another working folder, a pack is
  another entry);
* the learned-priors overlay;
* the program: its version and a fingerprint of the code that shapes a model
  (:func:`code_fingerprint`).

Anything else (no entry, an unreadable, truncated or foreign file, an entry of
another version or code, a model whose content hash is not the files') is
no entry: the pack is read and compiled again and the entry written anew,
never a traceback. A pack with errors is never kept.

Entries are pickles, and reading a pickle can run code: an entry is read only
from a folder that is the user's own, is no symbolic link and that nobody else
may write, and only when the file is the user's own regular file. A folder that
fails this, or that cannot be written, is simply not used. Entries are written
at once (:func:`diagnose.paths.replace_atomically`); the oldest beyond
:data:`MAX_ENTRIES` are removed. The whole folder may be deleted at any time
(``diagnose kb cache clear``).

References:
    XDG Base Directory Specification 0.8, ``$XDG_CACHE_HOME``.
    Python documentation, ``pickle``: "Only unpickle data you trust."
"""

from __future__ import annotations

import hashlib
import json
import os
import pickle
import stat
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path
from typing import IO, Any

#: The sub-folder of the user's cache folder that holds the compiled packs.
FOLDER = "models"
#: The ending of an entry's file name.
SUFFIX = ".model"
#: The layout of an entry; another one is no entry.
FORMAT = 1
#: Most entries kept; the oldest go first.
MAX_ENTRIES = 32
#: Largest entry read (a 10,000-cause pack takes about 6 MB).
MAX_ENTRY_BYTES = 512 * 2**20
#: Longest header line read.
MAX_HEADER_BYTES = 4 * 2**20

#: The code that decides what a pack compiles to, relative to the package folder.
_CODE = ("kb/*.py", "physics/*.py", "errors.py", "text.py")


@dataclass(frozen=True)
class PackFiles:
    """One pack folder of a chain as the cache sees it.

    ``folder`` is its absolute path, ``shown`` the path its messages show,
    ``hashes`` the text hash of each of its files in reading order, ``bases``
    the folder (absolute) each of its ``builds_on`` ids led to.
    """

    folder: str
    shown: str
    hashes: tuple[str, ...]
    bases: tuple[tuple[str, str], ...] = ()

    def to_list(self) -> list[Any]:
        return [self.folder, self.shown, list(self.hashes), [list(b) for b in self.bases]]


@dataclass(frozen=True)
class CacheInfo:
    """What ``diagnose kb cache`` shows: the folder (None: unusable), its entries and bytes."""

    folder: Path | None
    entries: int = 0
    bytes: int = 0
    why: str = ""  # why the folder is not used, when it is not


# --- the key ------------------------------------------------------------------------------


@lru_cache(maxsize=1)
def code_fingerprint() -> str:
    """A hash of the program's version and of the source of the code that shapes a model.

    The code is ``diagnose/kb/*.py``, ``diagnose/physics/*.py`` (the
    evaluators' registry and what it names), ``diagnose/errors.py`` and
    ``diagnose/text.py``; a change to any of them during development makes
    every entry stale. Python's version and PyYAML's count too. "" when a file
    cannot be read (then nothing is cached).
    """
    import sys

    import yaml

    from diagnose import __version__

    root = Path(__file__).resolve().parent.parent
    digest = hashlib.sha256(f"{FORMAT}\0{__version__}\0{sys.version}\0{yaml.__version__}\0"
                            .encode())
    try:
        for pattern in _CODE:
            for path in sorted(root.glob(pattern)):
                digest.update(path.relative_to(root).as_posix().encode() + b"\0")
                digest.update(path.read_bytes() + b"\0")
    except OSError:
        return ""
    return digest.hexdigest()


def text_hash(name: str, text: str) -> str:
    """The hash of one pack file as the loader gives it (its name and its text).

    >>> text_hash("pack.yaml", "pack: a\\n")[:12]
    'a699b7571918'
    """
    return hashlib.sha256(name.encode() + b"\0" + text.encode()).hexdigest()


def content_hash(hashes: Iterable[str]) -> str:
    """The content hash of a model read from files with these text hashes, base packs first."""
    digest = hashlib.sha256()
    for h in hashes:
        digest.update(h.encode())
    return digest.hexdigest()[:16]


def folder_files(folder: str) -> tuple[str, ...] | None:
    """The text hashes of the pack files of ``folder``, read as the loader reads them.

    ``pack.yaml`` first, then every other ``*.yaml``/``*.yml`` file by name. None
    when a file cannot be read, is too large, is not UTF-8 or lies outside the
    folder (a symbolic link out of it): the loader reports those.
    """
    from diagnose.kb.locate import MANIFEST
    from diagnose.kb.yamlpos import PACK_FILE_BYTES, read_text

    try:
        base = Path(folder)
        root = os.path.realpath(base)
        files = [base / MANIFEST] + sorted(
            p for p in base.iterdir()
            if p.suffix in (".yaml", ".yml") and p.name != MANIFEST and p.is_file())
        hashes = []
        for path in files:
            real = os.path.realpath(path)
            if os.path.commonpath([root, real]) != root:
                return None
            hashes.append(text_hash(path.name, read_text(real, PACK_FILE_BYTES)))
    except (OSError, ValueError):  # UnicodeDecodeError is a ValueError
        return None
    return tuple(hashes)


def _entry_name(folder: str, learned: Mapping[str, float] | None) -> str:
    """The file of the entry of the pack in ``folder`` (absolute) with ``learned``; the path
    its messages show is part of it, so that two working folders do not take turns."""
    from diagnose.kb.loader import display_path

    key = json.dumps([code_fingerprint(), folder, display_path(folder), _overlay(learned)])
    return hashlib.sha256(key.encode()).hexdigest()[:32] + SUFFIX


def _overlay(learned: Mapping[str, float] | None) -> list[list[Any]]:
    return [[k, float(v)] for k, v in sorted((learned or {}).items())]


# --- the folder ---------------------------------------------------------------------------


def models_dir() -> Path | None:
    """Where entries live (not made here), or None when there is no user cache folder."""
    from diagnose.kb.locate import cache_dir

    base = cache_dir()
    return base / FOLDER if base is not None else None


def _unsafe(path: Path, *, private: bool) -> str:
    """Why ``path`` may not hold entries ("" when it may): a link, not a folder, not ours."""
    try:
        st = os.lstat(path)
    except OSError as exc:
        return f"cannot be read ({exc.strerror or exc})"
    if stat.S_ISLNK(st.st_mode):
        return "is a symbolic link"
    if not stat.S_ISDIR(st.st_mode):
        return "is not a folder"
    if hasattr(os, "getuid") and st.st_uid != os.getuid():
        return "belongs to another user"
    if private and os.name == "posix" and st.st_mode & 0o022:
        return "may be written by other users"
    return ""


def usable_dir(*, create: bool) -> tuple[Path | None, str]:
    """The entries' folder when it may be used (made when ``create``), and why not when not."""
    folder = models_dir()
    if folder is None:
        return None, "there is no user cache folder"
    for path, private in ((folder.parent, False), (folder, True)):
        if create and not os.path.lexists(path):  # never made through a link: checked first
            try:
                path.mkdir(parents=True, exist_ok=True, mode=0o700)
            except OSError as exc:
                return None, f"{path} cannot be made ({exc.strerror or exc})"
        why = _unsafe(path, private=private)
        if why:
            return None, f"{path} {why}"
    return folder, ""


def _open_entry(path: Path) -> IO[bytes] | None:
    """The entry at ``path`` opened for reading when it is the user's own regular file."""
    flags = os.O_RDONLY | getattr(os, "O_NOFOLLOW", 0) | getattr(os, "O_BINARY", 0)
    try:
        fd = os.open(path, flags)
    except OSError:
        return None
    st = os.fstat(fd)
    if (not stat.S_ISREG(st.st_mode) or st.st_size > MAX_ENTRY_BYTES
            or (hasattr(os, "getuid") and st.st_uid != os.getuid())):
        os.close(fd)
        return None
    return os.fdopen(fd, "rb")


# --- reading and writing ------------------------------------------------------------------


@dataclass
class Lookup:
    """The cache's answer for one pack: where its entry goes, and the model when it is current."""

    file: Path | None
    model: Any = None
    problems: list[Any] | None = None

    @property
    def hit(self) -> bool:
        return self.model is not None


def lookup(ref: str, search: list[str] | None, learned: Mapping[str, float] | None) -> Lookup:
    """The current entry of pack ``ref`` when there is one; never raises.

    ``Lookup.file`` is None when nothing may be cached (no usable folder, no
    code fingerprint, no such pack: the loader then says why).
    """
    from diagnose.errors import DiagnoseError
    from diagnose.kb.locate import find_pack

    if not code_fingerprint():
        return Lookup(None)
    folder, _ = usable_dir(create=False)
    try:
        top = os.path.abspath(find_pack(ref, search))
    except (DiagnoseError, OSError, ValueError):
        return Lookup(None)
    if folder is None:  # not there yet, or not usable: writing will tell
        wanted = models_dir()
        return Lookup(wanted / _entry_name(top, learned) if wanted is not None else None)
    file = folder / _entry_name(top, learned)
    found = _read(file, top, search, learned)
    if found is None:
        return Lookup(file)
    return Lookup(file, found[0], found[1])


def _read(file: Path, top: str, search: list[str] | None,
          learned: Mapping[str, float] | None) -> tuple[Any, list[Any]] | None:
    """The model and problems in ``file`` when the entry is sound and current, else None."""
    fh = _open_entry(file)
    if fh is None:
        return None
    with fh:
        try:
            header = json.loads(fh.readline(MAX_HEADER_BYTES))
            expected = _current(header, top, search, learned)
            if expected is None:
                return None
            payload = pickle.load(fh)  # the user's own file, in a folder only they may write
        except Exception:  # noqa: BLE001 (a damaged entry is no entry, whatever the damage)
            return None
    return _checked(payload, expected)


def _current(header: Any, top: str, search: list[str] | None,
             learned: Mapping[str, float] | None) -> str | None:
    """The content hash the entry must hold when ``header`` describes the files as they are."""
    if not (isinstance(header, dict) and header.get("format") == FORMAT
            and header.get("code") == code_fingerprint()
            and header.get("learned") == _overlay(learned)):
        return None
    chain = [p for p in map(_pack_files, header.get("chain") or []) if p is not None]
    if not chain or len(chain) != len(header["chain"]) or chain[-1].folder != top:
        return None
    hashes: list[str] = []
    for packs in chain:
        if not _still(packs, search):
            return None
        hashes += packs.hashes
    wanted = content_hash(hashes)
    return wanted if header.get("content_hash") == wanted else None


def _still(packs: PackFiles, search: list[str] | None) -> bool:
    """Whether a pack folder reads as it did, shows the same paths and finds the same bases."""
    from diagnose.errors import DiagnoseError
    from diagnose.kb.loader import display_path
    from diagnose.kb.locate import find_pack_id

    if display_path(packs.folder) != packs.shown or folder_files(packs.folder) != packs.hashes:
        return False
    try:
        return all(os.path.abspath(find_pack_id(pid, search)) == folder
                   for pid, folder in packs.bases)
    except (DiagnoseError, OSError, ValueError):
        return False


def _pack_files(item: Any) -> PackFiles | None:
    if not (isinstance(item, list) and len(item) == 4):
        return None
    folder, shown, hashes, bases = item
    if not (isinstance(folder, str) and isinstance(shown, str) and isinstance(hashes, list)
            and all(isinstance(h, str) for h in hashes) and isinstance(bases, list)
            and all(isinstance(b, list) and len(b) == 2 and all(isinstance(x, str) for x in b)
                    for b in bases)):
        return None
    return PackFiles(folder, shown, tuple(hashes), tuple((b[0], b[1]) for b in bases))


def _checked(payload: Any, wanted: str) -> tuple[Any, list[Any]] | None:
    """``payload`` as (model, problems) when it is one and the model has the content hash."""
    from diagnose.errors import Problem
    from diagnose.kb.model import Model

    if not (isinstance(payload, tuple) and len(payload) == 2):
        return None
    model, problems = payload
    if not (isinstance(model, Model) and model.content_hash == wanted
            and isinstance(problems, list) and all(isinstance(p, Problem) for p in problems)):
        return None
    return model, problems


def store(found: Lookup, sources: list[Any], model: Any, problems: list[Any], *,
          search: list[str] | None, learned: Mapping[str, float] | None) -> bool:
    """Keep ``model`` (compiled from ``sources``, base packs first) where ``found`` says.

    Nothing is written when the folder cannot be used or written, or when the
    model's content hash is not the one of the texts it was read from. True
    when the entry was written.
    """
    if found.file is None or model is None:
        return False
    chain = chain_of(sources, search)
    hashes = [h for packs in chain for h in packs.hashes]
    if not chain or content_hash(hashes) != model.content_hash:
        return False
    folder, _ = usable_dir(create=True)
    if folder is None or folder != found.file.parent:
        return False
    header = {"format": FORMAT, "code": code_fingerprint(), "learned": _overlay(learned),
              "content_hash": model.content_hash, "chain": [p.to_list() for p in chain]}
    try:
        data = pickle.dumps((model, list(problems)), protocol=pickle.HIGHEST_PROTOCOL)
    except (pickle.PicklingError, TypeError, AttributeError, RecursionError):
        return False
    head = json.dumps(header, separators=(",", ":")).encode() + b"\n"
    return _write(found.file, head, data)


def _write(file: Path, head: bytes, data: bytes) -> bool:
    from diagnose.errors import DiagnoseError
    from diagnose.paths import replace_atomically

    def fill(tmp: Path) -> None:
        with open(tmp, "wb") as fh:
            fh.write(head)
            fh.write(data)

    try:
        replace_atomically(file, fill)
    except (DiagnoseError, OSError):
        return False
    _prune(file.parent, keep=file.name)
    return True


def chain_of(sources: list[Any], search: list[str] | None) -> list[PackFiles]:
    """The pack folders of ``sources`` (as read by the loader) as the cache records them.

    Empty when a source lacks the text hash of one of its documents.
    """
    from diagnose.errors import DiagnoseError
    from diagnose.kb.locate import find_pack_id

    chain = []
    for src in sources:
        hashes = tuple(getattr(doc, "text_hash", "") for doc in src.documents)
        bases = src.manifest.get("builds_on") or []
        try:
            found = tuple((b, os.path.abspath(find_pack_id(b, search))) for b in bases)
        except (DiagnoseError, OSError, ValueError, TypeError):
            return []
        if not all(hashes):
            return []
        chain.append(PackFiles(os.path.abspath(src.folder), src.folder, hashes, found))
    return chain


def _entries(folder: Path) -> list[os.DirEntry[str]]:
    try:
        with os.scandir(folder) as it:
            return [e for e in it if e.name.endswith(SUFFIX) and e.is_file(follow_symlinks=False)]
    except OSError:
        return []


def _prune(folder: Path, *, keep: str) -> None:
    """Remove the oldest entries beyond :data:`MAX_ENTRIES` (never ``keep``)."""
    entries = _entries(folder)
    if len(entries) <= MAX_ENTRIES:
        return

    def age(e: os.DirEntry[str]) -> float:
        try:
            return e.stat(follow_symlinks=False).st_mtime
        except OSError:
            return 0.0

    for e in sorted(entries, key=age)[:len(entries) - MAX_ENTRIES]:
        if e.name != keep:
            try:
                os.unlink(e.path)
            except OSError:
                pass


# --- kb cache -----------------------------------------------------------------------------


def info() -> CacheInfo:
    """The entries' folder, how many entries it holds and their size in bytes."""
    folder, why = usable_dir(create=False)
    if folder is None:
        return CacheInfo(models_dir(), why=why)
    sizes = []
    for e in _entries(folder):
        try:
            sizes.append(e.stat(follow_symlinks=False).st_size)
        except OSError:
            continue
    return CacheInfo(folder, len(sizes), sum(sizes))


def clear() -> CacheInfo:
    """Remove every entry (and any temporary file left beside them); what was removed.

    A folder that may not be used is left as it is (``why`` says why).
    """
    folder, why = usable_dir(create=False)
    if folder is None:
        return CacheInfo(models_dir(), why=why)
    removed = CacheInfo(folder)
    count = size = 0
    try:
        with os.scandir(folder) as it:
            found = [e for e in it if e.is_file(follow_symlinks=False)
                     and (e.name.endswith(SUFFIX) or e.name.endswith(".tmp"))]
    except OSError:
        return removed
    for e in found:
        try:
            n = e.stat(follow_symlinks=False).st_size
            os.unlink(e.path)
        except OSError:
            continue
        count += e.name.endswith(SUFFIX)
        size += n
    return CacheInfo(folder, count, size)
