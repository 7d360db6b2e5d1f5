"""Compile pack documents into a validated ``Model``; the graph only when asked.

Every problem is collected (not only the first), each tied to the file, line
and column where the trainer wrote the thing, with the closest existing id
suggested for an unknown reference.
"""

from __future__ import annotations

import difflib
import hashlib
import os
from contextlib import contextmanager
from dataclasses import dataclass, field
from functools import lru_cache
from typing import Any, Iterable, Iterator, Mapping

from diagnose.errors import InputError, Problem, Source
from diagnose.kb.model import (
    UNKNOWN_CAUSE,
    Case,
    Cause,
    Caution,
    Check,
    Complaint,
    Gate,
    Hazard,
    HazardCaution,
    Measurement,
    Model,
    Parameter,
    Reading,
    Repair,
    StateVar,
    Step,
)
from diagnose.kb.schema import SECTIONS, pack_schema
from diagnose.kb.terms import fill
from diagnose.kb.yamlpos import Document, Path
from diagnose.text import short_values

SUM_TOLERANCE = 0.001
MISSING = -1  # the knock-on errors of a base pack that was not read
_NOUN = {
    "cautions": "caution", "parameters": "parameter", "complaints": "complaint",
    "events": "event", "causes": "cause", "checks": "check", "repairs": "repair",
    "tests": "test case", "states": "state", "hazards": "hazard",
}


@dataclass
class _Item:
    section: str
    id: str
    data: dict[str, Any]
    doc: Document
    path: Path
    pack: str
    valid: bool  # passed the schema

    def at(self, *sub: Any) -> Source:
        return self.doc.where(self.path + sub)


@dataclass
class _Ctx:
    problems: list[Problem] = field(default_factory=list)
    items: dict[str, dict[str, _Item]] = field(default_factory=lambda: {s: {} for s in SECTIONS})
    extensions: list[_Item] = field(default_factory=list)  # `extend_checks` entries
    overrides: list[_Item] = field(default_factory=list)  # `override` entries
    hides: list[_Item] = field(default_factory=list)  # `hide` entries (id in `data["id"]`)
    # Knock-on errors: while `root` holds the index of an error, errors follow from that one
    # and are counted in `hidden` instead of shown. `missing_base` is where the chain names a
    # base pack that was not read: every unresolved reference may be in it (key MISSING).
    root: list[int] = field(default_factory=list)
    hidden: dict[int, int] = field(default_factory=dict)
    missing_base: Source | None = None
    unresolved: dict[str, int] = field(default_factory=dict)  # check -> its evaluator's error

    def error(self, msg: str, src: Source | None, code: str) -> None:
        if self.root:
            self.hidden[self.root[-1]] = self.hidden.get(self.root[-1], 0) + 1
            return
        self.problems.append(Problem("error", short_values(msg), src, code))

    def warn(self, msg: str, src: Source | None, code: str) -> None:
        if not self.root:
            self.problems.append(Problem("warning", short_values(msg), src, code))

    @contextmanager
    def following(self, root: int | None) -> Iterator[None]:
        """Errors made inside follow from error number ``root`` (None: from nothing)."""
        if root is not None:
            self.root.append(root)
        try:
            yield
        finally:
            if root is not None:
                self.root.pop()

    def ids(self, *sections: str) -> list[str]:
        out: list[str] = []
        for s in sections:
            out += list(self.items[s])
        return out

    def ref(self, value: Any, sections: tuple[str, ...], src: Source, what: str,
            extra: Iterable[str] = ()) -> bool:
        """True when ``value`` names an entity of ``sections``; else an error with a suggestion."""
        if isinstance(value, str) and any(value in self.items[s] for s in sections):
            return True
        pool = self.ids(*sections) + list(extra)
        if value in pool:
            return True
        if self.missing_base is not None and not self.root:  # it may be in the missing pack
            self.hidden[MISSING] = self.hidden.get(MISSING, 0) + 1
            return False
        close = difflib.get_close_matches(str(value), pool, n=1, cutoff=0.6)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        self.error(f"{what} {value!r} is not a known {' or '.join(_NOUN[s] for s in sections)}"
                   f"{hint}", src, "unknown-ref")
        return False


# ---------------------------------------------------------------------------------------------
# schema


@lru_cache(maxsize=1)
def _schema_check() -> Any:
    """The pack schema compiled for the fast yes/no (:mod:`diagnose.kb.schemacheck`), once."""
    from diagnose.kb.schemacheck import compile_schema

    return compile_schema(pack_schema())


@lru_cache(maxsize=1)
def _schema_validator() -> Any:
    """jsonschema's validator of the pack schema, made once: it words every schema message."""
    import jsonschema

    return jsonschema.Draft202012Validator(pack_schema())


def _schema_problems(doc: Document, is_manifest: bool, ctx: _Ctx) -> set[Path]:
    """Validate one document against the JSON Schema; return the paths of invalid items.

    A document the fast check finds valid is valid; any other is validated by
    jsonschema, whose errors are the messages.
    """
    from diagnose.kb.schemacheck import is_valid

    valid = is_valid(_schema_check(), doc.data)
    errors = [] if valid else _schema_validator().iter_errors(doc.data)
    bad: set[Path] = set()
    for err in sorted(errors, key=lambda e: list(map(str, e.path))):
        path = tuple(err.absolute_path)
        if len(path) >= 2 and (path[0] in SECTIONS or path[0] == "extend_checks"):
            bad.add(path[:2])
        at = path
        if err.validator == "additionalProperties" and isinstance(err.instance, dict):
            extra = [k for k in err.instance if k not in err.schema.get("properties", {})]
            at = path + (extra[0],) if extra else path
        if path[:1] == ("repairs",) and path[-1:] == ("parts",) and isinstance(err.instance, str):
            ctx.error(_parts_text_message(doc, path, err.instance), doc.where(path), "parts-text")
            continue
        ctx.error(_schema_message(err, path), doc.where(at), "schema")
    if not is_manifest:
        for key in ("pack", "builds_on", "version"):
            if isinstance(doc.data, dict) and key in doc.data:
                ctx.error(f"`{key}` belongs in pack.yaml only", doc.where((key,)), "schema")
    return bad


def _schema_message(err: Any, path: Path) -> str:
    where = _describe_path(path)
    if err.validator == "required":
        missing = err.message.split("'")[1] if "'" in err.message else err.message
        return f"{where}: missing field `{missing}`"
    if err.validator == "additionalProperties":
        extra = [p for p in err.instance if p not in err.schema.get("properties", {})]
        allowed = list(err.schema.get("properties", {}))
        parts = []
        for name in extra:
            close = difflib.get_close_matches(str(name), allowed, n=1)
            parts.append(f"`{name}`" + (f" (did you mean `{close[0]}`?)" if close else ""))
        return f"{where}: unknown field {', '.join(parts)}"
    if err.validator == "oneOf" and isinstance(err.instance, dict) and "check" in str(err.schema):
        return (f"{where}: a step is {{check, answer}}, {{check, skip}}, {{repair, cured}} "
                "or {repair, skip}")
    return f"{where}: {err.message}"


def _parts_text_message(doc: Document, path: Path, text: str) -> str:
    """The fix for ``parts`` written as one text (``parts: "fuse, relay"``): a list."""
    import re

    entry = doc.data.get("repairs")[path[1]] if len(path) == 3 else None
    name = f"repair {entry['id']!r}" if isinstance(entry, dict) and isinstance(
        entry.get("id"), str) else _describe_path(path[:2])
    items = [f"`- {_clip(x.strip())}`" for x in re.split(r"[,;]", text)[:3] if x.strip()]
    shown = " and ".join(items) or "`- <part>`"
    return (f"{name}: `parts` is one text ({text!r}), not a list of parts; write it as a YAML "
            f"list, one whole part per item: `parts:` with {shown} below it, each on a line of "
            "its own (a condition goes in parentheses after its part)")


def _describe_path(path: Path) -> str:
    if not path:
        return "file"
    head = path[0]
    if head in SECTIONS and len(path) >= 2 and isinstance(path[1], int):
        rest = ".".join(str(p) for p in path[2:])
        return f"{_NOUN[head]} #{path[1] + 1}" + (f" `{rest}`" if rest else "")
    return "`" + ".".join(str(p) for p in path) + "`"


# ---------------------------------------------------------------------------------------------
# collection


def _collect(sources: list[Any], ctx: _Ctx, schema: bool = True) -> None:
    for src in sources:
        for n, doc in enumerate(src.documents):
            bad = _schema_problems(doc, n == 0, ctx) if schema else set()
            if schema:
                _control_characters(doc, ctx)
            exts = doc.data.get("extend_checks") if isinstance(doc.data, dict) else None
            for i, raw in enumerate(exts if isinstance(exts, list) else []):
                if isinstance(raw, dict) and isinstance(raw.get("check"), str):
                    ctx.extensions.append(_Item("extend_checks", raw["check"], raw, doc,
                                                ("extend_checks", i), src.id,
                                                ("extend_checks", i) not in bad))
            _collect_device_entries(src, doc, bad, ctx)
            for section in SECTIONS:
                entries = doc.data.get(section) if isinstance(doc.data, dict) else None
                if not isinstance(entries, list):
                    continue
                for i, raw in enumerate(entries):
                    if not isinstance(raw, dict) or not isinstance(raw.get("id"), str):
                        continue
                    item = _Item(section, raw["id"], raw, doc, (section, i), src.id,
                                 (section, i) not in bad)
                    _register(item, ctx)


