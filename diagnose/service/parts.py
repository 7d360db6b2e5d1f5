"""The parts fitted at a repair, as a technician types them.

One line, items separated by ``;``. Each item is a number picking a part
from the repair's list, or a name; ``2x`` (or ``2 x``, ``2×``) before it is
the quantity, and ``#NUMBER`` anywhere in it the part number::

    1                       one of the first listed part
    2x 1 #FD-120            two of it, part number FD-120
    1; 4x mounting screw    one of part 1, four mounting screws

An empty line is no parts.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from typing import Any

from diagnose.errors import InputError

_QTY = re.compile(r"^\s*(\d+(?:[.,]\d+)?)\s*[x×]\s*", re.IGNORECASE)
_NUMBER = re.compile(r"#\s*(\S+)")

#: What the prompt says about the format.
HINT = ("Enter: none; a list number or a name, `2x` for two, `#` a part number, "
        "`;` between items")


def parse_parts(text: str, listed: Sequence[str]) -> list[dict[str, Any]]:
    """The parts fitted, as ``{"part", "qty", "number"}``, from one typed line.

    >>> first, second = parse_parts("2x 1 #FD-120; cover seal", ["friction disc", "seal"])
    >>> first
    {'part': 'friction disc', 'qty': 2, 'number': 'FD-120'}
    >>> second
    {'part': 'cover seal', 'qty': 1, 'number': ''}
    >>> parse_parts("", ["friction disc"])
    []

    Raises:
        InputError: a number that is not on the list, an item with no name, or a
            quantity of zero.
    """
    out = []
    for raw in text.split(";"):
        item = raw.strip()
        if not item:
            continue
        number = ""
        found = _NUMBER.search(item)
        if found:
            number, item = found.group(1), (item[:found.start()] + item[found.end():]).strip()
        qty: float = 1
        found = _QTY.match(item)
        if found:
            qty = float(found.group(1).replace(",", "."))
            qty = int(qty) if qty.is_integer() else qty
            item = item[found.end():].strip()
        if not qty > 0:
            raise InputError("parts", f"{raw.strip()!r}: the quantity must be more than 0")
        if item.isdigit():
            pick = int(item)
            if not 1 <= pick <= len(listed):
                span = f"1 to {len(listed)}" if listed else "none listed"
                raise InputError("parts", f"{raw.strip()!r}: no listed part {pick} ({span}); "
                                          "type the name instead")
            item = listed[pick - 1]
        if not item:
            raise InputError("parts", f"{raw.strip()!r}: which part? (a number or a name)")
        out.append({"part": item, "qty": qty, "number": number})
    return out
