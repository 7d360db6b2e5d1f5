"""Skeletons of new packs and pack entries for trainers: ``diagnose kb new KIND ID``.

A new pack (``kb new pack ID``) is a folder with a manifest and one complaint,
cause, check, repair and test case that fit together: it lints clean but for
a warning at each text that still says ``TODO``, and ``kb test`` plays its case.

A skeleton of one entry is commented YAML with every field a trainer must
fill. Each field still to fill holds a placeholder that lint rejects until it is replaced: an
empty value where a text or a number belongs, ``TODO`` where a probability
belongs, or a reference to an id that does not exist (``todo_cause``,
``$todo_parameter``, an evaluator ``TODO``). Every placeholder
line carries a ``# TODO`` comment, so that a search for TODO finds them all.

Writing keeps the rest of a file as it is: a skeleton goes into a new file
``<kind>s-<id>.yaml`` of the pack, or is appended to the named file (into its
section when the file already has one).
"""

from __future__ import annotations

import os
import re
from pathlib import Path
from typing import Any

from diagnose.errors import InputError

#: kind of entry -> the section it belongs to
KINDS = {
    "cause": "causes",
    "check": "checks",
    "measurement": "checks",
    "repair": "repairs",
    "complaint": "complaints",
}
MANIFEST = "pack.yaml"
_ID = re.compile(r"^[a-z][a-z0-9_]*$")

_CAUSE = """\
- id: {id}
  title:              # TODO: what is found, as the technician would say it ("Coil winding open")
  prior:              # TODO: times this cause is the one found per 1,000 service calls, e.g. 12
  # description: how it comes about and what it looks like (optional)
  # Then name this cause in the `inputs` of a complaint or event, in the `effects` of
  # the checks that observe it, and in the `fixes` of a repair: lint wants all three.
"""

_COMPLAINT = """\
- id: {id}
  title:              # TODO: the symptom as the technician reports it ("Brake will not release")
  caller:             # TODO: the symptom as a caller says it on the phone
  gate: or            # or | and | k_of_n (with k: 2); `or`: any one input causes it
  inputs: [todo_cause]  # TODO: the causes or events under this complaint
"""

_CHECK = """\
- id: {id}
  title:              # TODO: short name of the check ("Listen for the click at switch-on")
  minutes:            # TODO: minutes of work, including getting at the part
  where: site         # site, or phone if an untrained caller can do it safely
  tools: []           # e.g. [multimeter]
  cautions: []        # ids of cautions shown before the instructions
  ask:                # TODO: what the technician does and looks for
  # caller:           # plain wording for a caller; required when where: phone
  outcomes:           # TODO: rename the outcome ids and word each outcome
    todo_normal:      # TODO: wording of the answer when all is well
    todo_fault:       # TODO: wording of the answer a fault gives
  normal: {{todo_normal: TODO}}   # TODO: P(outcome) when none of the listed causes is present
  effects:            # P(outcome | cause present); left-out outcomes share the rest
    todo_cause: {{todo_fault: TODO}}   # TODO: a cause id and its outcome probabilities
"""

_REPAIR = """\
- id: {id}
  title:              # TODO: what is done ("Replace the magnet body with its coil")
  minutes:            # TODO: minutes of work, including getting at the part
  parts: []           # e.g. [magnet body with coil, to the nameplate]
  fixes: [todo_cause]   # TODO: the causes this repair removes
  success: 0.95       # P(cured | a cause it fixes is present)
  cautions: []        # ids of cautions shown before the instructions
  ask:                # TODO: what the technician does
  # needs: []         # checks that must be done first (e.g. securing the load)
  # confirm: ...      # the check that confirms the cure
"""

_TOOLS = "[]           # the instruments, e.g. [multimeter]"
_MEASUREMENT = """\
- id: {id}
  title:              # TODO: short name of the measurement ("Coil resistance, leads disconnected")
  minutes:            # TODO: minutes of work, including getting at the part
  tools: {tools}
  cautions: []        # ids of cautions shown before the instructions
  ask:                # TODO: what the technician measures, and how
  measure:
{measure}\
  normal: {{{normal}: TODO}}   # TODO: P(verdict) when none of the listed causes is present
  effects:            # P(verdict | cause present); left-out verdicts share the rest
    todo_cause: {{{fault}: TODO}}   # TODO: a cause id and its verdict probabilities
"""