def _collect_device_entries(src: Any, doc: Document, bad: set[Path], ctx: _Ctx) -> None:
    """The ``override`` and ``hide`` entries of one document (see :func:`_device_pack`)."""
    data = doc.data if isinstance(doc.data, dict) else {}
    for i, raw in enumerate(data.get("override") if isinstance(data.get("override"), list)
                            else []):
        if isinstance(raw, dict) and isinstance(raw.get("id"), str):
            ctx.overrides.append(_Item("override", raw["id"], raw, doc, ("override", i),
                                       src.id, ("override", i) not in bad))
    for i, raw in enumerate(data.get("hide") if isinstance(data.get("hide"), list) else []):
        if isinstance(raw, str):
            ctx.hides.append(_Item("hide", raw, {"id": raw}, doc, ("hide", i), src.id, True))


def _device_pack(manifest: Mapping[str, Any], top: Any, ctx: _Ctx) -> dict[str, str]:
    """Apply a device pack's wording: overrides, then its terms in every worded field.

    An ``override`` entry gives new wording (``OVERRIDABLE`` keys) to an entity of
    a pack the device pack builds on; lint checks that it names one and changes
    something. Then every text of every entity, and the manifest's, has the
    device's terms filled in (:mod:`diagnose.kb.terms`). Returns the terms.
    """
    from diagnose.kb.schema import OVERRIDABLE
    from diagnose.kb.terms import fill_all, terms_of

    for o in ctx.overrides:
        target = next((x for pool in ctx.items.values() for x in [pool.get(o.id)] if x), None)
        if target is None:
            ctx.ref(o.id, tuple(SECTIONS), o.at("id"), "override")
            continue
        changes = {k: v for k, v in o.data.items() if k in OVERRIDABLE}
        if "values" in changes:  # a state's value titles: merged into its values
            changes["values"] = _value_titles(o, target, changes["values"], ctx)
        if all(target.data.get(k) == v for k, v in changes.items()):
            ctx.warn(f"override of {o.id!r} changes nothing", o.at("id"), "override-no-change")
        target.data = {**target.data, **changes}
    terms, wrong = terms_of(manifest.get("device"))
    if any(p.message.startswith("`device`") for p in ctx.problems):
        wrong = []  # the schema said it already, at its line
    for line in wrong:
        ctx.error(line, top.documents[0].where(("device",)) if top.documents else None,
                  "device-terms")
    for x in [i for pool in ctx.items.values() for i in pool.values()] + ctx.extensions:
        for sub, name, filled in fill_all(x.data, terms):
            if name:
                ctx.error(f"{{{name}}} is not a term of the device; terms: "
                          f"{', '.join('{' + t + '}' for t in terms)}", x.at(*sub),
                          "unknown-term")
            else:
                x.data = filled
    return terms


def _value_titles(o: Any, target: Any, given: Any, ctx: _Ctx) -> Any:
    """A state's ``values`` with the override's new titles: only titles change.

    A value the state does not have, or an override of ``values`` on anything
    but a state, is an error at its line.
    """
    have = target.data.get("values")
    if not isinstance(have, Mapping) or not isinstance(given, Mapping):
        ctx.error(f"override of {o.id!r}: `values` renames a state's values; {o.id!r} has none",
                  o.at("values"), "override")
        return have
    out = {k: dict(v) if isinstance(v, Mapping) else v for k, v in have.items()}
    for value, new in given.items():
        if value not in out or not isinstance(out[value], Mapping):
            ctx.error(f"override of {o.id!r}: the state has no value {value!r}; values: "
                      f"{', '.join(map(str, out))}", o.at("values", value), "override")
            continue
        if isinstance(new, Mapping) and "title" in new:
            out[value]["title"] = new["title"]
    return out


def _manifest_filled(top: Any, terms: Mapping[str, str], ctx: _Ctx) -> dict[str, Any]:
    """The manifest's texts (title, notice, ...) with the device's terms filled in.

    A name in braces that is not a term is an error at its line: the safety
    notice must never show raw braces.
    """
    out = {}
    for key, value in top.manifest.items():
        if not isinstance(value, str):
            out[key] = value
            continue
        out[key], unknown = fill(value, terms)
        for name in unknown:
            where = top.documents[0].where((key,)) if top.documents else None
            ctx.error(f"{{{name}}} is not a term of the device; terms: "
                      f"{', '.join('{' + t + '}' for t in terms)}", where, "unknown-term")
    return out


def _hidden(complaints: dict[str, Complaint], checks: dict[str, Check], ctx: _Ctx
            ) -> tuple[dict[str, Complaint], dict[str, Check]]:
    """The complaints and checks a device pack hides (``hide``), marked hidden.

    A hidden complaint is left out of the complaint menus; a hidden check is
    never offered or proposed (it counts as not for this unit). Both stay in
    the model, so that what the base packs say about them still holds.
    """
    for h in ctx.hides:
        if h.id in complaints:
            complaints[h.id] = _with(complaints[h.id], hidden=True)
        elif h.id in checks:
            checks[h.id] = _with(checks[h.id], hidden=True)
        else:
            ctx.ref(h.id, ("complaints", "checks"), h.at(), "hide")
    return complaints, checks


def _control_characters(doc: Any, ctx: _Ctx) -> None:
    """An error at each text of ``doc`` (a value or a key) holding a control character.

    A pack holds plain text: tab and newline are allowed, an escape sequence or
    any other control character is not (it would act on the technician's
    terminal; the faces show it as a placeholder, see :mod:`diagnose.text`).
    """
    from diagnose.text import unsafe

    if getattr(doc, "plain", False):  # read from a text with no control character, no escape
        return
    stack: list[tuple[tuple[Any, ...], Any]] = [((), doc.data)]
    while stack:
        path, value = stack.pop()
        if isinstance(value, str):
            found = unsafe(value)
            if found:
                ctx.error(f"control character {found} in text; a pack holds plain text (tab and "
                          "newline are allowed)", doc.where(path), "control-character")
        elif isinstance(value, dict):
            for k, v in reversed(value.items()):
                if isinstance(k, str) and unsafe(k):
                    ctx.error(f"control character {unsafe(k)} in a key; a pack holds plain text",
                              doc.where(path + (k,)), "control-character")
                stack.append((path + (k,), v))
        elif isinstance(value, list):
            stack.extend((path + (i,), v) for i, v in reversed(list(enumerate(value))))


def _register(item: _Item, ctx: _Ctx) -> None:
    for section, pool in ctx.items.items():
        first = pool.get(item.id)
        if first is None:
            continue
        if section == item.section or {section, item.section} & {"causes", "events"} == {
                section, item.section}:
            ctx.error(f"duplicate id {item.id!r}: already defined as a {_NOUN[section]} at "
                      f"{first.at('id')}", item.at("id"), "duplicate-id")
            return
    ctx.items[item.section][item.id] = item


# ---------------------------------------------------------------------------------------------
# entities


