"""Reasoning over a compiled pack: posterior, next action, explanation, simulation.

Pure functions on a :class:`~diagnose.kb.model.Model` and an
:class:`~diagnose.reasoning.evidence.Evidence`; no I/O. Modules:
``tables`` (hypotheses and likelihood tables), ``posterior`` (Bayes' rule),
``planner`` (the next action), ``explain``, ``simulate``, ``cases``
(knowledge tests), ``synthetic`` (models built in code), and the fault-tree
analysis (``cutsets``, ``importance``, ``testability``, ``analysis``).
Imported lazily by the faces: nothing is imported here.
"""
