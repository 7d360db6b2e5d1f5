"""Safe YAML reading that remembers where every value was written.

The result is plain data (dicts, lists, scalars) plus a table from the JSON
path of each value (``("checks", 3, "effects", "coil_open")``) to its
``Source``. The same paths come back in jsonschema errors, so every message
can point at a line.

Only the YAML 1.2 booleans ``true``/``false`` are booleans here: ``yes``,
``no``, ``on`` and ``off`` stay text, because trainers use them as outcome
ids and answers.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import Any

import yaml

from diagnose.errors import Problem, Source

Path = tuple[Any, ...]


_BASE = getattr(yaml, "CSafeLoader", yaml.SafeLoader)  # libyaml when present: ten times faster


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
    """One YAML file: its data and the position of every value in it."""

    path: str
    data: Any
    positions: dict[Path, Source] = field(default_factory=dict)

    def where(self, path: Path) -> Source:
        """The position of ``path`` or of its closest recorded ancestor."""
        if not self.positions:  # data built in code: the file is all there is
            return Source(self.path)
        p = tuple(path)
        while p:
            if p in self.positions:
                return self.positions[p]
            p = p[:-1]
        return self.positions.get((), Source(self.path, 1, 1))


def _mark(path: str, node: yaml.Node) -> Source:
    return Source(path, node.start_mark.line + 1, node.start_mark.column + 1)


def read_yaml(text: str, path: str) -> tuple[Document | None, list[Problem]]:
    """Parse ``text`` safely; return the document and any problems (syntax, duplicate keys)."""
    problems: list[Problem] = []
    loader = _Loader(text)
    try:
        node = loader.get_single_node()
        data = loader.construct_document(node) if node is not None else None
        doc = Document(path, {} if data is None else data)
        if node is not None:
            _walk(node, (), doc, problems, path, loader)
        return doc, problems
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        src = Source(path, mark.line + 1, mark.column + 1) if mark else Source(path)
        what = " ".join(s for s in (exc.context, exc.problem) if s) or "not valid YAML"
        return None, [Problem("error", f"YAML syntax: {what}", src, "yaml")]
    except yaml.YAMLError as exc:
        return None, [Problem("error", f"YAML: {exc}", Source(path), "yaml")]
    except RecursionError:
        return None, [Problem("error", "YAML: nested too deeply", Source(path), "yaml")]
    finally:
        loader.dispose()


def _walk(node: yaml.Node, at: Path, doc: Document, problems: list[Problem], path: str,
          loader: Any) -> None:
    doc.positions[at] = _mark(path, node)
    if isinstance(node, yaml.MappingNode):
        seen: dict[Any, Source] = {}
        for key_node, value_node in node.value:
            key = _scalar_key(key_node, loader)
            here = _mark(path, key_node)
            if key in seen:
                problems.append(Problem(
                    "error", f"key {key!r} appears twice in one mapping (first at line "
                    f"{seen[key].line}); YAML keeps only the last", here, "duplicate-key"))
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
