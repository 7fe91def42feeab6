"""``fluxline sweep CONFIG.toml --output results.h5 [--workers N | --scheduler ADDR | --dask-local N]``."""

from __future__ import annotations

import argparse
import shlex
import sys


def add_arguments(p: argparse.ArgumentParser) -> None:
    """Arguments of the sweep command (shared with ``python -m lgt.sweep``)."""
    p.add_argument("config", help="TOML file with a [sweep] section and the base sections")
    p.add_argument("--output", "-o", required=True, help="HDF5 results file (resumable)")
    where = p.add_mutually_exclusive_group()
    where.add_argument("--workers", type=int, default=None, metavar="N",
                       help="run on a local pool of N processes (default: serial)")
    where.add_argument("--scheduler", default=None, metavar="ADDRESS",
                       help="run on a dask.distributed cluster, e.g. tcp://host:8786")
    where.add_argument("--dask-local", type=int, default=None, metavar="N",
                       help="start a dask LocalCluster of N worker processes")
    p.add_argument("--overwrite", action="store_true",
                   help="discard an existing output (even of another configuration)")
    p.add_argument("--merge-every", type=float, default=30.0, metavar="SECONDS",
                   help="seconds between merges of finished runs into the main file (default 30)")
    p.add_argument("--quiet", "--no-progress", dest="no_progress", action="store_true",
                   help="no progress bar (--no-progress is the older spelling)")


def handle(args: argparse.Namespace) -> int:
    """Run the sweep; exit 0 when complete, 1 if runs failed, 2 bad input, 130 after SIGINT,
    143 after SIGTERM/SIGHUP (docs/sweeps.md)."""
    from lgt.config import load_config
    from lgt.errors import ConfigError
    from lgt.files import check_output_path
    from lgt.sweep.executors import make_executor
    from lgt.sweep.plan import expand_sweep
    from lgt.sweep.runner import run_sweep

    if args.merge_every < 0:
        raise ConfigError("--merge-every", args.merge_every, "must be non-negative")
    config = load_config(args.config)
    plan = expand_sweep(config)  # fail on bad input before starting any worker
    check_output_path(args.output, overwrite=True)  # an existing sweep file is resumed
    executor = make_executor(args.workers, args.scheduler, args.dask_local)
    hint = "fluxline sweep " + " ".join(shlex.quote(a) for a in _resume_argv(args))
    with executor:
        where = executor.describe()
        summary = run_sweep(config, args.output, executor, overwrite=args.overwrite,
                            progress=not args.no_progress, merge_every=args.merge_every,
                            resume_hint=hint, plan=plan)
    if not summary.interrupted:
        print(f"{summary.total} runs: {summary.skipped} already complete, {summary.completed} "
              f"computed, {summary.failed} failed ({summary.seconds:.1f} s, "
              f"{where if summary.completed else 'no executor work'})",
              file=sys.stderr)
    return summary.exit_code


def _resume_argv(args: argparse.Namespace) -> list[str]:
    argv = [args.config, "--output", args.output]
    for flag, value in (("--workers", args.workers), ("--scheduler", args.scheduler),
                        ("--dask-local", args.dask_local)):
        if value is not None:
            argv += [flag, str(value)]
    return argv


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``sweep`` subcommand."""
    p = subparsers.add_parser("sweep", help="run a parameter sweep into a resumable HDF5 file")
    add_arguments(p)
    p.set_defaults(func=handle)