def skeleton(kind: str, id: str, *, evaluator: str | None = None) -> str:
    """The YAML list item of a new ``kind`` entry (top-level ``- id: ...``, no section key).

    ``evaluator`` (measurements only) fills the evaluator, its inputs and
    verdicts from the registry.

    Raises:
        InputError: unknown kind or evaluator, or an id that is not a valid id.
    """
    if kind not in KINDS:
        raise InputError("KIND", f"unknown kind {kind!r}; use one of {', '.join(KINDS)}")
    if not _ID.match(id):
        raise InputError("ID", f"{id!r} is not an id: lower-case letters, digits and underscores, "
                         "starting with a letter")
    if evaluator is not None and kind != "measurement":
        raise InputError("--evaluator", "only a measurement has an evaluator")
    if kind == "measurement":
        return _measurement(id, evaluator)
    return {"cause": _CAUSE, "check": _CHECK, "repair": _REPAIR,
            "complaint": _COMPLAINT}[kind].format(id=id)


def _measurement(id: str, evaluator: str | None) -> str:
    from diagnose.physics.registry import EVALUATORS

    if evaluator is None:
        known = ", ".join(EVALUATORS)
        measure = (
            f"    evaluator: TODO   # TODO: one of {known}\n"
            "    # reading: ...    # the evaluator input the reading fills (default: its own)\n"
            "    unit: TODO        # TODO: unit of a bare number, e.g. ohm\n"
            "    inputs:           # TODO: evaluator input -> $parameter or a constant\n"
            "      todo_input: $todo_parameter\n"
            "  # outcomes are the evaluator's verdicts: see `diagnose calc --help`\n"
        )
        return _MEASUREMENT.format(id=id, tools=_TOOLS, measure=measure,
                                   normal="ok", fault="todo_verdict")
    spec = EVALUATORS.get(evaluator)
    if spec is None:
        raise InputError("--evaluator", f"unknown evaluator {evaluator!r}; known: "
                         f"{', '.join(EVALUATORS)}")
    reading = spec.input(spec.reading) if spec.reading else None
    lines = [f"    evaluator: {evaluator}   # {spec.title}"]
    if reading is not None:
        lines.append(f"    reading: {reading.name}   # {reading.help}")
        if reading.unit:
            lines.append(f"    unit: {reading.unit}")
    lines.append("    inputs:           # evaluator input -> $parameter (nameplate) or a constant")
    for inp in spec.inputs:
        if reading is not None and inp.name == reading.name:
            continue
        what = f"{inp.help}" + (f" [{inp.unit}]" if inp.unit else "")
        if inp.choices:
            what += f"; one of {', '.join(inp.choices)}"
        if inp.required:
            lines.append(f"      {inp.name}: $todo_parameter   # TODO: {what}")
        else:
            default = f" (default {inp.default})" if inp.default is not None else ""
            lines.append(f"      # {inp.name}: ...   # optional: {what}{default}")
    lines.append(f"  # outcomes: the verdicts {', '.join(spec.verdicts)}")
    normal = "ok" if "ok" in spec.verdicts else spec.verdicts[0]
    fault = next(v for v in spec.verdicts if v != normal)
    return _MEASUREMENT.format(id=id, tools=_TOOLS, measure="\n".join(lines) + "\n",
                               normal=normal, fault=fault)


def skeleton_file(kind: str, id: str, *, evaluator: str | None = None) -> str:
    """A whole new pack file holding one ``kind`` entry."""
    item = skeleton(kind, id, evaluator=evaluator)
    return (
        f"# A new {kind} for this pack: fill every line marked TODO, then run\n"
        f"# `diagnose kb lint .` (DEVELOPERS.md, \"Writing knowledge\", explains each field).\n"
        f"{KINDS[kind]}:\n" + _indent(item, 2)
    )


def pack_folder(pack: str | Path | None, cwd: str | Path = ".") -> Path:
    """The pack folder to write into: ``pack``, or ``cwd`` when it holds pack.yaml.

    Raises:
        InputError: no folder given and ``cwd`` is no pack, or ``pack`` holds no pack.yaml.
    """
    folder = Path(pack) if pack else Path(cwd)
    if not (folder / MANIFEST).is_file():
        field = "--pack" if pack else "folder"
        raise InputError(field, f"{folder} holds no {MANIFEST}; give the pack folder with --pack")
    return folder