def _num(value: Any, default: float) -> float:
    """A number from pack data, or ``default`` when the schema already rejected it."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return default
    return float(value)


def _list(value: Any) -> tuple[Any, ...]:
    return tuple(value) if isinstance(value, list) else ()


def _map(value: Any) -> dict[Any, Any]:
    return dict(value) if isinstance(value, Mapping) else {}


def _fits(unit: str, target: str) -> bool:
    try:
        return bool(_units().fits(unit, target))
    except (InputError, ValueError):
        return False


def _units():
    from diagnose.physics import units

    return units


def _parameter(it: _Item, ctx: _Ctx) -> Parameter:
    d = it.data
    unit = str(d.get("unit", "") or "")
    lo_ = _num(d.get("min"), 0.0) if "min" in d else None
    hi_ = _num(d.get("max"), 0.0) if "max" in d else None
    choices = tuple(str(c) for c in _list(d.get("choices")))
    unit_ok = True
    if unit:
        try:
            unit_ok = _units().fits(unit, unit)
        except (InputError, ValueError):
            unit_ok = False
        if not unit_ok:
            ctx.error(f"parameter {it.id!r}: unknown unit {unit!r}", it.at("unit"), "unit")
    if lo_ is not None and hi_ is not None and lo_ > hi_:
        ctx.error(f"parameter {it.id!r}: min {lo_:g} is above max {hi_:g}", it.at("min"), "range")
    default = d.get("default")
    if default is not None and str(default).strip().lower() == "unknown":
        if not d.get("unknown", False):
            ctx.error(f"parameter {it.id!r}: default 'unknown' needs `unknown: true`",
                      it.at("default"), "range")
    elif default is not None and it.valid:
        if choices:
            if str(default) not in choices:
                ctx.error(f"parameter {it.id!r}: default {default!r} is not one of {list(choices)}",
                          it.at("default"), "range")
        elif unit and unit_ok:
            try:
                v = _units().parse_quantity(default, unit, it.id)
                if (lo_ is not None and v < lo_) or (hi_ is not None and v > hi_):
                    ctx.error(f"parameter {it.id!r}: default {default} is outside "
                              f"{lo_}..{hi_} {unit}", it.at("default"), "range")
            except InputError as exc:
                ctx.error(f"parameter {it.id!r}: default: {exc.message}", it.at("default"), "unit")
    return Parameter(
        id=it.id, prompt=str(d.get("prompt", it.id)), unit=unit if unit_ok else "",
        min=lo_, max=hi_, default=None if default is None else str(default),
        unknown_allowed=bool(d.get("unknown", False)), choices=choices, source=it.at(),
        only_if=_only_if_values(d.get("only_if")),
    )


def _only_if_values(raw: Any) -> dict[str, tuple[str, ...]]:
    """``only_if`` as parameter -> allowed values (a single value becomes a 1-tuple)."""
    out: dict[str, tuple[str, ...]] = {}
    for key, value in _map(raw).items():
        values = value if isinstance(value, list) else [value]
        out[str(key)] = tuple("yes" if v is True else "no" if v is False else str(v)
                              for v in values)
    return out


def _check_only_if(it: _Item, ctx: _Ctx, params: Mapping[str, Parameter]) -> None:
    """Each ``only_if`` names a parameter and, for a choice, one of its choices."""
    what = f"{_NOUN[it.section]} {it.id!r} only_if"
    for key, values in _only_if_values(it.data.get("only_if")).items():
        if key == it.id and it.section == "parameters":
            ctx.error(f"{what}: a parameter cannot depend on itself", it.at("only_if", key),
                      "unknown-ref")
            continue
        if not ctx.ref(key, ("parameters",), it.at("only_if", key), what):
            continue
        param = params.get(key)
        if param is None or not param.choices:
            continue
        for value in values:
            if value not in param.choices:
                ctx.error(f"{what}: {value!r} is not a choice of {key!r} "
                          f"({', '.join(param.choices)})", it.at("only_if", key), "unknown-ref")


def _gate(it: _Item, ctx: _Ctx) -> Gate:
    d = it.data
    kind = d.get("gate", "or")
    inputs = tuple(x for x in _list(d.get("inputs")) if isinstance(x, str))
    for j, x in enumerate(inputs):
        ctx.ref(x, ("causes", "events"), it.at("inputs", j), f"{_NOUN[it.section]} {it.id!r} input")
    k = int(_num(d.get("k"), 1))
    if kind == "k_of_n":
        if "k" not in d:
            ctx.error(f"{_NOUN[it.section]} {it.id!r}: a k_of_n gate needs `k`", it.at("gate"),
                      "gate")
        elif not 1 <= k <= len(inputs):
            ctx.error(f"{_NOUN[it.section]} {it.id!r}: k = {k} but the gate has {len(inputs)} "
                      "inputs", it.at("k"), "gate")
    elif kind == "and":
        k = len(inputs)
    return Gate(it.id, str(d.get("title", it.id)),
                kind if kind in ("or", "and", "k_of_n") else "or",
                inputs, k, it.at(), _only_if_values(d.get("only_if")))


def _distribution(row: Any, outcomes: tuple[str, ...], it: _Item, sub: Path, label: str,
                  ctx: _Ctx, *, warn_extremes: bool = True) -> dict[str, float]:
    """Complete one effects row over ``outcomes``: omitted outcomes share the rest evenly."""
    if not isinstance(row, Mapping):
        return {o: 1.0 / len(outcomes) for o in outcomes}
    given: dict[str, float] = {}
    for o, p in row.items():
        src = it.at(*sub, o)
        if o not in outcomes:
            close = difflib.get_close_matches(str(o), outcomes, n=1)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            ctx.error(f"check {it.id!r} {label}: {o!r} is not an outcome of this check "
                      f"(outcomes: {', '.join(outcomes)}){hint}", src, "unknown-ref")
            continue
        if not isinstance(p, (int, float)) or isinstance(p, bool) or not 0.0 <= p <= 1.0:
            ctx.error(f"check {it.id!r} {label}: probability {p!r} of {o!r} is outside [0, 1]", src,
                      "probability")
            continue
        given[o] = float(p)
    total = sum(given.values())
    rest = [o for o in outcomes if o not in given]
    src = it.at(*sub)
    if total > 1.0 + SUM_TOLERANCE:
        ctx.error(f"check {it.id!r} {label}: probabilities sum to {total:.3f}, more than 1", src,
                  "effects-sum")
    elif not rest and abs(total - 1.0) > SUM_TOLERANCE:
        ctx.error(f"check {it.id!r} {label}: probabilities sum to {total:.3f}, not 1", src,
                  "effects-sum")
    share = max(0.0, 1.0 - total) / len(rest) if rest else 0.0
    full = {o: given.get(o, share) for o in outcomes}
    if not rest and total > 0:
        full = {o: p / total for o, p in full.items()}
    if warn_extremes:
        zero = [o for o, p in full.items() if p <= 0.0]
        if zero and total <= 1.0 + SUM_TOLERANCE:
            ctx.warn(f"check {it.id!r} {label}: outcome {zero[0]!r} gets probability 0, so one "
                     "slip of the meter would rule this out for good; use 0.01", src,
                     "zero-probability")
    return full


def _outcomes(it: _Item, spec: Any, ctx: _Ctx) -> tuple[tuple[str, ...], dict[str, str]]:
    raw = it.data.get("outcomes")
    titles: dict[str, str] = {}
    if isinstance(raw, Mapping):
        outcomes = tuple(str(k) for k in raw)
        titles = {str(k): str(v) for k, v in raw.items()}
    elif isinstance(raw, list):
        outcomes = tuple(str(k) for k in raw)
    elif spec is not None:
        outcomes = _verdicts(spec, it)
    elif it.data.get("preparation"):
        outcomes = ("done",)
    else:
        ctx.error(f"check {it.id!r}: missing field `outcomes`", it.at(), "schema")
        outcomes = ("yes", "no")
    if spec is not None and raw is not None:
        # a signature left out of `outcomes` falls back to its plain verdict
        missing = [v for v in spec.verdicts if v not in outcomes]
        known = getattr(spec, "all_verdicts", spec.verdicts)
        extra = [o for o in outcomes if o not in known]
        if missing:
            ctx.error(f"check {it.id!r}: outcomes must cover every verdict of evaluator "
                      f"{spec.name!r}; missing {', '.join(missing)}", it.at("outcomes"),
                      "evaluator")
        if extra:
            ctx.error(f"check {it.id!r}: {', '.join(extra)} is not a verdict of evaluator "
                      f"{spec.name!r} (verdicts: {', '.join(spec.verdicts)})", it.at("outcomes"),
                      "evaluator")
    return outcomes, titles


def _verdicts(spec: Any, it: _Item) -> tuple[str, ...]:
    """The verdicts a check's evaluator can return with the inputs the check maps."""
    given = _map(_map(it.data.get("measure")).get("inputs"))
    pick = getattr(spec, "verdicts_for", None)
    return tuple(pick(given)) if pick is not None else tuple(spec.verdicts)


def _measurement(it: _Item, ctx: _Ctx, params: Mapping[str, Parameter]) -> tuple[Any, Any]:
    from diagnose.physics.registry import EVALUATORS

    m = it.data.get("measure")
    if not isinstance(m, Mapping):
        return None, None
    name = m.get("evaluator")
    spec = EVALUATORS.get(name) if isinstance(name, str) else None
    if spec is None:
        close = difflib.get_close_matches(str(name), list(EVALUATORS), n=1)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        ctx.error(f"check {it.id!r}: unknown evaluator {name!r}{hint}",
                  it.at("measure", "evaluator"), "evaluator")
        ctx.unresolved[it.id] = len(ctx.problems) - 1
        return None, None
    reading = m.get("reading", spec.reading)
    reading = reading if isinstance(reading, str) else None
    rspec = spec.input(reading) if reading else None
    if rspec is None:
        ctx.error(f"check {it.id!r}: evaluator {name!r} has no input {reading!r} for the reading"
                  if reading else f"check {it.id!r}: evaluator {name!r} takes no reading; "
                  "it computes from given values only", it.at("measure"), "evaluator")
        return None, spec
    unit = str(m.get("unit", rspec.unit))
    if "unit" in m:
        try:
            if not _fits(unit, rspec.unit):
                ctx.error(f"check {it.id!r}: unit {unit!r} does not fit the reading {reading!r} "
                          f"(expects {rspec.unit or 'a plain number'})", it.at("measure", "unit"),
                          "unit")
        except InputError as exc:
            ctx.error(f"check {it.id!r}: {exc.message}", it.at("measure", "unit"), "unit")
    inputs = _map(m.get("inputs"))
    errors = len(ctx.problems)
    also = _also_readings(it, m, spec, str(reading), inputs, ctx)
    if len(ctx.problems) > errors:  # what the card reads is not known: no knock-on errors
        ctx.unresolved[it.id] = errors
    for key, value in inputs.items():
        src = it.at("measure", "inputs", key)
        ispec = spec.input(key)
        if ispec is None:
            names = [i.name for i in spec.inputs]
            close = difflib.get_close_matches(str(key), names, n=1)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            ctx.error(f"check {it.id!r}: evaluator {name!r} has no input {key!r}{hint}", src,
                      "evaluator")
            continue
        if key == reading:
            ctx.error(f"check {it.id!r}: input {key!r} is the reading itself", src, "evaluator")
            continue
        _check_input_value(it, key, value, ispec, params, ctx)
    for ispec in spec.inputs:
        if ispec.required and ispec.name != reading and ispec.default is None \
                and ispec.name not in inputs and all(r.name != ispec.name for r in also) \
                and it.id not in ctx.unresolved:
            ctx.error(f"check {it.id!r}: evaluator {name!r} needs input {ispec.name!r} "
                      f"({ispec.help})", it.at("measure"), "evaluator")
    accuracy = _num(m.get("accuracy"), 0.0)
    at = m.get("at")
    return Measurement(str(name), str(reading), unit, inputs, accuracy, rspec.many,
                       str(at) if isinstance(at, str) else "", also), spec


