"""Where packs are found: a path, or a pack id on the search path.

The search path is, in order: folders given with ``--packs``, the folders in
the ``DIAGNOSE_PACKS`` environment variable (separated by ``os.pathsep``),
then the packs shipped with the program. Inside a search folder a pack is a
sub-folder holding ``pack.yaml``; it is found by its folder name or by the
``pack:`` id in its manifest.

Discovery reads manifests only, and of a manifest only what it needs: the id
comes from a plain ``pack: <id>`` line near the top when there is one (see
:func:`manifest_id_line`), otherwise from the bounded YAML reader. Listing
the packs also checks each manifest with the bounded reader, so that a broken
one is reported. What the reader found is kept in a small cache file in the
user's cache folder, keyed by the manifest's path and file status (device,
inode, size, modification and change times), so that thousands of packs list
in well under a second. A file changed less than :data:`RACY_SECONDS` before
it was read is not cached, because a second change within the resolution of
the file system's clock would leave the same status behind.

References:
    XDG Base Directory Specification 0.8, ``$XDG_CACHE_HOME``.
    Git's "racy git" problem and its solution (``Documentation/technical/racy-git.txt``),
    from which the rule for recently changed files comes.
"""

from __future__ import annotations

import difflib
import json
import os
import re
import stat
import time
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from diagnose.errors import InputError, Problem, Source

MANIFEST = "pack.yaml"
ENV = "DIAGNOSE_PACKS"
DEFAULT_PACK = "spring-applied-brake"

#: A manifest changed less than this long before it was read is not cached.
RACY_SECONDS = 2.0
#: Most manifests kept in the cache file.
CACHE_ENTRIES = 20_000
#: Largest cache file read; a larger one is ignored.
CACHE_FILE_BYTES = 8_000_000
#: Known ids named in the message for an unknown pack; the rest are counted.
KNOWN_SHOWN = 10

_CACHE_NAME = "packs.json"
_CACHE_FORMAT = 1


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


def names_a_path(ref: str) -> bool:
    """Whether ``ref`` is written as a path rather than a pack id.

    >>> [names_a_path(r) for r in ("electrical-supply", "../x", "a/b", "/abs", "~/x", ".")]
    [False, True, True, True, True, True]
    """
    seps = {os.sep, "/"} | ({os.altsep} if os.altsep else set())
    return (any(s in ref for s in seps) or ref.startswith((".", "~")) or os.path.isabs(ref)
            or bool(os.path.splitdrive(ref)[0]) or "\0" in ref)


# --- the id line ---------------------------------------------------------------------------------

# Blank lines, comments and `---` lines, then a top-level `pack:` key with a plain id and
# at most a comment after it.
_ID_LINE = re.compile(r"(?:(?:[ \t]*(?:#[^\n]*)?|---[ \t]*(?:[ \t]#[^\n]*)?)\n)*"
                      r"pack: +([A-Za-z][A-Za-z0-9_.-]*)(?: +#[^\n]*| *)(?:\n|\Z)")
# The next line that is not blank is indented: the value may go on there.
_GOES_ON = re.compile(r"(?:[ \t]*\n)*[ \t]+\S")
# Another line that starts with the key `pack`.
_KEY_AGAIN = re.compile(r"^[\"']?pack[\"']? *:", re.MULTILINE)
# Plain scalars that YAML reads as something other than text.
_NOT_TEXT = {"true", "True", "TRUE", "false", "False", "FALSE", "null", "Null", "NULL"}


def manifest_id_line(text: str) -> str | None:
    """The pack id of a manifest whose first key is a plain ``pack: <id>`` line, else None.

    The line counts only when what comes before it is blank lines, comments
    or a ``---`` line, the id is a plain word that YAML reads as text, the next
    line that is not blank starts at the left margin (so the value does not go
    on), and no other line starts with the key ``pack``. A valid manifest of
    that shape has exactly that id, so discovery needs to read no further; a
    broken one is listed under it.

    >>> manifest_id_line("# a pack\\npack: mini-brake  # the id\\ntitle: Mini\\n")
    'mini-brake'
    >>> manifest_id_line("pack: mini\\n  brake\\n") is None  # the value goes on
    True
    """
    if "\r" in text or "\x85" in text or "\u2028" in text or "\u2029" in text:
        return None  # line breaks other than "\n": let the YAML reader decide
    m = _ID_LINE.match(text)
    if m is None or m.group(1) in _NOT_TEXT:
        return None
    end = m.end()
    if _GOES_ON.match(text, end) or _KEY_AGAIN.search(text, end):
        return None
    return m.group(1)


