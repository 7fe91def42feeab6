"""The ``fluxline`` command line (also ``python -m lgt``)."""

from __future__ import annotations

import argparse
import importlib
import sys

from lgt import __version__
from lgt.errors import ConfigError, InputError, ResourceError

#: Subcommand modules under ``lgt.commands``; each exposes ``register(subparsers)``.
COMMAND_MODULES = ("demo", "spectrum", "evolve", "potential", "plot", "fit", "size", "sweep", "runs")


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
    from lgt.signals import describe, status_of, stop_on_signals

    args = build_parser().parse_args(argv)
    try:
        with stop_on_signals():  # SIGTERM/SIGHUP stop like Ctrl-C (exit 143)
            return int(args.func(args) or 0)
    except (ConfigError, InputError, ResourceError) as exc:  # errors by kind: see lgt.errors.exit_status
        print(f"fluxline: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt as exc:
        print(f"fluxline: {describe(exc)}", file=sys.stderr)
        return status_of(exc)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