def _also_readings(it: _Item, m: Mapping[str, Any], spec: Any, reading: str,
                   inputs: Mapping[str, Any], ctx: _Ctx) -> tuple[Reading, ...]:
    """The further named readings of a measurement (``also``), each checked at its line.

    Each names an input of the evaluator that is neither the main reading nor
    given in ``inputs``, takes one value (not a list), and has a unit that fits it.
    """
    out: list[Reading] = []
    for key, given in _map(m.get("also")).items():
        src = it.at("measure", "also", key)
        ispec = spec.input(key)
        if ispec is None or ispec.kind != "quantity":
            names = [i.name for i in spec.inputs if i.kind == "quantity"]
            close = difflib.get_close_matches(str(key), names, n=1)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            ctx.error(f"check {it.id!r}: evaluator {spec.name!r} has no quantity {key!r} to "
                      f"read{hint}", src, "evaluator")
            continue
        if key == reading or key in inputs:
            ctx.error(f"check {it.id!r}: {key!r} is read twice (also the "
                      f"{'main reading' if key == reading else 'value of an input'})", src,
                      "evaluator")
            continue
        if ispec.many:
            ctx.error(f"check {it.id!r}: {key!r} takes several readings; make it the main "
                      "`reading` of the card", src, "evaluator")
            continue
        unit = str(given.get("unit", "") if isinstance(given, Mapping) else given)
        try:
            if not _fits(unit, ispec.unit):
                ctx.error(f"check {it.id!r}: unit {unit!r} does not fit the reading {key!r} "
                          f"(expects {ispec.unit or 'a plain number'})", src, "unit")
        except InputError as exc:
            ctx.error(f"check {it.id!r}: {exc.message}", src, "unit")
        ask = str(given.get("ask", "")) if isinstance(given, Mapping) else ""
        out.append(Reading(str(key), unit, ask or ispec.help))
    return tuple(out)


def _check_input_value(it: _Item, key: str, value: Any, ispec: Any,
                       params: Mapping[str, Parameter], ctx: _Ctx) -> None:
    """Check the value a check's ``measure`` gives input ``key``: a fitting quantity or choice.

    A ``$parameter`` value must name a parameter whose unit or choices fit the input.
    """
    units = _units()
    src = it.at("measure", "inputs", key)
    if isinstance(value, str) and value.startswith("$"):
        pid = value[1:]
        if not ctx.ref(pid, ("parameters",), src, f"check {it.id!r} input {key!r}: parameter"):
            return
        param = params.get(pid)
        if param is None:
            return
        if ispec.kind == "quantity":
            try:
                ok = units.fits(param.unit, ispec.unit)
            except (InputError, ValueError):
                ok = False
            if not ok:
                ctx.error(f"check {it.id!r}: parameter {pid!r} is in {param.unit or 'no unit'}, "
                          f"which does not fit input {key!r} ({ispec.unit or 'a plain number'})",
                          src, "unit")
        elif ispec.kind == "choice":
            wrong = [c for c in param.choices if c not in ispec.choices]
            if not param.choices or wrong:
                ctx.error(f"check {it.id!r}: parameter {pid!r} must offer only "
                          f"{', '.join(ispec.choices)} for input {key!r}", src, "unit")
        return
    try:
        if ispec.kind == "quantity":
            units.parse_quantity(value, ispec.unit, key)
        elif ispec.kind == "choice" and str(value) not in ispec.choices:
            ctx.error(f"check {it.id!r}: input {key!r} must be one of {', '.join(ispec.choices)}",
                      src, "evaluator")
    except InputError as exc:
        ctx.error(f"check {it.id!r}: input {exc.message}", src, "unit")


def _check(it: _Item, ctx: _Ctx, params: Mapping[str, Parameter]) -> Check:
    d = it.data
    measurement, spec = _measurement(it, ctx, params)
    root = ctx.unresolved.get(it.id)  # an unknown evaluator: its verdicts are not known
    with ctx.following(root):
        outcomes, titles = _outcomes(it, spec, ctx)
    for j, c in enumerate(_list(d.get("cautions"))):
        ctx.ref(c, ("cautions",), it.at("cautions", j), f"check {it.id!r} caution")
    for j, c in enumerate(_list(d.get("needs"))):
        if c == it.id:
            ctx.error(f"check {it.id!r} needs itself", it.at("needs", j), "needs")
        else:
            ctx.ref(c, ("checks",), it.at("needs", j), f"check {it.id!r} needs")
    _check_only_if(it, ctx, params)
    where = d.get("where", "site")
    if where == "phone" and not d.get("caller"):
        ctx.error(f"check {it.id!r} is marked safe for a caller but has no `caller` wording",
                  it.at("where"), "caller-wording")
    effects = _effects(it, outcomes, ctx, root)
    if measurement is not None and spec is not None:
        _unstated_outcomes(it, tuple(o for o in outcomes if o not in spec.verdicts), ctx)
    normal, unknown = _normal_rows(it, outcomes, ctx, root)
    return Check(
        id=it.id, title=str(d.get("title", it.id)), minutes=_num(d.get("minutes"), 1.0),
        outcomes=outcomes, effects=effects, normal=normal, unknown=unknown, where=where,
        tools=tuple(str(t) for t in _list(d.get("tools"))),
        cautions=_list(d.get("cautions")), ask=str(d.get("ask", "")),
        caller=str(d.get("caller", "") or ""), needs=_list(d.get("needs")),
        measurement=measurement, outcome_titles=titles, source=it.at(),
        only_if=_only_if_values(d.get("only_if")),
        preparation=bool(d.get("preparation", False)),
        requires=_state_map(it, "requires", ctx), leaves=_state_map(it, "leaves", ctx),
        replaces=str(d.get("replaces", "") or ""),
        hazards=_hazard_refs(it, ctx), hazards_declared="hazards" in d,
        hazards_note=str(d.get("hazards_note", "") or ""),
    )


def _effects(it: _Item, outcomes: tuple[str, ...], ctx: _Ctx, root: int | None
             ) -> dict[str, dict[str, float]]:
    """The rows of check ``it`` and of its extensions, each complete over ``outcomes``.

    With ``root`` (the error of an unknown evaluator) the rows are not checked
    against the outcomes: what they would say follows from that error.
    """
    effects: dict[str, dict[str, float]] = {}
    for cause, row in _map(it.data.get("effects")).items():
        if ctx.ref(cause, ("causes",), it.at("effects", cause), f"check {it.id!r} effect on"):
            with ctx.following(root):
                effects[cause] = _distribution(row, outcomes, it, ("effects", cause),
                                               f"effects of {cause!r}", ctx)
    for ext in ctx.extensions:
        if ext.id != it.id:
            continue
        for cause, row in _map(ext.data.get("effects")).items():
            if not ctx.ref(cause, ("causes",), ext.at("effects", cause),
                           f"extension of check {it.id!r}: effect on"):
                continue
            if cause in effects:
                ctx.error(f"check {it.id!r} already has effects of {cause!r}",
                          ext.at("effects", cause), "duplicate-id")
                continue
            with ctx.following(root):
                effects[cause] = _distribution(row, outcomes, ext, ("effects", cause),
                                               f"effects of {cause!r}", ctx)
    return effects


def _normal_rows(it: _Item, outcomes: tuple[str, ...], ctx: _Ctx, root: int | None
                 ) -> tuple[dict[str, float], dict[str, float]]:
    """The ``normal`` and ``unknown`` rows of check ``it``, complete over ``outcomes``."""
    d = it.data
    if "normal" in d:
        with ctx.following(root):
            normal = _distribution(d["normal"], outcomes, it, ("normal",), "normal", ctx)
    elif d.get("preparation"):
        normal = {o: (1.0 if i == 0 else 0.0) for i, o in enumerate(outcomes)}
    else:
        ctx.error(f"check {it.id!r}: missing field `normal` (the outcomes when none of the listed "
                  "causes is present)", it.at(), "schema")
        normal = {o: 1.0 / len(outcomes) for o in outcomes}
    # "None of the known causes": a cause nobody wrote down mostly leaves a check as it
    # is without any of its listed causes, so its row is `normal` unless the pack says more.
    if "unknown" not in d:
        return normal, dict(normal)
    with ctx.following(root):
        return normal, _distribution(d["unknown"], outcomes, it, ("unknown",), "unknown", ctx,
                                     warn_extremes=False)


def _unstated_outcomes(it: _Item, outcomes: tuple[str, ...], ctx: _Ctx) -> None:
    """Warn about a signature the evaluator can return that no row of the check names.

    Such an outcome only gets the share an omitted outcome gets, under every
    cause alike: a reading with that sharper verdict would count for nothing.
    (A plain verdict left out shares what is left, as the trainer intends.)
    """
    named: set[str] = set(_map(it.data.get("normal")))
    for row in _map(it.data.get("effects")).values():
        named.update(_map(row))
    for ext in ctx.extensions:
        if ext.id == it.id:
            for row in _map(ext.data.get("effects")).values():
                named.update(_map(row))
    for o in outcomes:
        if o not in named:
            ctx.warn(f"check {it.id!r}: the evaluator can return the signature {o!r}, but no "
                     "row names it; say how likely it is in `normal` and under the causes "
                     "that give it",
                     it.at("measure"), "outcome-unstated")


