"""Knowledge packs: loading, schema, validation, compilation, lint and export.

Knows the physics only by evaluator name (see diagnose.physics.registry).
"""