# --- the cache -----------------------------------------------------------------------------------


def cache_dir(env: dict[str, str] | None = None) -> Path | None:
    """The user's cache folder for diagnose, or None when there is no home to put it in.

    The folder is :func:`diagnose.paths.cache_dir` (platformdirs):
    ``$XDG_CACHE_HOME/diagnose`` or ``~/.cache/diagnose`` on Linux.

    References:
        XDG Base Directory Specification 0.8, ``$XDG_CACHE_HOME`` (default
        ``~/.cache``; a relative value is ignored).
    """
    from diagnose.paths import cache_dir as user_cache

    try:
        return user_cache(env)
    except (RuntimeError, KeyError, OSError):
        return None


def _stamp(st: os.stat_result) -> list[int]:
    return [st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns, st.st_ctime_ns]


def _rules() -> str:
    """What decides a cached answer: the cache format and the code and library that read YAML."""
    import yaml

    from diagnose.kb import yamlpos

    parts = [str(_CACHE_FORMAT), yaml.__version__, str(getattr(yaml, "__with_libyaml__", ""))]
    for module in (__file__, yamlpos.__file__):
        try:
            st = os.stat(module)
            parts += [str(st.st_size), str(st.st_mtime_ns)]
        except OSError:
            parts.append("?")
    return ":".join(parts)


@dataclass
class _Entry:
    """What is known of one manifest: its listed id and, once checked, its problem."""

    stamp: list[int]
    id: str | None
    checked: bool = False
    problem: list[Any] | None = None  # level, message, line, column, code


@dataclass
class _Cache:
    """Manifests already read, by absolute path; loaded from and saved to one small file."""

    file: Path | None
    rules: str = ""
    entries: dict[str, _Entry] = field(default_factory=dict)
    changed: bool = False

    @classmethod
    def open(cls) -> _Cache:
        """The cache of this user; empty when the file is missing, unreadable or not ours."""
        folder = cache_dir()
        cache = cls(folder / _CACHE_NAME if folder else None, _rules())
        if cache.file is None:
            return cache
        try:
            with open(cache.file, "rb") as fh:
                raw = fh.read(CACHE_FILE_BYTES + 1)
            if len(raw) > CACHE_FILE_BYTES:
                return cache
            data = json.loads(raw)
            if not isinstance(data, dict) or data.get("rules") != cache.rules:
                return cache
            for path, item in (data.get("manifests") or {}).items():
                entry = _entry(item)
                if isinstance(path, str) and entry is not None:
                    cache.entries[path] = entry
        except (OSError, ValueError, TypeError, AttributeError, RecursionError):
            cache.entries.clear()  # a cache that cannot be read is no cache
        return cache

    def get(self, path: str, stamp: list[int]) -> _Entry | None:
        entry = self.entries.get(path)
        return entry if entry is not None and entry.stamp == stamp else None

    def put(self, path: str, entry: _Entry, read_at: int) -> None:
        """Keep ``entry`` unless the file changed too shortly before ``read_at`` to be sure."""
        newest = max(entry.stamp[3], entry.stamp[4])
        self.entries.pop(path, None)  # the newest entries are the last ones, kept when trimming
        if newest < read_at - int(RACY_SECONDS * 1e9):
            self.entries[path] = entry
            self.changed = True

    def save(self) -> None:
        """Write the cache file if anything was added; any failure leaves the cache unwritten."""
        if not self.changed or self.file is None:
            return
        items = list(self.entries.items())[-CACHE_ENTRIES:]
        data = {"rules": self.rules, "manifests": {
            p: [e.stamp, e.id, e.checked, e.problem] for p, e in items}}
        tmp = None
        try:
            self.file.parent.mkdir(parents=True, exist_ok=True, mode=0o700)
            tmp = self.file.with_name(f".{self.file.name}.{os.getpid()}.tmp")
            with open(tmp, "x", encoding="utf-8") as fh:
                json.dump(data, fh, separators=(",", ":"))
            os.replace(tmp, self.file)
            tmp = None
            self.changed = False
        except (OSError, ValueError):
            pass
        finally:
            if tmp is not None:
                try:
                    os.unlink(tmp)
                except OSError:
                    pass


