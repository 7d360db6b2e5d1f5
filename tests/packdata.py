"""What several tests read out of pack files: every place in a document, every unit named."""

from __future__ import annotations

from collections.abc import Iterable, Iterator
from pathlib import Path
from typing import Any

import yaml

from diagnose.physics import units
from diagnose.physics.registry import EVALUATORS


def places(value: Any, at: tuple[Any, ...] = ()) -> Iterator[tuple[Any, ...]]:
    """The path of every node of a YAML document (keys and list positions), the root first."""
    yield at
    if isinstance(value, dict):
        for k, v in value.items():
            yield from places(v, at + (k,))
    elif isinstance(value, list):
        for i, v in enumerate(value):
            yield from places(v, at + (i,))


def units_in_use(packs: Iterable[Path]) -> set[str]:
    """Every unit the calculators name (and their defaults'), and every ``unit`` or unit of a
    ``default`` anywhere in the pack files ``packs`` (a file broken on purpose is passed over)."""
    found = {unit for unit, _, _ in units._KINDS}
    for spec in EVALUATORS.values():
        for inp in spec.inputs:
            found.add(inp.unit)
            if isinstance(inp.default, str) and inp.kind == "quantity":
                found.add(units.unit_of(inp.default) or "")
    for path in packs:
        try:
            data = yaml.safe_load(path.read_text(encoding="utf-8"))
        except yaml.YAMLError:
            continue
        stack = [data]
        while stack:
            item = stack.pop()
            if isinstance(item, dict):
                for key, value in item.items():
                    if key == "unit" and isinstance(value, str):
                        found.add(value)
                    elif key == "default" and isinstance(value, str) and units.unit_of(value):
                        found.add(units.unit_of(value) or "")
                    else:
                        stack.append(value)
            elif isinstance(item, list):
                stack.extend(item)
    return found
