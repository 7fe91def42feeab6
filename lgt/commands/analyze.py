"""``fluxline analyze MEASURED CONFIG.toml [--output F.h5] [--json]``: measured level strings (CSV or
HDF5) → raw and mitigated observables with error bars, against exact (``docs/lab.md``)."""

from __future__ import annotations

import argparse

from lgt.commands.predict import add_lab_options, finish, guard_output, guarded


@guarded
def _run(args: argparse.Namespace) -> int:
    from lgt.config import load_config
    from lgt.lab.workflow import run_analyze

    config = load_config(args.config)
    guard_output(args.output, args.overwrite)
    report, result = run_analyze(args.measured, config)
    return finish(report, result, args)


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``analyze`` subcommand."""
    p = subparsers.add_parser("analyze", help="mitigate measured outcomes and compare with exact")
    p.add_argument("measured", help="CSV (time,count,q0,...) or HDF5 file of measured outcomes")
    p.add_argument("config", help="TOML file with [model], [initial], [variational] and optional [lab]")
    p.add_argument("--output", help="HDF5 file for the analysed curves")
    add_lab_options(p)
    p.add_argument("--json", action="store_true", help="print one JSON object on stdout")
    p.set_defaults(func=_run)
