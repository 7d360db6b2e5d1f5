"""A device's own words, so that a pack written once serves more than one device.

A pack manifest (``pack.yaml``) may declare its device::

    device:
      noun: brake              # what the device is called
      plural: brakes           # (default: the noun with an s)
      energised: released      # what energising its coil does: released | engaged
      states:                  # the words for its two states (defaults as keyed)
        released: released
        engaged: applied

and every worded field of the pack and of the packs it builds on (titles,
questions, caller wording, cautions, descriptions, the notice) may use the
device's terms in braces. The device pack at the top of the chain decides:
a neutral supply pack says ``{device}`` and reads "brake" under a brake pack
and "clutch" under a clutch pack.

========================  ==========================================================
term                      for a spring-applied brake (energised: released)
========================  ==========================================================
``{device}``              brake
``{Device}``              Brake
``{devices}``             brakes
``{Devices}``             Brakes
``{energised_state}``     released: the state the coil's current puts it in
``{deenergised_state}``   applied: the state without current
``{switch_on}``           releases the brake: what switching the supply on does
``{switch_off}``          applies the brake: what switching it off does
========================  ==========================================================

For a device that engages when energised (``energised: engaged``) the same
terms read "engaged", "released", "engages the clutch", "releases the
clutch". A pack that declares no device is read with the neutral words of
:data:`NEUTRAL` ("device", "energised", "de-energised"). A name in braces
that is not a term is an error at its line.
"""

from __future__ import annotations

import re
from collections.abc import Iterator, Mapping
from typing import Any

SENSES = ("released", "engaged")
NEUTRAL = {"device": "device", "Device": "Device", "devices": "devices", "Devices": "Devices",
           "energised_state": "energised", "deenergised_state": "de-energised",
           "switch_on": "energises the device", "switch_off": "de-energises the device"}
TERM = re.compile(r"\{([A-Za-z_]+)\}")


def terms_of(spec: Any) -> tuple[dict[str, str], list[str]]:
    """The terms a manifest's ``device`` declares, and what is wrong with it (one line each).

    >>> terms, _ = terms_of({"noun": "brake", "energised": "released",
    ...                      "states": {"engaged": "applied"}})
    >>> terms["switch_on"], terms["switch_off"], terms["deenergised_state"]
    ('releases the brake', 'applies the brake', 'applied')
    >>> terms_of({"noun": "clutch", "energised": "engaged"})[0]["switch_on"]
    'engages the clutch'
    >>> terms_of(None)[0] == NEUTRAL
    True
    """
    if spec is None:
        return dict(NEUTRAL), []
    if not isinstance(spec, Mapping):
        return dict(NEUTRAL), ["`device` is a mapping with noun, energised and states"]
    wrong = []
    noun = spec.get("noun")
    if not isinstance(noun, str) or not noun.strip():
        wrong.append("`device` needs `noun`, the word for the device (brake, clutch, ...)")
        noun = "device"
    sense = spec.get("energised", "released")
    if sense not in SENSES:
        wrong.append(f"`device.energised` is released or engaged, not {sense!r}")
        sense = "released"
    words = spec.get("states") or {}
    if not isinstance(words, Mapping) or set(words) - set(SENSES):
        wrong.append("`device.states` maps released and engaged to their words")
        words = {}
    word = {s: str(words.get(s) or s) for s in SENSES}
    other = "engaged" if sense == "released" else "released"
    verb = {"released": "releases", "engaged": "engages"}
    undo = {"released": "applies" if word["engaged"] == "applied" else "engages",
            "engaged": "releases"}
    noun = noun.strip()
    plural = str(spec.get("plural") or f"{noun}s")
    return {"device": noun, "Device": noun[:1].upper() + noun[1:], "devices": plural,
            "Devices": plural[:1].upper() + plural[1:],
            "energised_state": word[sense], "deenergised_state": word[other],
            "switch_on": f"{verb[sense]} the {noun}",
            "switch_off": f"{undo[sense]} the {noun}"}, wrong


def fill(text: str, terms: Mapping[str, str]) -> tuple[str, list[str]]:
    """``text`` with its terms filled in, and the names in braces that are not terms.

    >>> fill("Switching on {switch_on}.", terms_of({"noun": "brake"})[0])
    ('Switching on releases the brake.', [])
    >>> fill("{devise} and {x y}", NEUTRAL)
    ('{devise} and {x y}', ['devise'])
    """
    unknown = []

    def one(match: re.Match[str]) -> str:
        name = match.group(1)
        if name in terms:
            return terms[name]
        unknown.append(name)
        return match.group(0)

    return TERM.sub(one, text), unknown


def fill_all(value: Any, terms: Mapping[str, str], path: tuple[Any, ...] = ()
             ) -> Iterator[tuple[tuple[Any, ...], str, Any]]:
    """Each text inside ``value`` (a YAML value) as (path, unknown name, new value) steps.

    Yields ``(path, name, None)`` for each unknown name, and finally
    ``((), "", filled)`` with the whole value filled in (a new value; the
    original is left as it was). Keys are not filled.
    """
    out = _filled(value, terms, path, problems := [])
    yield from problems
    yield (), "", out


def _filled(value: Any, terms: Mapping[str, str], path: tuple[Any, ...],
            problems: list[tuple[tuple[Any, ...], str, Any]]) -> Any:
    if isinstance(value, str):
        text, unknown = fill(value, terms)
        problems.extend((path, name, None) for name in unknown)
        return text
    if isinstance(value, dict):
        return {k: _filled(v, terms, path + (k,), problems) for k, v in value.items()}
    if isinstance(value, list):
        return [_filled(v, terms, path + (i,), problems) for i, v in enumerate(value)]
    return value