def write_skeleton(
    folder: str | Path,
    kind: str,
    id: str,
    *,
    file: str | Path | None = None,
    evaluator: str | None = None,
    journal: str | os.PathLike[str] | None = None,
) -> Path:
    """Write a skeleton into pack ``folder``; return the file written.

    Without ``file`` a new file ``<kind>s-<id>.yaml`` is made; with it the
    entry is appended to that file (a bare name is taken in the pack folder),
    into its section when the file has one. The rest of the file is kept as written.
    The file is written at once (a temporary file renamed into place); it is
    never the journal in use (``journal``, else the one DIAGNOSE_JOURNAL or the
    data folder names), a database file or a path through a symbolic link.

    Raises:
        InputError: bad kind, id or evaluator; the id is already used in the
            pack; the new file exists; the named file cannot take the entry
            or is refused.
    """
    from diagnose.paths import writable_target, write_text_atomically

    folder = Path(folder)
    item = skeleton(kind, id, evaluator=evaluator)
    _check_unused(folder, id)
    if file is None:
        target = folder / f"{kind}s-{id}.yaml"
        if target.exists():
            raise InputError("ID", f"{target} exists already; give --file to append to it")
        text = skeleton_file(kind, id, evaluator=evaluator)
    else:
        target = _pack_file(folder, Path(file))
        try:
            old = target.read_text(encoding="utf-8") if target.exists() else ""
        except (OSError, UnicodeDecodeError) as exc:
            reason = getattr(exc, "strerror", None) or "not UTF-8 text"
            raise InputError("--file", f"cannot read {target}: {reason}") from None
        text = append_entry(old, KINDS[kind], item) if old.strip() else \
            skeleton_file(kind, id, evaluator=evaluator)
    field = "--file" if file is not None else "ID"
    # Appending is what --file asks for, so an existing file is no surprise there.
    writable_target(target, journal=journal, force=file is not None, field=field)
    write_text_atomically(target, text, field=field)
    return target


def _pack_file(folder: Path, file: Path) -> Path:
    """``file`` as a file of the pack: a bare name lies in ``folder``; a path must lead there."""
    target = file if file.is_absolute() or file.parent != Path(".") else folder / file
    if target.parent.resolve() != folder.resolve():
        raise InputError("--file", f"{file} is not in the pack folder {folder}; the loader reads "
                         "only the pack folder's own *.yaml files")
    if target.suffix not in (".yaml", ".yml"):
        raise InputError("--file", f"{file}: a pack file ends in .yaml")
    return target


def append_entry(text: str, section: str, item: str) -> str:
    """``text`` (one pack file) with ``item`` added at the end of its ``section`` list.

    A file without the section gets it at the end. Comments and layout of
    the rest stay as they are.

    Raises:
        InputError: the file is not YAML, not a mapping, or holds the section
            in a form an entry cannot be added to (a non-empty flow list).
    """
    import yaml

    if not text.endswith("\n"):
        text += "\n"
    try:
        root = yaml.compose(text)
    except yaml.YAMLError as exc:
        raise InputError("--file", f"the file is not valid YAML: {exc}") from None
    if root is not None and not isinstance(root, yaml.MappingNode):
        raise InputError("--file", "the file is not a mapping of sections")
    pairs = root.value if root is not None else []
    found = [(k, v) for k, v in pairs if getattr(k, "value", None) == section]
    if not found:
        new = text + f"\n{section}:\n" + _indent(item, 2)
    else:
        key, value = found[0]
        new = _insert(text, key, value, item)
    try:
        data = yaml.safe_load(new)
    except yaml.YAMLError as exc:  # a layout this code did not foresee: write nothing
        raise InputError("--file", f"cannot add the entry to this file: {exc}") from None
    item_id = yaml.safe_load(item)[0]["id"]
    if not any(isinstance(e, dict) and e.get("id") == item_id for e in data.get(section) or []):
        raise InputError("--file", f"cannot add the entry to the `{section}` section of this file")
    return new


def _insert(text: str, key: Any, value: Any, item: str) -> str:
    import yaml

    lines = text.splitlines(keepends=True)
    if isinstance(value, yaml.SequenceNode) and not value.flow_style:
        col = value.start_mark.column
        end = value.end_mark.line + (1 if value.end_mark.column > 0 else 0)
        start = value.start_mark.line + 1
        while end > start and _loose(lines[end - 1], col):
            end -= 1  # blank lines and section-level comments stay before the next section
        return "".join(lines[:end]) + _indent(item, col) + "".join(lines[end:])
    empty_flow = isinstance(value, yaml.SequenceNode) and not value.value
    empty_scalar = isinstance(value, yaml.ScalarNode) and value.tag.endswith(":null")
    if not (empty_flow or empty_scalar):
        raise InputError("--file", f"`{key.value}:` is not a block list; add the entry by hand")
    head = text[:value.start_mark.index].rstrip(" ")
    tail = text[value.end_mark.index:]
    comment_and_rest = tail.split("\n", 1)
    rest = comment_and_rest[1] if len(comment_and_rest) > 1 else ""
    return head + comment_and_rest[0].rstrip() + "\n" + _indent(item, 2) + rest