def _entry(item: Any) -> _Entry | None:
    """An entry of the cache file, or None when it is not one."""
    if not (isinstance(item, list) and len(item) == 4):
        return None
    stamp, pid, checked, problem = item
    if not (isinstance(stamp, list) and len(stamp) == 5
            and all(type(x) is int for x in stamp)):
        return None
    if not (pid is None or isinstance(pid, str)) or not isinstance(checked, bool):
        return None
    if problem is not None and not (
            isinstance(problem, list) and len(problem) == 5
            and problem[0] in ("error", "warning") and isinstance(problem[1], str)
            and type(problem[2]) is int and type(problem[3]) is int
            and isinstance(problem[4], str)):
        return None
    return _Entry(stamp, pid, checked, problem)


# --- reading manifests ---------------------------------------------------------------------------


def _read_manifest(text: str, shown: str) -> tuple[str | None, Problem | None]:
    """The ``pack:`` id in a manifest's ``text``, and its first problem when it cannot be read.

    The manifest is read within the bounds of :mod:`diagnose.kb.yamlpos`, so that a
    hostile or broken manifest costs no more than a good one.
    """
    from diagnose.kb.yamlpos import read_yaml

    doc, problems = read_yaml(text, shown)
    errors = [p for p in problems if p.level == "error"]
    if doc is None or errors:
        return None, (errors or problems or [Problem("error", "cannot be read", Source(shown))])[0]
    head = doc.data
    pid = head.get("pack") if isinstance(head, dict) else None
    return (pid if isinstance(pid, str) and pid else None), None


@dataclass
class _Manifests:
    """The manifests on the search path, read as little as each question needs."""

    cache: _Cache

    def look(self, manifest: str, st: os.stat_result, *, check: bool
             ) -> tuple[str | None, Problem | None]:
        """The listed id of ``manifest`` (None: use the folder name) and, if ``check``, its problem.

        ``manifest`` is an absolute path and ``st`` its status, taken before
        reading. Without ``check`` only the id line is read when it settles the id.
        """
        from diagnose.kb.loader import display_path
        from diagnose.kb.yamlpos import PACK_FILE_BYTES, read_text

        read_at = time.time_ns()
        stamp = _stamp(st)
        entry = self.cache.get(manifest, stamp)
        if entry is not None and (entry.checked or not check):
            return entry.id, _problem(entry.problem, manifest)
        shown = display_path(manifest)
        problem = None
        try:
            text: str | None = read_text(manifest, PACK_FILE_BYTES)
        except UnicodeDecodeError:
            text, problem = None, Problem("error", "not UTF-8 text; save the file as UTF-8",
                                          Source(shown), "yaml")
        except OSError as exc:
            return None, Problem("error", f"cannot read: {exc.strerror or exc}", Source(shown),
                                 "io")
        pid = manifest_id_line(text) if text is not None else None
        checked = text is None
        if text is not None and (check or pid is None):
            exact, problem = _read_manifest(text, shown)
            pid = pid or exact
            checked = True
        self.cache.put(manifest, _Entry(stamp, pid, checked, _fields(problem)), read_at)
        return pid, problem

    @staticmethod
    def packs(extra: list[str] | None) -> Iterator[tuple[Path, str, str, os.stat_result]]:
        """Every pack on the search path (earlier folders first).

        Yields its search folder, its folder name there, the absolute path of its
        manifest and the manifest's status.
        """
        for d in search_path(extra):
            try:
                base = os.path.abspath(d)
                names = sorted(os.listdir(base))
            except (OSError, ValueError):  # a folder we may not list holds no pack we can use
                continue
            for name in names:
                manifest = os.path.join(base, name, MANIFEST)
                try:
                    st = os.stat(manifest)
                except (OSError, ValueError):
                    continue
                if stat.S_ISREG(st.st_mode):
                    yield d, name, manifest, st


def _fields(problem: Problem | None) -> list[Any] | None:
    if problem is None:
        return None
    src = problem.source or Source("")
    return [problem.level, problem.message, src.line, src.col, problem.code]


def _problem(fields: list[Any] | None, manifest: str) -> Problem | None:
    if fields is None:
        return None
    from diagnose.kb.loader import display_path

    level, message, line, col, code = fields
    return Problem(level, message, Source(display_path(manifest), line, col), code)


