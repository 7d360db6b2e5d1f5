"""Subcommand groups of the command line; each module has ``register(subparsers)``."""
