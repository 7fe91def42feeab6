"""Subcommands of the ``fluxline`` command line; each module exposes ``register(subparsers)``.

A command that runs physics is a thin face over one task of :mod:`lgt.tasks`: it loads the
config, lets the task validate it once (every error before any work), checks its output paths,
runs the task and prints. Progress on stderr is turned off by ``--quiet`` on every command.
"""

from __future__ import annotations

import argparse
import os
from pathlib import Path
from typing import Any, Callable

from lgt.errors import InputError


def config_command(subparsers: argparse._SubParsersAction, name: str, help: str, config_help: str,
                   run: Callable[[argparse.Namespace], int],
                   output_help: str | None = None) -> argparse.ArgumentParser:
    """A subcommand taking a CONFIG file, ``--json`` and ``--quiet`` (and ``--output FILE.h5``
    when ``output_help`` is given); returns the parser for command-specific options."""
    p = subparsers.add_parser(name, help=help)
    p.add_argument("config", help=config_help)
    if output_help is not None:
        p.add_argument("--output", help=output_help)
    p.add_argument("--json", action="store_true", help="print one JSON object on stdout")
    p.add_argument("--quiet", action="store_true", help="no progress bar or progress messages on stderr")
    p.set_defaults(func=run)
    return p


def resolve(args: argparse.Namespace, task: str, overrides: dict[str, dict[str, Any]] | None = None):
    """Load ``args.config`` and validate it for ``task`` (once), after checking ``--output``.

    ``overrides``: section → key → value set from command-line options before validation.
    """
    from lgt.config import load_config, with_folder
    from lgt.tasks import get_task

    if getattr(args, "output", None):
        check_output_file(args.output)
    config = load_config(args.config)
    if overrides:
        merged = {k: dict(v) if isinstance(v, dict) else v for k, v in config.items()}
        for section, values in overrides.items():
            merged.setdefault(section, {}).update(values)
        config = with_folder(merged, config.folder)
    return get_task(task).validate(config)


def check_output_file(path: str | Path, flag: str = "--output") -> Path:
    """Refuse, before any work, an output file that could not be written: a directory, a
    missing or unwritable folder (InputError naming ``flag``). HDF5 support is checked too."""
    path = Path(path)
    if path.is_dir():
        raise InputError(f"{flag} {path}", "is a directory; give a file name such as run.h5")
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        raise InputError(f"{flag} {path}", f"folder {folder} does not exist")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise InputError(f"{flag} {path}", f"folder {folder} is not writable")
    if path.exists() and not os.access(path, os.W_OK):
        raise InputError(f"{flag} {path}", "exists and is not writable")
    import importlib.util

    if importlib.util.find_spec("h5py") is None:
        raise InputError(flag, "writing HDF5 needs h5py: pip install h5py")
    return path


def check_output_folder(path: str | Path, flag: str) -> Path:
    """Refuse, before any work, a folder that could not be created or written (InputError)."""
    path = Path(path)
    if path.exists() and not path.is_dir():
        raise InputError(f"{flag} {path}", "exists and is not a folder")
    existing = path
    while not existing.exists():
        existing = existing.parent
    if not os.access(existing, os.W_OK | os.X_OK):
        raise InputError(f"{flag} {path}", f"{existing} is not writable")
    return path


def write_output(args: argparse.Namespace, result) -> None:
    """Write ``result`` to ``args.output`` when given."""
    if getattr(args, "output", None):
        from lgt.io import write_run_file

        write_run_file(args.output, result)


def stderr_log(args: argparse.Namespace) -> Callable[[str], None] | None:
    """A progress-message callback on stderr, or None with ``--quiet``."""
    if args.quiet:
        return None
    import sys

    return lambda msg: print(msg, file=sys.stderr)