def _state_map(it: _Item, key: str, ctx: _Ctx) -> dict[str, str]:
    """``requires`` / ``leaves``: each names a declared state and one of its values."""
    out: dict[str, str] = {}
    states = ctx.items["states"]
    for var, value in _map(it.data.get(key)).items():
        src = it.at(key, var)
        if not ctx.ref(var, ("states",), src, f"{_NOUN[it.section]} {it.id!r} {key}"):
            continue
        values = _map(states[var].data.get("values")) if var in states else {}
        if values and str(value) not in values:
            ctx.error(f"{_NOUN[it.section]} {it.id!r} {key}: {value!r} is not a value of state "
                      f"{var!r} ({', '.join(map(str, values))})", src, "unknown-ref")
            continue
        out[str(var)] = str(value)
    return out


def _state(it: _Item, ctx: _Ctx) -> StateVar:
    d = it.data
    values = _map(d.get("values"))
    titles = {str(v): str(_map(spec).get("title", v)) for v, spec in values.items()}
    setup = {str(v): _num(_map(spec).get("minutes"), 0.0) for v, spec in values.items()
             if "minutes" in _map(spec)}
    renews = frozenset(str(v) for v, spec in values.items()
                       if _map(spec).get("renews_cautions") is True)
    initial = str(d.get("initial", next(iter(titles), "")))
    if titles and initial not in titles:
        ctx.error(f"state {it.id!r}: initial value {initial!r} is not one of its values "
                  f"({', '.join(titles)})", it.at("initial"), "unknown-ref")
    return StateVar(it.id, str(d.get("title", it.id)), titles, initial, setup, it.at(), renews)


def _hazard(it: _Item, ctx: _Ctx, params: Mapping[str, Parameter]) -> Hazard:
    d = it.data
    _check_only_if(it, ctx, params)
    cautions: list[HazardCaution] = []
    for j, raw in enumerate(_list(d.get("cautions"))):
        spec = raw if isinstance(raw, Mapping) else {"caution": raw}
        cid = spec.get("caution")
        src = it.at("cautions", j)
        if not ctx.ref(cid, ("cautions",), src, f"hazard {it.id!r} caution"):
            continue
        after = {str(k): tuple(str(o) for o in _list(v))
                 for k, v in _map(spec.get("after")).items()}
        for chk in after:
            ctx.ref(chk, ("checks",), src, f"hazard {it.id!r} caution {cid!r} after")
        verdicts = {str(k): tuple(str(o) for o in _list(v))
                    for k, v in _map(spec.get("after_verdict")).items()}
        from diagnose.physics.registry import EVALUATORS

        for name, outs in verdicts.items():
            ev = EVALUATORS.get(name)
            if ev is None:
                ctx.error(f"hazard {it.id!r} caution {cid!r}: unknown evaluator {name!r}", src,
                          "evaluator")
            elif any(o not in ev.all_verdicts for o in outs):
                ctx.error(f"hazard {it.id!r} caution {cid!r}: evaluator {name!r} has no verdict "
                          f"{[o for o in outs if o not in ev.all_verdicts][0]!r}", src,
                          "evaluator")
        cautions.append(HazardCaution(str(cid), _only_if_values(spec.get("only_if")), after,
                                      verdicts))
    safe = d.get("caller_safe", False)
    caller_safe: bool | dict[str, tuple[str, ...]] = (
        _only_if_values(safe) if isinstance(safe, Mapping) else bool(safe))
    if isinstance(caller_safe, dict):
        for key in caller_safe:
            ctx.ref(key, ("parameters",), it.at("caller_safe", key),
                    f"hazard {it.id!r} caller_safe")
    return Hazard(it.id, str(d.get("title", it.id)), tuple(cautions),
                  _only_if_values(d.get("only_if")), _state_map(it, "withhold_until", ctx),
                  caller_safe, tuple(str(w).lower() for w in _list(d.get("words"))), it.at())


def _hazard_refs(it: _Item, ctx: _Ctx) -> tuple[str, ...]:
    """The ``hazards`` of a check or repair, each a declared hazard."""
    what = f"{_NOUN[it.section]} {it.id!r} hazard"
    return tuple(h for j, h in enumerate(_list(it.data.get("hazards")))
                 if ctx.ref(h, ("hazards",), it.at("hazards", j), what))


def _repair(it: _Item, ctx: _Ctx) -> Repair:
    d = it.data
    for j, c in enumerate(_list(d.get("fixes"))):
        ctx.ref(c, ("causes",), it.at("fixes", j), f"repair {it.id!r} fixes")
    for j, c in enumerate(_list(d.get("cautions"))):
        ctx.ref(c, ("cautions",), it.at("cautions", j), f"repair {it.id!r} caution")
    for j, c in enumerate(_list(d.get("needs"))):
        ctx.ref(c, ("checks",), it.at("needs", j), f"repair {it.id!r} needs")
    confirm = d.get("confirm")
    if confirm is not None:
        ctx.ref(confirm, ("checks",), it.at("confirm"), f"repair {it.id!r} confirm")
    for j, c in enumerate(_list(d.get("observes"))):
        ctx.ref(c, ("checks",), it.at("observes", j), f"repair {it.id!r} observes")
    _parts_checks(it, ctx)
    return Repair(
        id=it.id, title=str(d.get("title", it.id)), minutes=_num(d.get("minutes"), 1.0),
        fixes=_list(d.get("fixes")), parts=tuple(str(p) for p in _list(d.get("parts"))),
        success=_num(d.get("success"), 0.95), cautions=_list(d.get("cautions")),
        confirm=confirm, needs=_list(d.get("needs")), ask=str(d.get("ask", "") or ""),
        where=str(d.get("where", "site")), source=it.at(),
        only_if=_only_if_values(d.get("only_if")), observes=_list(d.get("observes")),
        leaves=_state_map(it, "leaves", ctx), requires=_state_map(it, "requires", ctx),
        hazards=_hazard_refs(it, ctx), hazards_declared="hazards" in d,
        hazards_note=str(d.get("hazards_note", "") or ""),
    )


# ---------------------------------------------------------------------------------------------
# parts: one whole part per item

#: Words that start the tail of a phrase, never the name of a part: an item of ``parts``
#: that starts with one is what is left of a name that YAML split at its comma
#: (``[friction disc, if the faces are pitted]``).
_TAIL_WORDS = frozenset((
    "if", "or", "and", "where", "when", "whenever", "with", "without", "its", "their", "rated",
    "as", "for", "unless", "including", "except", "otherwise", "else", "then", "which", "that",
    "whose", "of", "to", "in", "at", "by", "from", "but", "plus", "per", "such", "than", "e.g.",
    "i.e.", "etc", "etc.",
))
#: Words that join a phrase: in a bracketed list of several items, an item holding one may be
#: half of a name that held a comma (``[varistor, diode with Zener or RC part as ...]``).
_JOINING_WORDS = frozenset(("if", "or", "and", "where", "when", "with", "its", "rated", "as",
                            "for", "unless", "including"))
#: Words that qualify a part without naming one (``optional``, ``same size``).
_QUALIFIER_WORDS = frozenset((
    "optional", "optionally", "spare", "spares", "new", "required", "needed", "necessary",
    "applicable", "fitted", "damaged", "worn", "possible", "available", "similar", "equivalent",
    "matching", "same", "type", "size", "rating", "suit", "approved", "original", "specified",
    "the", "a", "an", "any", "one", "each", "both", "all", "also", "only", "so", "on", "x",
    "pcs", "pc", "off", "qty",
))


def _parts_checks(it: _Item, ctx: _Ctx) -> None:
    """An error at each item of a repair's ``parts`` that is not one whole part.

    An item that starts with a connecting word (``if the faces are pitted``) or
    is only a qualifier (``optional``) is the tail of a name split at its comma;
    in a bracketed list of several items, an item that holds such a word may be
    half of one, because the brackets split at every comma. Block lists of whole
    items are the rule (DEVELOPERS.md, "repairs").
    """
    parts = it.data.get("parts")
    if not isinstance(parts, list):
        return  # a text instead of a list is the schema's finding (`parts-text`)
    flow = _flow_list(it, len(parts))
    flawed = False
    for j, part in enumerate(parts):
        why = _part_flaw(part) if isinstance(part, str) else ""
        if not why:
            continue
        flawed = True
        before = parts[j - 1] if j and isinstance(parts[j - 1], str) else ""
        whole = "`- " + _clip(f"{before or '<the part>'} ({part.strip(' ()')})", 90) + "`"
        if flow:
            split = f"the brackets split `{_clip(before)}, {_clip(part)}` at its comma. " \
                if before else ""
            fix = (f"{split}Write one whole part per item, a condition in parentheses: {whole} "
                   "in a block list (one `- item` per line), or quote the whole name")
        else:
            fix = f"put it with the part it belongs to, in parentheses: {whole}"
        ctx.error(f"repair {it.id!r}: parts item {part!r} is not a part ({why}); {fix}",
                  it.at("parts", j), "parts-split")
    if flawed or not flow or len(parts) < 2:
        return
    for j, part in enumerate(parts):
        word = _joining_word(part) if isinstance(part, str) else ""
        if word:
            ctx.error(f"repair {it.id!r}: parts written in brackets split at every comma, and "
                      f"item {part!r} reads as part of a longer name (it holds {word!r}). "
                      "Write `parts` as a block list, one whole part per line "
                      f"(`- {_clip(part)}`), a condition or alternative in parentheses",
                      it.at("parts", j), "parts-split")
            return


