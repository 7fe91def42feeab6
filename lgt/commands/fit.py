"""``fluxline fit CONFIG.toml [--output fit.h5] [--circuits DIR] [--json] [--quiet]``: the fit task.

Exit status 3 when the fit misses its tolerance (everything is still written and printed).
"""

from __future__ import annotations

import argparse
import json

from lgt.commands import check_output_folder, config_command, resolve, write_output
from lgt.commands.tolerance import fit_meets_tolerance, report


def fit_summary(result) -> dict:
    """JSON summary of a fit run: the depth, its table row, the Trotter baseline and the budget."""
    from lgt.variational.workflow import trotter_summary

    a = result.attributes
    row = {key: a[key] for key in ("layers", "parameters", "max_infidelity", "final_fidelity",
                                   "sum_step_infidelity", "max_leakage", "single_qudit_gates",
                                   "two_qudit_gates", "duration_us", "noise_fidelity")}
    row["total_fidelity"] = (1 - a["max_infidelity"]) * a["noise_fidelity"]
    series = result.series
    return {
        "meets_tolerance": a["meets_tolerance"], "criterion": a["criterion"], "tolerance": a["tolerance"],
        "layers": a["layers"],
        "family": a["family"],
        "cost_source": a["cost_source"],
        "hardware_profile": {"name": a["hardware_profile"], "path": a["hardware_profile_path"],
                             "sha256": a["hardware_profile_sha256"]},
        "table": [row],
        "trotter": trotter_summary(result),
        "budget": {"noise_fidelity": a["noise_fidelity"], "total_fidelity": row["total_fidelity"],
                   "hardware_profile": a["hardware_profile"]},
        "times": series["fidelity"].times.tolist(),
        "fidelity": series["fidelity"].values.tolist(),
        "leakage": series["leakage"].values.tolist(),
        "step_infidelity": series["step_infidelity"].values.tolist(),
    }


def _run(args: argparse.Namespace) -> int:
    from lgt.tasks import get_task
    from lgt.variational.budget import COST_WORDS, profile_lines, profile_summary
    from lgt.variational.workflow import export_circuits

    if args.circuits:
        check_output_folder(args.circuits, "--circuits")
    resolved = resolve(args, "fit")
    result = get_task("fit").run(resolved, progress=not args.quiet)
    write_output(args, result)
    if args.circuits:
        export_circuits(resolved, result.arrays["parameters"], args.circuits, form=args.circuit_form)
    settings = resolved["variational"]
    summary = fit_summary(result)
    summary["tolerance"] = settings["tolerance"]
    summary["meets_tolerance"] = fit_meets_tolerance(result, settings)
    summary.update(profile_summary(resolved.profile))
    status = report(summary["meets_tolerance"], f"the fit of D = {summary['layers']} layers", settings)
    if args.json:
        print(json.dumps(summary))
        return status
    row = summary["table"][0]
    print(f"{summary['family']} layers D = {row['layers']} ({row['parameters']} parameters)")
    print(f"  max infidelity over the window {row['max_infidelity']:.3e}, final fidelity {row['final_fidelity']:.6f}")
    print(f"  sum of step infidelities {row['sum_step_infidelity']:.3e}, max leakage {row['max_leakage']:.3e}")
    print(f"  native gates per circuit: {row['two_qudit_gates']} two-qudit, {row['single_qudit_gates']} single-qudit, "
          f"{row['duration_us']:.0f} us; predicted noise fidelity {row['noise_fidelity']:.4f} "
          f"(priced from the {COST_WORDS.get(summary['cost_source'], summary['cost_source'])})")
    for line in profile_lines(resolved.profile):
        print(f"  {line}")
    for t in summary["trotter"]:
        steps = t["steps"] if t["steps"] is not None else "not reached"
        print(f"  Trotter order {t['order']}: {steps} steps, {t['two_qudit_gates']} two-qudit gates at T")
    if args.output:
        print(f"  wrote {args.output}")
    if args.circuits:
        print(f"  wrote circuits to {args.circuits}/")
    return status


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``fit`` subcommand."""
    p = config_command(subparsers, "fit", "fit variational layers step by step to the quench",
                       "TOML file with [model], [initial], [variational]", _run,
                       output_help="HDF5 file for the fitted trajectory")
    p.add_argument("--circuits", help="folder for one circuit JSON file per time step")
    p.add_argument("--circuit-form", choices=("native", "generator"), default="native",
                   help="native gates of the hardware profile (default) or generator exponentials (simulation)")