def scan(extra: list[str] | None = None) -> tuple[dict[str, Path], list[Problem]]:
    """Every pack id on the search path and its folder, and a problem per unreadable manifest.

    Earlier folders win. Each manifest is checked with the bounded YAML reader
    (or its cached result). A pack whose manifest cannot be read is listed
    under the id of its ``pack:`` line when it has a plain one (see
    :func:`manifest_id_line`), otherwise under its folder name (so that
    ``kb lint`` can still find it and say why), and has one problem, which
    names the file and the place in it.
    """
    return _discover(extra, check=True)


def available(extra: list[str] | None = None) -> dict[str, Path]:
    """Every pack id on the search path and its folder (earlier folders win).

    Like :func:`scan`, but manifests are read only as far as their ids need.
    """
    return _discover(extra, check=False)[0]


def _discover(extra: list[str] | None, *, check: bool
              ) -> tuple[dict[str, Path], list[Problem]]:
    found: dict[str, Path] = {}
    problems: list[Problem] = []
    manifests = _Manifests(_Cache.open())
    for d, name, manifest, st in manifests.packs(extra):
        pid, problem = manifests.look(manifest, st, check=check)
        if problem is not None and check:
            problems.append(problem)
        if (pid or name) not in found:
            found[pid or name] = d / name
    manifests.cache.save()
    return found, problems


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
    return find_pack_id(ref, extra)


def find_pack_id(pid: str, extra: list[str] | None = None) -> Path:
    """The folder of the pack with id (or folder name) ``pid`` on the search path.

    Nothing but the search folders and the manifests in them is looked at:
    ``pid`` is never read as a path, so a pack that builds on another cannot
    reach outside the search path.

    Raises:
        InputError: ``pid`` is written as a path, or no pack has that id; the
            message names a few known ids and the closest one.
    """
    if names_a_path(pid):
        raise InputError("pack", f"{_short(pid)!r} is a path; a pack is named by its id")
    if pid:
        for d in search_path(extra):
            try:
                if (d / pid / MANIFEST).is_file():
                    return d / pid
            except (OSError, ValueError):
                continue
    manifests = _Manifests(_Cache.open())
    known: set[str] = set()
    try:
        for d, name, manifest, st in manifests.packs(extra):
            listed, _ = manifests.look(manifest, st, check=False)
            if (listed or name) == pid:
                return d / name
            known.add(listed or name)
    finally:
        manifests.cache.save()
    raise InputError("pack", unknown_pack(pid, list(known)))


def pack_id(folder: str | os.PathLike[str]) -> str:
    """The id of the pack in ``folder`` as loading it gives it, from its manifest alone.

    The manifest's ``pack:`` id, else the folder's name (a manifest that cannot
    be read is the loader's to report). Read as discovery reads it (the id line
    when it settles the id, else the bounded reader) and kept in the same cache,
    so that the rest of the pack is not read for it.
    """
    manifest = os.path.join(os.path.abspath(folder), MANIFEST)
    try:
        st = os.stat(manifest)
    except (OSError, ValueError):
        return Path(folder).name
    manifests = _Manifests(_Cache.open())
    try:
        pid, _ = manifests.look(manifest, st, check=False)
    finally:
        manifests.cache.save()
    return pid or Path(os.path.abspath(folder)).name


def unknown_pack(ref: str, known: list[str]) -> str:
    """The message for an unknown pack id: a few known ids, how many more, and the closest one.

    >>> unknown_pack("mini-brak", ["mini-brake", "electrical-supply"])
    "no pack 'mini-brak' (known: electrical-supply, mini-brake); did you mean 'mini-brake'?"
    """
    ids = sorted(known)
    close = difflib.get_close_matches(ref, ids, n=1)
    hint = f"; did you mean {_short(close[0])!r}?" if close else ""
    shown = ", ".join(_short(i) for i in ids[:KNOWN_SHOWN]) or "none"
    more = f" and {len(ids) - KNOWN_SHOWN:,} more" if len(ids) > KNOWN_SHOWN else ""
    return f"no pack {_short(ref)!r} (known: {shown}{more}){hint}"


def _short(text: str, limit: int = 40) -> str:
    return text if len(text) <= limit else f"{text[:limit]}..."