def _loose(line: str, col: int) -> bool:
    """A line that does not belong to the last entry of a list at column ``col``."""
    stripped = line.strip()
    if not stripped:
        return True
    return stripped.startswith("#") and len(line) - len(line.lstrip(" ")) <= col


def _indent(text: str, n: int) -> str:
    pad = " " * n
    return "".join(pad + line if line.strip() else line for line in text.splitlines(keepends=True))


def _check_unused(folder: Path, id: str) -> None:
    """Refuse an id that a file of the pack already defines (lint would say duplicate-id)."""
    import yaml

    for path in sorted(folder.glob("*.y*ml")):
        try:
            data = yaml.safe_load(path.read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, yaml.YAMLError):
            continue  # lint speaks of broken files
        if not isinstance(data, dict):
            continue
        for section, entries in data.items():
            for entry in entries if isinstance(entries, list) else []:
                if isinstance(entry, dict) and entry.get("id") == id:
                    raise InputError("ID", f"{id} is already a {section[:-1]} in {path.name}")


# ---------------------------------------------------------------------------------------------
# a new pack

_PACK_ID = re.compile(r"^[a-z][a-z0-9-]*$")
_SENSES = ("released", "engaged")

_MANIFEST = """\
# A new knowledge pack. Write every text that says TODO (lint warns at each one),
# then run `diagnose kb lint {ref}` and `diagnose kb test {ref}`.
# DEVELOPERS.md, "Writing knowledge", explains each field.
pack: {id}
title: "TODO: the device and the faults this pack covers"
version: 0.1.0
{builds_on}{device}# Shown at the start of every session and in every repair log: adapt it.
notice: >-
  This tool is an aid for trained service staff. It does not replace local
  codes, the machine's own instructions or licensed practice, and it defers to
  them. Isolate and lock out power before hands-on work. Measurements on live
  circuits are for qualified persons only.
unknown_prior: 30     # "none of the known causes": times per 1,000 service calls
leak: 0.01            # chance of a complaint that its tree does not explain
"""

_DEVICE = """\
device:               # the device's words: {{device}}, {{switch_on}}, ... in any text of the chain
  noun: {noun}
  energised: {energised}   # what energising the coil does to it: released | engaged
  states: {{released: released, engaged: engaged}}   # its states' words (a brake: applied)
"""

_FAULTS = """\
# The complaint (the symptom first reported, the top of its fault tree) and the causes under it.
complaints:
  - id: {p}_complaint
    title: "TODO: the symptom as the technician reports it"
    caller: "TODO: the symptom as a caller says it on the phone"
    gate: or          # or | and | k_of_n (with k: 2); or: any one input causes it
    inputs: [{p}_cause]   # the causes or events under this complaint

causes:
  - id: {p}_cause
    title: "TODO: what is found, as the technician would say it"
    prior: 10         # times this cause is the one found per 1,000 service calls
    # description: how it comes about and what it looks like (optional)
"""

_CHECKS = """\
# A measurement instead: `diagnose kb new measurement ID --evaluator NAME --file checks.yaml`.
checks:
  - id: {p}_check
    title: "TODO: short name of the check"
    minutes: 5        # minutes of work, including getting at the part
    where: site       # site, or phone if an untrained caller can do it safely
    tools: []         # e.g. [multimeter]
    cautions: []      # ids of cautions shown before the instructions
    ask: "TODO: what the technician does and looks for"
    outcomes:         # outcome id -> its wording
      as_expected: "TODO: the answer when all is well"
      fault_seen: "TODO: the answer the fault gives"
    normal: {{as_expected: 0.95}}   # P(outcome) when none of the listed causes is present
    effects:          # P(outcome | cause present); left-out outcomes share the rest
      {p}_cause: {{fault_seen: 0.9}}
"""

_REPAIRS = """\
repairs:
  - id: {p}_repair
    title: "TODO: what is done"
    minutes: 30       # minutes of work, including getting at the part
    parts:            # one whole part per line, as it is ordered
      - "TODO: the part, to the nameplate"
    fixes: [{p}_cause]
    success: 0.95     # P(cured | a cause it fixes is present)
    cautions: []      # e.g. [lockout] with hazards: [hands_on]; lint asks for them by the wording
    confirm: {p}_check   # the check that confirms the cure
    ask: "TODO: what the technician does, cautions first"
"""