def _clip(text: str, limit: int = 60) -> str:
    return text if len(text) <= limit else f"{text[:limit - 3]}..."


def _flow_list(it: _Item, n: int) -> bool:
    """True when the ``n`` items of ``parts`` were written in brackets (``[a, b]``).

    Told from the positions the loader keeps: the first item on the line of the
    key, or two items on one line, is a flow list; a block list has each item on
    a line of its own below the key.
    """
    key = it.at("parts")
    lines = [it.at("parts", j).line for j in range(n)]
    if not n or key.line is None or None in lines:
        return False
    return lines[0] == key.line or len(set(lines)) < n


def _part_flaw(part: str) -> str:
    """Why ``part`` is not one whole part ("" when it is).

    >>> _part_flaw("if the faces are pitted")
    "it starts with 'if', as the tail of a phrase does"
    >>> _part_flaw("friction disc (if the faces are pitted)")
    ''
    """
    import re

    text = part.strip()
    if not text:
        return "it is empty"
    first = text.split()[0].rstrip(",;:")
    if first in _TAIL_WORDS:
        return f"it starts with {first!r}, as the tail of a phrase does"
    words = [w.lower() for w in re.findall(r"[^\W\d_][\w'.-]*", text)]
    if (text.startswith("(") and text.endswith(")")) or (words and all(
            w.rstrip(".") in _QUALIFIER_WORDS or w in _TAIL_WORDS for w in words)):
        return "it is only a qualifier"
    return ""


def _joining_word(part: str) -> str:
    """The first word of ``part`` that joins a phrase (see ``_JOINING_WORDS``), or ""."""
    words = (w.strip(",;:()") for w in part.lower().split())
    return next((w for w in words if w in _JOINING_WORDS), "")


def _case(it: _Item, ctx: _Ctx, checks: Mapping[str, Check],
          moved: Mapping[str, str] | None = None) -> Case:
    d = it.data
    moved = moved or {}
    for j, c in enumerate(_list(d.get("complaints"))):
        ctx.ref(c, ("complaints",), it.at("complaints", j), f"test {it.id!r} complaint")
    for key in _map(d.get("nameplate")):
        ctx.ref(key, ("parameters",), it.at("nameplate", key), f"test {it.id!r} nameplate")
    for j, c in enumerate(_list(d.get("expect_top"))):
        ctx.ref(c, ("causes",), it.at("expect_top", j), f"test {it.id!r} expect_top",
                extra=(UNKNOWN_CAUSE,))
    for c in _map(d.get("expect_below")):
        ctx.ref(c, ("causes",), it.at("expect_below", c), f"test {it.id!r} expect_below",
                extra=(UNKNOWN_CAUSE,))
    for key, sections in (("expect_absent", ("causes",)),
                          ("expect_not_asked", ("checks", "parameters")),
                          ("expect_offered", ("checks",))):
        for j, c in enumerate(_list(d.get(key))):
            ctx.ref(moved.get(c, c), sections, it.at(key, j), f"test {it.id!r} {key}")
    steps: list[Step] = []
    for j, s in enumerate(_list(d.get("steps"))):
        if not isinstance(s, Mapping):
            continue
        src = it.at("steps", j)
        if isinstance(s.get("check"), str):
            cid = moved.get(s["check"], s["check"])
            if ctx.ref(cid, ("checks",), it.at("steps", j, "check"), f"test {it.id!r} step"):
                _step_answer(it, j, cid, checks.get(cid), ctx)
            steps.append(Step(check=cid, answer=s.get("answer"), skip=bool(s.get("skip", False)),
                              source=src))
        elif isinstance(s.get("repair"), str):
            ctx.ref(s["repair"], ("repairs",), it.at("steps", j, "repair"), f"test {it.id!r} step")
            skip = bool(s.get("skip", False))
            steps.append(Step(repair=s["repair"], cured=None if skip else bool(s.get("cured")),
                              skip=skip, source=src))
    return Case(
        id=it.id, complaints=_list(d.get("complaints")), steps=tuple(steps),
        expect_top=_list(d.get("expect_top")),
        nameplate={str(k): v for k, v in _map(d.get("nameplate")).items()},
        mode=str(d.get("mode", "site")), max_faults=int(_num(d.get("max_faults"), 1)),
        title=str(d.get("title", "") or ""), source=it.at(),
        expect_below={str(k): _num(v, 1.0) for k, v in _map(d.get("expect_below")).items()},
        expect_absent=_list(d.get("expect_absent")),
        expect_not_asked=tuple(moved.get(c, c) for c in _list(d.get("expect_not_asked"))),
        expect_offered=tuple(moved.get(c, c) for c in _list(d.get("expect_offered"))),
    )


def _step_answer(it: _Item, j: int, cid: str, chk: Check | None, ctx: _Ctx) -> None:
    """Step ``j`` of test ``it`` answers check ``cid``: with one of its outcomes, or a reading.

    A reading must be in a unit of the measurement's kind (the unit grammar of
    :mod:`diagnose.physics.units`), so that the case fails at lint, at the step,
    not only when `kb test` plays it.
    """
    step = it.data["steps"][j]
    ans = step.get("answer")
    if ans is None:
        if not step.get("skip"):
            ctx.error(f"test {it.id!r}: step on {cid!r} needs `answer` or `skip: true`",
                      it.at("steps", j), "schema")
        return
    if chk is None:
        return
    with ctx.following(ctx.unresolved.get(cid)):
        if chk.measurement is None and str(ans) not in chk.outcomes and str(ans) != "unsure":
            close = difflib.get_close_matches(str(ans), chk.outcomes, n=1)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            ctx.error(f"test {it.id!r}: {ans!r} is not an outcome of check {cid!r}{hint}",
                      it.at("steps", j, "answer"), "unknown-ref")
        why = _reading_problem(chk, ans) if chk.measurement is not None else ""
        if why:
            m = chk.measurement
            wanted = ", ".join(f"{r.name} ({r.unit or 'a plain number'})" for r in m.readings)
            ctx.error(f"test {it.id!r}: reading {ans!r} of check {cid!r} does not fit its "
                      + (f"readings {wanted}" if m.also else
                         f"unit {m.unit or 'a plain number'!r}") + f": {why}",
                      it.at("steps", j, "answer"), "unit")


def _reading_problem(chk: Check, ans: Any) -> str:
    """Why ``ans`` is neither an outcome of measurement ``chk`` nor a reading in its unit ("")."""
    from diagnose.physics.inputs import split_readings

    units = _units()
    m = chk.measurement
    assert m is not None
    text = ("yes" if ans else "no") if isinstance(ans, bool) else ans
    if isinstance(text, str) and _squash(text) in {_squash(o) for o in (*chk.outcomes, "unsure")}:
        return ""
    if m.also or isinstance(ans, Mapping):  # named readings: each in its own unit
        from diagnose.physics.inputs import named_readings

        try:
            got = named_readings(ans, {r.name: r.unit for r in m.readings}, m.reading)
            for r in m.readings:
                if not units.is_open(got[r.name]):
                    units.parse_quantity(got[r.name], r.unit, r.name, negative=True)
        except InputError as exc:
            return exc.message
        except ValueError:
            return ""
        return ""
    if isinstance(ans, (list, tuple)) and not m.many:
        return "expected one reading, got a list"
    try:
        for reading in split_readings(ans, m.reading) if m.many else [ans]:
            if not units.is_open(reading):
                units.parse_quantity(reading, m.unit, m.reading, negative=True)
    except InputError as exc:
        return exc.message
    except ValueError:
        return ""  # the check's own unit is unknown: an error at its line already
    return ""


def _squash(text: str) -> str:
    """An answer as the session matches it to an outcome: no case, spaces, _ or -."""
    return "".join(ch for ch in text.strip().lower() if ch not in " _-")


# ---------------------------------------------------------------------------------------------
# one quantity, one reading


def _replace_checks(checks: dict[str, Check], ctx: _Ctx) -> dict[str, str]:
    """Apply ``replaces``: the base check leaves, its causes' effects move to the new check.

    Returns the ids moved (old -> new), so that references can follow them.
    """
    moved: dict[str, str] = {}
    items = ctx.items["checks"]
    for cid, chk in list(checks.items()):
        target = chk.replaces
        if not target:
            continue
        it = items[cid]
        src = it.at("replaces")
        if not ctx.ref(target, ("checks",), src, f"check {cid!r} replaces"):
            continue
        if target == cid or items[target].pack == it.pack:
            ctx.error(f"check {cid!r} replaces {target!r} of its own pack: edit that check "
                      "instead", src, "replaces")
            continue
        base = checks.get(target)
        if base is None or target in moved:
            ctx.error(f"check {target!r} is replaced twice", src, "replaces")
            continue
        effects = {c: dict(r) for c, r in chk.effects.items()}
        missing = []
        for cause, row in base.effects.items():
            if cause in effects:
                continue
            if not set(o for o, p in row.items() if p > 0) <= set(chk.outcomes):
                missing.append(cause)
                continue
            effects[cause] = {o: float(row.get(o, 0.0)) for o in chk.outcomes}
        if missing:
            ctx.error(f"check {cid!r} replaces {target!r}, whose outcomes differ: give this "
                      f"check's effects of {', '.join(missing)} here", src, "replaces")
        checks[cid] = _with(chk, effects=effects)
        del checks[target]
        moved[target] = cid
    return moved


