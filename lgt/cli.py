"""The ``fluxline`` command line (also ``python -m lgt``).

Every entry point (this one and ``python -m lgt.sweep``) goes through :func:`run_entry`: a user
mistake prints one line ``fluxline: error: …`` on stderr and exits with the status of
:func:`lgt.errors.exit_status` (README, command table); never a traceback.
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
from typing import Callable

from lgt import __version__
from lgt.errors import FluxlineError, exit_status, message

#: Subcommand modules under ``lgt.commands``; each exposes ``register(subparsers)``.
COMMAND_MODULES = ("demo", "spectrum", "evolve", "potential", "plot", "fit", "size", "sweep", "runs",
                   "compile", "predict", "analyze")


def build_parser() -> argparse.ArgumentParser:
    """The argument parser with every subcommand registered."""
    parser = argparse.ArgumentParser(prog="fluxline", description="Lattice Schwinger model on qudit registers.")
    parser.add_argument("--version", action="version", version=f"fluxline {__version__}")
    sub = parser.add_subparsers(dest="command", required=True)
    for name in COMMAND_MODULES:
        importlib.import_module(f"lgt.commands.{name}").register(sub)
    return parser


def run_entry(func: Callable[[argparse.Namespace], int | None], args: argparse.Namespace) -> int:
    """Run a command function and map what it raises to one stderr line and an exit status."""
    from lgt.signals import describe, stop_on_signals

    try:
        with stop_on_signals():  # SIGTERM/SIGHUP stop like Ctrl-C (exit 143)
            status = int(func(args) or 0)
            sys.stdout.flush()  # a closed pipe shows here, not at interpreter exit
        return status
    except KeyboardInterrupt as exc:
        print(f"fluxline: {describe(exc)}", file=sys.stderr)
        return exit_status(exc)
    except BrokenPipeError as exc:
        _silence_stdout()
        return exit_status(exc)
    except (FluxlineError, OSError, MemoryError) as exc:  # errors by kind: lgt.errors.exit_status
        print(f"fluxline: error: {message(exc)}", file=sys.stderr)
        return exit_status(exc)


def _silence_stdout() -> None:
    """Point stdout at /dev/null so the interpreter's final flush does not fail again."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    except (OSError, ValueError):  # pragma: no cover - stdout without a descriptor
        pass


def main(argv: list[str] | None = None) -> int:
    """Entry point; returns the exit status (README: 0, 2, 3, 130, 141, 143)."""
    args = build_parser().parse_args(argv)
    return run_entry(args.func, args)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
