"""``fluxline spectrum CONFIG.toml [--count K] [--json]``: exact low-lying levels."""

from __future__ import annotations

import argparse
import json
import time

from lgt.basis import PhysicalBasis
from lgt.commands import config_command
from lgt.config import as_int, check_keys, load_config
from lgt.hamiltonian import build_hamiltonian
from lgt.model import ModelParams
from lgt.spectrum import gaps, lowest_levels


def compute_spectrum(config: dict, count: int | None = None) -> dict:
    """Validate ``[model]`` (and optional ``[spectrum] count``), build H, return a summary dict."""
    params = ModelParams.from_dict(config.get("model", {}))
    section = config.get("spectrum", {})
    if isinstance(section, dict) and section.get("method") == "mps":  # DMRG (lgt.mps.dmrg)
        from lgt.mps.dmrg import spectrum_summary
        return spectrum_summary(params, section, count)
    check_keys(section, ("count",), "spectrum")
    if count is None:
        count = as_int(section.get("count", 6), "spectrum.count", minimum=1)
    else:
        count = as_int(count, "--count", minimum=1)
    t0 = time.perf_counter()
    basis = PhysicalBasis(params)
    H = build_hamiltonian(basis)
    t1 = time.perf_counter()
    energies = lowest_levels(H, count)
    t2 = time.perf_counter()
    return {
        "model": params.to_dict(),
        "dimension": basis.dimension,
        "register_dimension": basis.register_dimension,
        "energies": [float(e) for e in energies],
        "gaps": [float(g) for g in gaps(energies)],
        "build_seconds": t1 - t0,
        "solve_seconds": t2 - t1,
    }


def _run(args: argparse.Namespace) -> int:
    summary = compute_spectrum(load_config(args.config), args.count)
    if args.json:
        print(json.dumps(summary))
        return 0
    m = summary["model"]
    print(f"Lattice Schwinger model: N = {m['sites']} sites, K = {m['sites'] - 1} links, "
          f"d = {m['levels']} ({m['link']}), w = {m['hopping']}, m = {m['mass']}, "
          f"J = {m['coupling']}, theta = {m['theta']}, eps = {m['boundary_field']}")
    print(f"physical subspace: {summary['dimension']} of {summary['register_dimension']} register states "
          f"(built in {summary['build_seconds']:.2f} s)")
    print(f"{'level':>5}  {'energy':>16}  {'gap':>14}")
    e0 = summary["energies"][0]
    for k, e in enumerate(summary["energies"]):
        print(f"{k:>5}  {e:>16.10f}  {e - e0:>14.10f}")
    return 0


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``spectrum`` subcommand."""
    p = config_command(subparsers, "spectrum", "exact low-lying levels of the model in CONFIG",
                       "TOML file with a [model] section", _run)
    p.add_argument("--count", type=int, default=None, help="number of levels (default: [spectrum] count or 6)")
