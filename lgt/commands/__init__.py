"""Subcommands of the ``fluxline`` command line; each module exposes ``register(subparsers)``."""
