"""Subcommands of the ``fluxline`` command line; each module exposes ``register(subparsers)``."""

from __future__ import annotations

import argparse
from typing import Callable


def config_command(subparsers: argparse._SubParsersAction, name: str, help: str, config_help: str,
                   run: Callable[[argparse.Namespace], int],
                   output_help: str | None = None) -> argparse.ArgumentParser:
    """A subcommand taking a CONFIG file and ``--json`` (and ``--output FILE.h5`` when
    ``output_help`` is given); returns the parser for command-specific options."""
    p = subparsers.add_parser(name, help=help)
    p.add_argument("config", help=config_help)
    if output_help is not None:
        p.add_argument("--output", help=output_help)
    p.add_argument("--json", action="store_true", help="print one JSON object on stdout")
    p.set_defaults(func=run)
    return p
