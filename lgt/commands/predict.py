"""``fluxline predict CONFIG.toml [--output F.h5] [--json]``: the curves a lab will measure — fitted
circuits simulated under the hardware profile's noise model, shots sampled per step, raw, mitigated
and exact (``docs/lab.md``)."""

from __future__ import annotations

import argparse
import json
import sys

from lgt.commands import config_command


def print_report(report: dict) -> None:
    """Text table of a predict/analyze report: per time ν raw / mitigated ± error / exact."""
    noise = report["noise"]
    print(f"{report['task']}: hardware profile {noise['profile']!r}, noise model {noise['noise_model']['name']!r}")
    print(f"  noise model from: {noise['origin']}")
    if noise["noise_model"].get("source"):
        print(f"  source: {noise['noise_model']['source']}")
    pd = report["particle_density"]
    print(f"{'t':>7} {'shots':>6} {'discard':>8} {'nu raw':>9} {'nu mitigated':>18} {'nu exact':>9}")
    for i, t in enumerate(report["times"]):
        print(f"{t:>7.3f} {report['shots'][i]:>6} {report['discarded_fraction'][i]:>8.3f} {pd['raw'][i]:>9.4f} "
              f"{pd['mitigated'][i]:>9.4f} ± {pd['mitigated_error'][i]:<6.4f} {pd['exact'][i]:>9.4f}")


def guard_output(path: str | None, overwrite: bool) -> None:
    """Refuse to replace an existing ``--output`` file unless ``--overwrite`` (before any work)."""
    from pathlib import Path

    from lgt.errors import InputError

    if path is None:
        return
    p = Path(path)
    if p.exists() and not overwrite:
        raise InputError("--output", f"{path} exists; pass --overwrite to replace it")
    if not p.parent.is_dir():
        raise InputError("--output", f"folder {p.parent} does not exist")


def finish(report: dict, result, args: argparse.Namespace) -> int:
    """Write the HDF5 file if asked, then print the report (JSON or text)."""
    if args.output:
        from lgt.io import write_run_file

        write_run_file(args.output, result)
    if args.plots:
        from lgt.lab.plots import plot_lab_report

        plots = plot_lab_report(report, args.plots)
    if args.json:
        print(json.dumps(report))
    else:
        print_report(report)
        if args.output:
            print(f"wrote {args.output}")
        if args.plots:
            print(f"wrote {len(plots)} figures to {args.plots}/")
    return 0


def guarded(run):
    """Run a command body, turning input errors into a message and the documented exit status."""
    def wrapper(args: argparse.Namespace) -> int:
        from lgt.errors import InputError, exit_status

        try:
            return run(args)
        except InputError as exc:
            print(f"fluxline: error: {exc}", file=sys.stderr)
            return exit_status(exc)
    return wrapper


@guarded
def _run(args: argparse.Namespace) -> int:
    from lgt.config import load_config
    from lgt.lab.workflow import run_predict, split_config

    config = load_config(args.config)
    split_config(config)
    guard_output(args.output, args.overwrite)
    report, result = run_predict(config, progress=not (args.json or args.quiet), fit_file=args.fit)
    return finish(report, result, args)


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``predict`` subcommand."""
    p = config_command(subparsers, "predict", "predicted lab measurements: noisy shots, mitigated, against exact",
                       "TOML file with [model], [initial], [variational] and optional [lab]", _run,
                       output_help="HDF5 file for the predicted curves")
    p.add_argument("--fit", help="reuse the fitted circuits of a 'fluxline fit --output' run file")
    add_lab_options(p)


def add_lab_options(p: argparse.ArgumentParser) -> None:
    """``--overwrite`` and ``--plots DIR`` (shared by predict and analyze)."""
    p.add_argument("--overwrite", action="store_true", help="replace an existing --output file")
    p.add_argument("--plots", help="folder for PNG figures of the curves with error bands")
