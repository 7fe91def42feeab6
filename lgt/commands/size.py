"""``fluxline size CONFIG.toml [--json]``: least depth meeting the tolerance, budget, Trotter baseline."""

from __future__ import annotations

import argparse
import json
import sys

from lgt.commands import config_command
from lgt.config import load_config


def _run(args: argparse.Namespace) -> int:
    from lgt.variational.workflow import run_size, size_summary_dict, validate_variational_config

    resolved = validate_variational_config(load_config(args.config))
    log = None if args.json else (lambda msg: print(msg, file=sys.stderr))
    result = run_size(resolved, log=log)
    summary = size_summary_dict(result)
    if args.output:
        from lgt.io import write_run_file

        write_run_file(args.output, result)
    if args.json:
        print(json.dumps(summary))
        return 0
    v = resolved["variational"]
    print(f"depth sizing: tolerance {v['tolerance']} on {v['criterion']} over [0, {v['t_final']}]")
    for family, part in summary["families"].items():
        print(f"\n{family} layers (native gates per circuit; '<' marks the least depth meeting the tolerance)")
        print(f"{'D':>3} {'params':>7} {'max 1-F':>10} {'leakage':>9} {'2q gates':>9} {'1q gates':>9} "
              f"{'other':>6} {'time us':>9} {'F noise':>8} {'F total':>8}")
        for r in part["table"]:
            mark = " <" if r["layers"] == part["layers"] else ""
            print(f"{r['layers']:>3} {r['parameters']:>7} {r['max_infidelity']:>10.2e} {r['max_leakage']:>9.1e} "
                  f"{r['two_qudit_gates']:>9} {r['single_qudit_gates']:>9} {r['other_gates']:>6} "
                  f"{r['duration_us']:>9.0f} {r['noise_fidelity']:>8.4f} {r['total_fidelity']:>8.4f}{mark}")
        best = part.get("best_layers_under_noise", summary["budget"]["best_layers_under_noise"])
        print(f"best {family} depth under the gate-error budget (max F total): {best}")
    print()
    chosen = summary["layers"]
    print(f"least depth of {summary['family']} layers meeting the tolerance: {chosen if chosen is not None else 'none up to max_layers'}")
    for t in summary["trotter"]:
        steps = t["steps"] if t["steps"] is not None else "not reached"
        print(f"Trotter order {t['order']}: {steps} steps, {t['two_qudit_gates']} two-qudit gates, "
              f"predicted noise fidelity {t['noise_fidelity']:.4f}")
    shots = ", ".join(f"{k} {n}" for k, n in summary["shots"].items())
    print(f"shots for standard error {v['shots_error']}: {shots}")
    return 0


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``size`` subcommand."""
    config_command(subparsers, "size", "least number of layers meeting the tolerance, with budget and Trotter",
                   "TOML file with [model], [initial], [variational]", _run,
                   output_help="HDF5 file for the sizing results")
