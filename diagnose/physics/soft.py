"""Soft evidence for a reading near a band edge: the meter's accuracy as a spread of verdicts.

A reading of 27.5 ohm where "low" starts at 27.9 ohm is, with a 2 % meter,
not clearly low. :func:`soft_verdict` evaluates the reading across
``reading * (1 +/- accuracy)`` at evenly spaced points; when the verdict
changes inside that band it returns the verdict at the reading with
``weights``: the share of the band giving each verdict. The reasoning can
then weigh each outcome's likelihood instead of taking one for certain.

Signatures (sharper verdicts such as ``half_wave``, see
:class:`~diagnose.physics.registry.Signature`) are kept hard: when the
verdict at the reading is a signature it is returned without weights, and
when it is plain a signature found elsewhere in the band counts as its
plain fallback, so weights never mix a signature with the verdict it sharpens.

References:
    JCGM 100:2008 (GUM), 4.3.7 (from memory): a rectangular distribution
    over the limits of a meter's stated accuracy.
"""

from __future__ import annotations

import math
from dataclasses import replace
from typing import Any, Mapping

from diagnose.errors import InputError
from diagnose.physics import units
from diagnose.physics.inputs import split_readings
from diagnose.physics.registry import EVALUATORS, evaluate
from diagnose.physics.verdict import Verdict

#: Points across the band; odd, so that the reading itself is one of them.
POINTS = 41


def soft_verdict(name: str, values: Mapping[str, Any], accuracy: float, *,
                 reading: str | None = None, points: int = POINTS) -> Verdict:
    """The verdict of evaluator ``name``, with ``weights`` when it changes within ``accuracy``.

    ``accuracy`` is relative (0.01 for 1 % of reading); ``reading`` names the
    input it applies to (default: the evaluator's reading input). Every
    reading of a ``many`` input is scaled together. Weights sum to 1; they
    are empty when one verdict holds across the band, and when the verdict
    at the reading is a signature (returned hard).

    Raises:
        InputError: an unknown evaluator, no reading input, a negative or
            non-finite accuracy, or any input the evaluator refuses.

    >>> v = soft_verdict("coil", {"rated_voltage": 24, "rated_power": 20, "ohms": 26.0}, 0.02)
    >>> v.verdict, sorted(v.weights)
    ('ok', ['low', 'ok'])
    """
    spec = EVALUATORS.get(name)
    if spec is None:
        raise InputError("evaluator", f"unknown evaluator {name!r}; known: {', '.join(EVALUATORS)}")
    field = reading or spec.reading
    inp = spec.input(field) if field else None
    if inp is None or inp.kind != "quantity":
        raise InputError("reading", f"evaluator {name} has no numeric reading input {field!r}")
    if not (isinstance(accuracy, (int, float)) and math.isfinite(accuracy) and 0 <= accuracy < 1):
        raise InputError("accuracy", f"expected a fraction of reading such as 0.01, got {accuracy}")
    base = evaluate(name, values)
    raw = values.get(field)
    if raw is None or accuracy == 0 or points < 2 or base.fallback:
        return base
    if inp.many:
        numbers: Any = [units.parse_quantity(r, inp.unit, field, negative=True, open_ok=True)
                        for r in split_readings(raw, field)]
    else:
        numbers = units.parse_quantity(raw, inp.unit, field, negative=True, open_ok=True)
    counts: dict[str, int] = {}
    for i in range(points):
        factor = 1 + accuracy * (2 * i / (points - 1) - 1)
        scaled = [n * factor for n in numbers] if inp.many else numbers * factor
        result = evaluate(name, {**values, field: scaled})
        verdict = result.fallback or result.verdict
        counts[verdict] = counts.get(verdict, 0) + 1
    if len(counts) == 1:
        return base
    weights = {v: counts[v] / points for v in spec.verdicts if v in counts}
    return replace(base, weights=weights)
