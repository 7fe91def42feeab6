"""The ``fluxline`` command line (also ``python -m lgt``)."""

from __future__ import annotations

import argparse
import importlib
import sys

from lgt import __version__
from lgt.errors import ConfigError, ResourceError

#: Subcommand modules under ``lgt.commands``; each exposes ``register(subparsers)``.
COMMAND_MODULES = ("demo", "spectrum", "evolve", "potential", "plot", "fit", "size", "sweep", "runs",
                   "predict", "analyze")


def build_parser() -> argparse.ArgumentParser:
    """The argument parser with every subcommand registered."""
    parser = argparse.ArgumentParser(prog="fluxline", description="Lattice Schwinger model on qudit registers.")
    parser.add_argument("--version", action="version", version=f"fluxline {__version__}")
    sub = parser.add_subparsers(dest="command", required=True)
    for name in COMMAND_MODULES:
        importlib.import_module(f"lgt.commands.{name}").register(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Entry point; returns the exit status (2 for configuration errors)."""
    args = build_parser().parse_args(argv)
    try:
        return int(args.func(args) or 0)
    except (ConfigError, ResourceError) as exc:  # errors by kind: see lgt.errors.exit_status
        print(f"fluxline: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("fluxline: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