def _with(obj: Any, **changes: Any) -> Any:
    from dataclasses import replace

    return replace(obj, **changes)


def _redirect(checks: dict[str, Check], repairs: dict[str, Repair], moved: Mapping[str, str],
              ) -> tuple[dict[str, Check], dict[str, Repair]]:
    """References to a replaced check (needs, confirm, observes) follow it to its replacement."""
    def ids(xs: tuple[str, ...]) -> tuple[str, ...]:
        return tuple(dict.fromkeys(moved.get(x, x) for x in xs))

    checks = {i: _with(c, needs=ids(c.needs)) if set(c.needs) & set(moved) else c
              for i, c in checks.items()}
    out = {}
    for i, r in repairs.items():
        if set(r.needs) & set(moved) or set(r.observes) & set(moved) or r.confirm in moved:
            r = _with(r, needs=ids(r.needs), observes=ids(r.observes),
                      confirm=moved.get(r.confirm, r.confirm) if r.confirm else r.confirm)
        out[i] = r
    return checks, out


def _same_quantity(checks: Mapping[str, Check], ctx: _Ctx) -> None:
    """Warn when two checks read the same quantity at the same place: it would count twice.

    The place is the measurement's ``at``; without one, two checks of the same
    evaluator with the same reading and the very same inputs count as one place.
    """
    seen: dict[tuple[Any, ...], str] = {}
    for chk in checks.values():
        m = chk.measurement
        if m is None:
            continue
        inputs = tuple(sorted((str(k), str(v)) for k, v in m.inputs.items()))
        key = (m.evaluator, m.reading, m.at) if m.at else (m.evaluator, m.reading, inputs, "")
        first = seen.get(key)
        if first is None:
            seen[key] = chk.id
            continue
        other = checks[first]
        if _exclusive(other, chk):
            continue
        where = f" at {m.at}" if m.at else " with the same inputs"
        ctx.warn(f"checks {first!r} and {chk.id!r} both read {m.reading!r} by evaluator "
                 f"{m.evaluator!r}{where}: one reading would count twice; let one `replaces` "
                 "the other, or give the other's causes with `extend_checks`",
                 chk.source, "same-quantity")


def _same_caller(ctx: _Ctx) -> None:
    """Warn when two complaints of the composed pack give a caller the same line to pick.

    Wordings are compared without case, spacing or trailing punctuation: in
    phone mode the menu would show the same line twice.
    """
    seen: dict[str, _Item] = {}
    for comp in ctx.items["complaints"].values():
        wording = comp.data.get("caller")
        key = " ".join(wording.casefold().split()).rstrip(" .,;:!?…") \
            if isinstance(wording, str) else ""
        if not key:
            continue
        first = seen.setdefault(key, comp)
        if first is not comp:
            ctx.warn(f"complaints {first.id!r} and {comp.id!r} have the same caller wording "
                     f"{wording!r} (the first at {first.at('caller')}): in phone mode the menu "
                     "shows the same line twice; reword one so that a caller can tell them "
                     "apart", comp.at("caller"), "same-caller")


def _exclusive(a: Check, b: Check) -> bool:
    """True when the nameplate never offers both checks (their only_if exclude each other)."""
    for param, values in a.only_if.items():
        if param in b.only_if and not set(values) & set(b.only_if[param]):
            return True
    return False


# ---------------------------------------------------------------------------------------------
# whole-pack checks


def _tree_checks(model: Model, ctx: _Ctx) -> bool:
    """Cycles, causes reaching no complaint, complaints with no cause. False on a cycle."""
    import networkx as nx

    g = nx.DiGraph()
    for gate in list(model.events.values()) + [c.gate for c in model.complaints.values()]:
        for x in gate.inputs:
            g.add_edge(x, gate.id)
    cycle = None if nx.is_directed_acyclic_graph(g) else nx.find_cycle(g)
    if cycle:
        names = " -> ".join([cycle[0][0]] + [v for _, v in cycle])
        first = model.events.get(cycle[0][1]) or model.complaints.get(cycle[0][1])
        src = first.source if first else None
        ctx.error(f"the fault tree has a cycle: {names}", src, "cycle")
        return False
    feeding: set[str] = set()  # everything below some complaint, in one sweep
    stack = [c for c in model.complaints if c in g]
    while stack:
        for parent in g.predecessors(stack.pop()):
            if parent not in feeding:
                feeding.add(parent)
                stack.append(parent)
    for comp in model.complaints.values():
        if not model.tree_causes(comp.id):
            ctx.error(f"complaint {comp.id!r} has no cause below it", comp.source, "no-cause")
    for cause in model.causes.values():
        if cause.id not in feeding:
            ctx.error(f"cause {cause.id!r} reaches no complaint: put it under a complaint's or "
                      "event's `inputs`", cause.source, "unreachable-cause")
    for ev in model.events.values():
        if ev.id not in feeding:
            ctx.warn(f"event {ev.id!r} reaches no complaint", ev.source, "unreachable-event")
    return True


def _usage_checks(model: Model, ctx: _Ctx) -> None:
    fixed = {c for r in model.repairs.values() for c in r.fixes}
    for cause in model.causes.values():
        if cause.id not in fixed:
            ctx.error(f"cause {cause.id!r} has no repair that fixes it", cause.source, "no-repair")
    for chk in model.checks.values():
        if not chk.effects and not chk.preparation:
            ctx.warn(f"check {chk.id!r} observes no cause (give it `effects`, or mark it "
                     "`preparation: true`)", chk.source, "observes-nothing")
    used = {c for x in list(model.checks.values()) + list(model.repairs.values())
            for c in x.cautions}
    used |= {hc.caution for h in model.hazards.values() for hc in h.cautions}
    for caution in model.cautions.values():
        if caution.id not in used:
            ctx.warn(f"caution {caution.id!r} is not used by any check or repair", caution.source,
                     "unused-caution")
    import networkx as nx

    needs = nx.DiGraph([(c.id, n) for c in model.checks.values() for n in c.needs])
    if not nx.is_directed_acyclic_graph(needs):
        cycle = nx.find_cycle(needs)
        ctx.error("checks need each other in a circle: "
                  + " -> ".join([cycle[0][0]] + [v for _, v in cycle]),
                  model.checks[cycle[0][0]].source, "needs")


# ---------------------------------------------------------------------------------------------
# safety


#: Sentence openings that are cautions, which belong before the instruction.
_CAUTION_OPENINGS = ("do not", "don't", "never", "stay clear", "keep clear", "keep away",
                     "keep everyone", "keep fingers", "keep hands", "stay away", "if you see",
                     "be ready", "mind ")


def _safety_checks(model: Model, ctx: _Ctx) -> None:
    """Hazards declared and their cautions shown; cautions before instructions in wordings."""
    if not model.hazards:
        return
    requires: dict[str, set[str]] = {}  # caution -> hazards that require it
    for hz in model.hazards.values():
        for hc in hz.cautions:
            requires.setdefault(hc.caution, set()).add(hz.id)
    for item in list(model.checks.values()) + list(model.repairs.values()):
        noun = "check" if item.id in model.checks else "repair"
        src = item.source
        for h in item.hazards:
            hz = model.hazards.get(h)
            for hc in (hz.cautions if hz else ()):
                if not hc.only_if and not hc.after and not hc.after_verdict \
                        and hc.caution not in item.cautions:
                    ctx.error(f"{noun} {item.id!r} has hazard {h!r}, which requires caution "
                              f"{hc.caution!r}: add it to its `cautions`", src,
                              "missing-caution")
        for c in item.cautions:
            owners = requires.get(c, set())
            if owners and not owners & set(item.hazards):
                ctx.error(f"{noun} {item.id!r} shows caution {c!r} but declares no hazard that "
                          f"requires it: add `hazards: [{sorted(owners)[0]}]`"
                          + (f" (or one of {', '.join(sorted(owners)[1:])})"
                             if len(owners) > 1 else ""), src, "undeclared-hazard")
        text = " ".join((item.title, item.ask, getattr(item, "caller", ""))).lower()
        hits = sorted({h.id for h in model.hazards.values()
                       for w in h.words if _has_word(text, w) and h.id not in item.hazards})
        if hits and not item.hazards_declared:
            ctx.error(f"{noun} {item.id!r} reads as hazardous ({hits[0]}) but declares no "
                      f"hazards: add `hazards: [{', '.join(hits)}]`, or `hazards: []` with a "
                      "`hazards_note` saying why", src, "hazard-wording")
        elif hits and not item.hazards and not item.hazards_note:
            ctx.error(f"{noun} {item.id!r} reads as hazardous ({hits[0]}) with `hazards: []`: "
                      "say why in `hazards_note`", src, "hazard-wording")
        for wording in ("ask", "caller"):
            late = _late_caution(getattr(item, wording, ""))
            if late:
                ctx.error(f"{noun} {item.id!r} `{wording}`: the caution {late!r} comes after the "
                          "instruction; put it first", src, "caution-last")


