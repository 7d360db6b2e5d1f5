"""Measurement physics: pure functions that turn readings into verdicts.

No I/O and no knowledge of packs. Each evaluator is registered by name in
:mod:`diagnose.physics.registry` (a light module that imports no units
library), so the knowledge layer can validate references without paying
for pint at start-up. :func:`evaluate` is the one entry point.
"""

from __future__ import annotations

from diagnose.physics.registry import EVALUATORS, EvaluatorSpec, InputSpec, evaluate
from diagnose.physics.verdict import Figure, Verdict

__all__ = ["EVALUATORS", "EvaluatorSpec", "InputSpec", "Figure", "Verdict", "evaluate"]
