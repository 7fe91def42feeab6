"""``fluxline spectrum CONFIG.toml [--count K] [--output F.h5] [--json] [--quiet]``: the spectrum
task (progress lines on stderr for Lanczos-sized models unless ``--quiet``)."""

from __future__ import annotations

import argparse
import json

from lgt.commands import config_command, resolve, write_output


def spectrum_summary(result) -> dict:
    """JSON object of a spectrum run: model, dimensions, energies, gaps, timings; for
    ``method = "mps"`` also the DMRG variance per level and ``"converged"``."""
    model = result.parameters["model"]
    summary = {
        "model": model,
        "dimension": result.attributes["dimension"],
        "register_dimension": model["levels"] ** (model["sites"] - 1),
        "energies": result.arrays["energies"].tolist(),
        "gaps": result.arrays["gaps"].tolist(),
        "build_seconds": result.timings["build"],
        "solve_seconds": result.timings["solve"],
    }
    if result.attributes.get("method") == "mps":  # lgt.mps.dmrg.run_spectrum_task
        summary.update({"variance": result.arrays["variance"].tolist(),
                        "error_estimate": result.arrays["error_estimate"].tolist(),
                        "max_bond": result.arrays["max_bond"].tolist(),
                        "converged": not result.attributes["flag_unconverged"]})
    return summary


def _run(args: argparse.Namespace) -> int:
    from lgt.config import as_int
    from lgt.tasks import MAX_SPECTRUM_COUNT, get_task

    overrides = None
    if args.count is not None:
        overrides = {"spectrum": {"count": as_int(args.count, "--count", minimum=1, maximum=MAX_SPECTRUM_COUNT)}}
    resolved = resolve(args, "spectrum", overrides)
    result = get_task("spectrum").run(resolved, progress=not args.quiet)
    write_output(args, result)
    summary = spectrum_summary(result)
    if args.json:
        print(json.dumps(summary))
        return 0
    m = summary["model"]
    print(f"Lattice Schwinger model: N = {m['sites']} sites, K = {m['sites'] - 1} links, "
          f"d = {m['levels']} ({m['link']}), w = {m['hopping']}, m = {m['mass']}, "
          f"J = {m['coupling']}, theta = {m['theta']}, eps = {m['boundary_field']}")
    print(f"physical subspace: {summary['dimension']} of {summary['register_dimension']} register states "
          f"(built in {summary['build_seconds']:.2f} s)")
    variance = summary.get("variance")  # DMRG runs only
    print(f"{'level':>5}  {'energy':>16}  {'gap':>14}" + (f"  {'variance':>9}" if variance else ""))
    e0 = summary["energies"][0]
    for k, e in enumerate(summary["energies"]):
        print(f"{k:>5}  {e:>16.10f}  {e - e0:>14.10f}" + (f"  {variance[k]:>9.1e}" if variance else ""))
    if variance and not summary["converged"]:
        print("NOT CONVERGED: some levels exceed the DMRG error limit (see the warning above)")
    if args.output:
        print(f"wrote {args.output}")
    return 0


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``spectrum`` subcommand."""
    p = config_command(subparsers, "spectrum", "exact low-lying levels of the model in CONFIG",
                       "TOML file with a [model] section (and optional [spectrum])", _run,
                       output_help="write the run to this HDF5 file")
    p.add_argument("--count", type=int, default=None, help="number of levels (default: [spectrum] count or 6)")