def _has_word(text: str, word: str) -> bool:
    import re

    return re.search(r"(?<![a-z])" + re.escape(word), text) is not None


def _late_caution(text: str) -> str:
    """The first caution sentence that follows an instruction in ``text`` ("" when none)."""
    import re

    sentences = [x.strip() for x in re.split(r"(?<=[.?!:])\s+", " ".join(text.split())) if x]
    for n, sentence in enumerate(sentences):
        if n and sentence.lower().startswith(_CAUTION_OPENINGS):
            return sentence[:60]
    return ""


# ---------------------------------------------------------------------------------------------
# graph


def build_graph(model: Model) -> Any:
    """The knowledge as a networkx DiGraph (see DEVELOPERS.md, "The graph")."""
    import networkx as nx

    g = nx.DiGraph(pack=model.id, title=model.title, version=model.version)

    def node(kind: str, ent: Any, **attrs: Any) -> str:
        name = f"{kind}:{ent.id}"
        src = getattr(ent, "source", None)
        g.add_node(name, kind=kind, id=ent.id, title=getattr(ent, "title", ent.id),
                   file=src.file if src else "", line=src.line if src else 0, **attrs)
        return name

    for p in model.parameters.values():
        node("parameter", p, unit=p.unit)
    for c in model.cautions.values():
        node("caution", c, level=c.level, text=c.text)
    for c in model.causes.values():
        node("cause", c, prior=c.prior, pack=c.pack)
    for e in model.events.values():
        node("event", e, gate=e.kind, k=e.k)
    for c in model.complaints.values():
        node("complaint", c, gate=c.gate.kind, k=c.gate.k)
    for c in model.checks.values():
        node("check", c, minutes=c.minutes, where=c.where, measurement=bool(c.measurement),
             evaluator=c.measurement.evaluator if c.measurement else "",
             outcomes=",".join(c.outcomes))
    for r in model.repairs.values():
        node("repair", r, minutes=r.minutes, success=r.success, parts="; ".join(r.parts))
    for gate in list(model.events.values()) + [c.gate for c in model.complaints.values()]:
        kind = "complaint" if gate.id in model.complaints else "event"
        for x in gate.inputs:
            src = "cause" if x in model.causes else "event"
            g.add_edge(f"{src}:{x}", f"{kind}:{gate.id}", kind="feeds")
    for c in model.checks.values():
        for cause in c.effects:
            g.add_edge(f"check:{c.id}", f"cause:{cause}", kind="observes")
        for n in c.needs:
            g.add_edge(f"check:{c.id}", f"check:{n}", kind="needs")
        for w in c.cautions:
            g.add_edge(f"check:{c.id}", f"caution:{w}", kind="warns")
        if c.measurement:
            for v in c.measurement.inputs.values():
                if isinstance(v, str) and v.startswith("$"):
                    g.add_edge(f"check:{c.id}", f"parameter:{v[1:]}", kind="uses")
    for r in model.repairs.values():
        for cause in r.fixes:
            g.add_edge(f"repair:{r.id}", f"cause:{cause}", kind="fixes")
        for w in r.cautions:
            g.add_edge(f"repair:{r.id}", f"caution:{w}", kind="warns")
        for n in r.needs:
            g.add_edge(f"repair:{r.id}", f"check:{n}", kind="needs")
        if r.confirm:
            g.add_edge(f"repair:{r.id}", f"check:{r.confirm}", kind="confirmed_by")
    return g


# ---------------------------------------------------------------------------------------------
# entry point


def compile_sources(sources: list[Any], *, learned: Mapping[str, float] | None = None,
                    schema: bool = True) -> tuple[Model | None, list[Problem]]:
    """Compile the documents of a pack chain (base packs first) into a Model.

    Returns the model (``None`` when any error was found) and every problem.
    ``learned`` replaces the priors of the causes it names (an overlay).
    ``schema=False`` skips the JSON Schema pass, for data that code built and
    already checked (the benchmark times that pass on its own).
    """
    ctx = _Ctx(missing_base=_missing_base(sources))
    _collect(sources, ctx, schema)
    it = ctx.items
    top = sources[-1]
    terms = _device_pack(top.manifest, top, ctx)
    manifest = _manifest_filled(top, terms, ctx)

    cautions = {i: Caution(i, str(x.data.get("level", "NOTICE")), str(x.data.get("text", "")),
                           x.at()) for i, x in it["cautions"].items()}
    params = {i: _parameter(x, ctx) for i, x in it["parameters"].items()}
    states = {i: _state(x, ctx) for i, x in it["states"].items()}
    hazards = {i: _hazard(x, ctx, params) for i, x in it["hazards"].items()}
    for section in ("parameters", "causes", "events"):
        for x in it[section].values():
            _check_only_if(x, ctx, params)
    causes = {}
    for i, x in it["causes"].items():
        prior = x.data.get("prior", 1.0)
        prior = float(prior) if isinstance(prior, (int, float)) and not isinstance(prior, bool) \
            else 1.0
        if learned and i in learned:
            prior = float(learned[i])
        causes[i] = Cause(i, str(x.data.get("title", i)), prior,
                          str(x.data.get("description", "") or ""), x.pack, x.at(),
                          _only_if_values(x.data.get("only_if")))
    events = {i: _gate(x, ctx) for i, x in it["events"].items()}
    complaints = {i: Complaint(i, str(x.data.get("title", i)), _gate(x, ctx),
                               str(x.data.get("caller", "") or ""),
                               str(x.data.get("description", "") or ""), x.at())
                  for i, x in it["complaints"].items()}
    checks = {i: _check(x, ctx, params) for i, x in it["checks"].items()}
    complaints, checks = _hidden(complaints, checks, ctx)
    for x in it["repairs"].values():
        _check_only_if(x, ctx, params)
    repairs = {i: _repair(x, ctx) for i, x in it["repairs"].items()}
    for ext in ctx.extensions:
        ctx.ref(ext.id, ("checks",), ext.at("check"), "extend_checks: check")
    moved = _replace_checks(checks, ctx)
    if moved:
        checks, repairs = _redirect(checks, repairs, moved)
    _same_quantity(checks, ctx)
    _same_caller(ctx)
    # Cases of the base packs run too: a device pack must not break what its base knew.
    cases = {i: _case(x, ctx, checks, moved) for i, x in it["tests"].items()}

    digest = hashlib.sha256()
    for src in sources:
        for doc in src.documents:
            digest.update(getattr(doc, "text_hash", "").encode())
    version = manifest.get("version", "0")
    model = Model(
        id=top.id, title=str(manifest.get("title", top.id)), version=str(version),
        packs=tuple(s.id for s in sources), notice=str(manifest.get("notice", "") or ""),
        parameters=params, complaints=complaints, events=events, causes=causes, checks=checks,
        repairs=repairs, cautions=cautions, cases=cases, states=states, hazards=hazards,
        unknown_prior=_num(manifest.get("unknown_prior"), 5.0),
        leak=_num(manifest.get("leak"), 0.01), content_hash=digest.hexdigest()[:16],
        path=top.folder, cause_order={c: i for i, c in enumerate(causes)}, terms=terms,
    )
    _whole_pack_checks(model, ctx)
    if any(p.level == "error" for p in ctx.problems):
        return None, ctx.problems
    return model, ctx.problems


def _whole_pack_checks(model: Model, ctx: _Ctx) -> None:
    """The fault tree, usage and safety, unless a missing base pack leaves them half a pack.

    Then each error that hid knock-on errors says how many: in its own message,
    or (for the missing base pack, whose error the loader reported) in a
    ``knock-on`` error at the same place, which lint joins to it.
    """
    if ctx.missing_base is None:
        if not any(p.level == "error" and p.code == "unknown-ref" for p in ctx.problems):
            if _tree_checks(model, ctx):
                _usage_checks(model, ctx)
        _safety_checks(model, ctx)
    for root, n in ctx.hidden.items():
        note = f"and {n} errors that follow from it are not shown" if n != 1 else \
            "and 1 error that follows from it is not shown"
        if root == MISSING:
            ctx.problems.append(Problem("error", note, ctx.missing_base, "knock-on"))
        else:
            first = ctx.problems[root]
            ctx.problems[root] = _with(first, message=f"{first.message} ({note})")


def _missing_base(sources: list[Any]) -> Source | None:
    """Where the chain names a base pack that was not read (by id or folder name), or None."""
    read = {s.id for s in sources} | {os.path.basename(str(s.folder)) for s in sources}
    for src in sources:
        bases = src.manifest.get("builds_on")
        for i, base in enumerate(bases if isinstance(bases, list) else []):
            if isinstance(base, str) and base not in read and src.documents:
                return src.documents[0].where(("builds_on", i))
    return None


def compile_pack(files: list[tuple[str, dict[str, Any]]], *, pack_id: str = "inline",
                 schema: bool = True) -> Model:
    """Compile in-memory pack files (name, data) with no positions: for benchmarks and tests.

    Raises:
        KnowledgeError: the data has errors.
    """
    from diagnose.errors import KnowledgeError
    from diagnose.kb.loader import PackSource

    src = PackSource(id=pack_id, folder=pack_id,
                     documents=[Document(name, data) for name, data in files])
    model, problems = compile_sources([src], schema=schema)
    if model is None:
        raise KnowledgeError([p for p in problems if p.level == "error"])
    return model