_TESTS = """\
# Knowledge test cases: `diagnose kb test {ref}` plays each one.
tests:
  - id: {p}_case
    title: "TODO: the story this case tells"
    complaints: [{p}_complaint]
    steps:
      - {{check: {p}_check, answer: fault_seen}}
    expect_top: [{p}_cause]
"""


def pack_files(id: str, *, builds_on: tuple[str, ...] | list[str] = (),
               device: str | None = None, energised: str | None = None,
               ref: str | None = None) -> dict[str, str]:
    """The files of a new pack ``id``: file name -> YAML text (``pack.yaml`` first).

    ``device`` and ``energised`` give the manifest its device terms; ``ref``
    is how the messages in the files name the pack (default: ``id``).

    Raises:
        InputError: an id that is not a pack id, a base that is not one, a
            device noun that is no plain word, ``energised`` without a device.

    >>> files = pack_files("demo", builds_on=["electrical-supply"], device="clutch",
    ...                    energised="engaged")
    >>> list(files)
    ['pack.yaml', 'faults.yaml', 'checks.yaml', 'repairs.yaml', 'tests.yaml']
    >>> "  energised: engaged" in files["pack.yaml"], "demo_cause" in files["tests.yaml"]
    (True, True)
    """
    if not _PACK_ID.match(id):
        raise InputError("ID", f"{id!r} is not a pack id: lower-case letters, digits and "
                         "hyphens, starting with a letter")
    for base in builds_on:
        if not _PACK_ID.match(base):
            raise InputError("--builds-on", f"{base!r} is not a pack id")
    lines = f"builds_on: [{', '.join(builds_on)}]   # packs whose entries this one reuses\n" \
        if builds_on else ""
    terms = _device_block(device, energised)
    p = id.replace("-", "_")
    ref = ref or id
    return {
        MANIFEST: _MANIFEST.format(id=id, ref=ref, builds_on=lines, device=terms),
        "faults.yaml": _FAULTS.format(p=p),
        "checks.yaml": _CHECKS.format(p=p),
        "repairs.yaml": _REPAIRS.format(p=p),
        "tests.yaml": _TESTS.format(p=p, ref=ref),
    }


def _device_block(device: str | None, energised: str | None) -> str:
    """The manifest's ``device:`` block ("" without a device)."""
    import json

    if device is None:
        if energised is not None:
            raise InputError("--energised", "give --device too: the energised sense is the "
                             "device's")
        return ""
    noun = device.strip()
    if not noun or len(noun) > 40 or not noun.isprintable() or set(noun) & set("{}\"\\#:"):
        raise InputError("--device", f"{device!r} is not a plain word for the device "
                         "(brake, clutch, ...)")
    if energised is not None and energised not in _SENSES:
        raise InputError("--energised", f"{energised!r}: give released or engaged")
    return _DEVICE.format(noun=json.dumps(noun, ensure_ascii=False),
                          energised=energised or "released")


def write_pack(parent: str | Path, id: str, *, builds_on: tuple[str, ...] | list[str] = (),
               device: str | None = None, energised: str | None = None,
               search: list[str] | None = None,
               journal: str | os.PathLike[str] | None = None) -> Path:
    """Write the new pack ``id`` into a new folder ``parent/id``; return that folder.

    Each base of ``builds_on`` must be a pack on the search path (``search``
    first). A folder that exists is never written into. Each file is written
    at once (:func:`diagnose.paths.replace_atomically`); when one cannot be,
    the new folder is removed again.

    Raises:
        InputError: see :func:`pack_files`; no such base pack; ``parent`` is no
            folder; ``parent/id`` exists; a file is refused or cannot be written.
    """
    from diagnose.kb.locate import find_pack_id
    from diagnose.paths import writable_target, write_text_atomically

    parent = Path(parent)
    target = parent / id
    files = pack_files(id, builds_on=builds_on, device=device, energised=energised,
                       ref=str(target) if parent != Path(".") else id)
    for base in builds_on:
        try:
            find_pack_id(base, search)
        except InputError as exc:
            raise InputError("--builds-on", exc.message) from None
    if not parent.is_dir():
        raise InputError("--folder", f"{parent} is not a folder")
    if os.path.lexists(target):
        raise InputError("ID", f"{target} exists already; a new pack gets a folder of its own")
    for name in files:
        writable_target(target / name, journal=journal, field="ID")
    try:
        target.mkdir()
    except OSError as exc:
        raise InputError("ID", f"cannot make the folder {target}: "
                         f"{exc.strerror or exc}") from None
    try:
        for name, text in files.items():
            write_text_atomically(target / name, text, field="ID")
    except BaseException:
        for name in files:
            (target / name).unlink(missing_ok=True)
        target.rmdir()
        raise
    return target
