"""Lint: every problem of one or more packs, as lines a trainer can jump to.

Besides what the loader and the compiler find, lint says what a pack still
lacks before people use it, as warnings (``--strict`` fails on them): a text
of the pack's own files that still says ``TODO`` (``diagnose kb new pack``
writes such markers), and a pack with no safety ``notice``. An error that hid
the errors following from it (a base pack that was not read) says how many.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field, replace
from typing import Any

from diagnose.errors import DiagnoseError, Problem

#: A marker of text still to write.
TODO = re.compile(r"\bTODO\b")


@dataclass
class LintResult:
    """The problems of one pack; ``ok`` says whether it passes (warnings fail only if strict)."""

    ref: str
    problems: list[Problem] = field(default_factory=list)

    @property
    def errors(self) -> list[Problem]:
        return [p for p in self.problems if p.level == "error"]

    @property
    def warnings(self) -> list[Problem]:
        return [p for p in self.problems if p.level == "warning"]

    def ok(self, strict: bool = False) -> bool:
        return not self.errors and not (strict and self.warnings)


def lint_paths(refs: list[str], *, search: list[str] | None = None,
               extra: Callable[[object], list[Problem]] | None = None) -> list[LintResult]:
    """Lint each pack in ``refs``; ``extra(model)`` adds further findings (the analysis)."""
    from diagnose.kb.loader import check_pack

    results = []
    for ref in refs:
        res = LintResult(ref)
        try:
            model, problems = check_pack(ref, search=search)
        except DiagnoseError as exc:
            res.problems.append(Problem("error", str(exc), None, "pack"))
            results.append(res)
            continue
        res.problems.extend(joined(problems))
        res.problems.extend(unfinished(ref, search, res.problems))
        if model is not None and extra is not None:
            res.problems.extend(extra(model))
        results.append(res)
    return results


def joined(problems: list[Problem]) -> list[Problem]:
    """``problems`` with each ``knock-on`` count joined to the error at its place.

    >>> from diagnose.errors import Source
    >>> at = Source("pack.yaml", 7, 13)
    >>> [p.message for p in joined([Problem("error", "no pack 'x'", at, "builds-on"),
    ...                             Problem("error", "and 3 errors ...", at, "knock-on")])]
    ["no pack 'x' (and 3 errors ...)"]
    """
    out = list(problems)
    for p in problems:
        if p.code != "knock-on":
            continue
        root = next((i for i, q in enumerate(out) if q.source == p.source
                     and q.level == "error" and q.code != "knock-on"), None)
        if root is not None:
            out[root] = replace(out[root], message=f"{out[root].message} ({p.message})")
            out.remove(p)
    return out


def unfinished(ref: str, search: list[str] | None, found: list[Problem]) -> list[Problem]:
    """Warnings for what pack ``ref`` still lacks: texts that say TODO, a safety notice.

    Only the pack's own files are read (its base packs are linted on their
    own); a TODO on a line where an error already points adds nothing.
    """
    from diagnose.kb.loader import read_pack
    from diagnose.kb.locate import find_pack

    try:
        source, _ = read_pack(find_pack(ref, search))
    except DiagnoseError:
        return []
    if not source.documents:
        return []  # the manifest cannot be read: said already
    errors = {(p.source.file, p.source.line) for p in found if p.level == "error" and p.source}
    out = []
    for doc in source.documents:
        for path, text in _texts(doc.data):
            src = doc.where(path)
            if TODO.search(text) and (src.file, src.line) not in errors:
                out.append(Problem("warning", f"{_field(doc.data, path)} still says TODO: write "
                                   "it before the pack is used", src, "todo"))
    notice = source.manifest.get("notice")
    if not (isinstance(notice, str) and notice.strip()):
        out.append(Problem(
            "warning", "the pack has no safety `notice` in pack.yaml: every session and repair "
            "log starts with it (what the tool is for, who may do the work, lock out first)",
            source.documents[0].where(()), "no-notice"))
    return out


def _texts(value: Any, path: tuple[Any, ...] = ()) -> Iterator[tuple[tuple[Any, ...], str]]:
    """Every text inside ``value`` (a YAML value) with its path; keys are not texts."""
    if isinstance(value, str):
        yield path, value
    elif isinstance(value, dict):
        for k, v in value.items():
            yield from _texts(v, path + (k,))
    elif isinstance(value, list):
        for i, v in enumerate(value):
            yield from _texts(v, path + (i,))


def _field(data: Any, path: tuple[Any, ...]) -> str:
    """The field at ``path`` as a trainer names it: "cause 'coil_open' `title`".

    >>> _field({"causes": [{"id": "coil_open", "title": "TODO"}]}, ("causes", 0, "title"))
    "cause 'coil_open' `title`"
    >>> _field({"title": "TODO"}, ("title",))
    '`title`'
    """
    if len(path) >= 3 and isinstance(path[1], int) and isinstance(data, dict):
        entries = data.get(path[0])
        entry = entries[path[1]] if isinstance(entries, list) else None
        if isinstance(entry, dict) and isinstance(entry.get("id"), str):
            noun = str(path[0]).removesuffix("s")
            return f"{noun} {entry['id']!r} `{'.'.join(str(p) for p in path[2:])}`"
    return "`" + ".".join(str(p) for p in path) + "`"
