"""``fluxline plot run.h5 [--outdir DIR] [--overlay other.h5]``: PNG figures of an evolution run."""

from __future__ import annotations

import argparse
from pathlib import Path


def _read(path: str, key: str):
    from lgt.errors import InputError
    from lgt.io import read_run_file

    if not Path(path).is_file():
        raise InputError(f"{key} {path}", "file not found")
    try:
        return read_run_file(path)
    except (OSError, ValueError, KeyError) as exc:
        raise InputError(f"{key} {path}", f"cannot be read as a Fluxline run file ({exc})") from None


def _run(args: argparse.Namespace) -> int:
    from lgt.errors import InputError
    from lgt.plots import plot_run

    result = _read(args.run, "run")
    if not result.series:
        raise InputError(f"run {args.run}", "holds no time series to plot (a spectrum, potential or size file?)")
    overlay = _read(args.overlay, "--overlay") if args.overlay else None
    outdir = Path(args.outdir) if args.outdir else Path(args.run).with_suffix("")
    for path in plot_run(result, outdir, overlay):
        print(path)
    return 0


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``plot`` subcommand."""
    p = subparsers.add_parser("plot", help="write PNG figures of an evolve or fit run file")
    p.add_argument("run", help="HDF5 file written by 'fluxline evolve --output' or 'fluxline fit --output'")
    p.add_argument("--outdir", help="directory for the PNGs (default: the run file name without .h5)")
    p.add_argument("--overlay", help="another run file drawn dashed on top (e.g. a variational fit)")
    p.set_defaults(func=_run)
