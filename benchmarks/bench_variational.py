"""Variational benchmarks (run by hand).

``sizing`` (default): ``fluxline size`` on an N-site chain (d = 3, w = 1, m = 0.5, J = 1, bare-vacuum
quench, dt = 0.1, tolerance 0.01, both families), plain fits against the fast path
(``[variational] fast_fit``) in one run: wall time, chosen depths, mean optimiser iterations per
step per family, and the ratio.

``per-step``: per-step fit time at K = 7 (N = 8), D = 4: symmetric layers on the physical subspace
against the same layers on the register, hardware layers, and a cProfile summary.

Usage::

    python benchmarks/bench_variational.py [sizing] [--sites 6] [--t-final 2] [--only fast|plain]
    python benchmarks/bench_variational.py per-step [--steps 5] [--sites 8] [--no-hardware]
"""

from __future__ import annotations

import cProfile
import io
import os
import pstats
import sys
import time

import numpy as np

from lgt.basis import PhysicalBasis
from lgt.model import ModelParams
from lgt.states import basis_state
from lgt.variational.ansatz import make_ansatz, symmetric_ansatz
from lgt.variational.settings import VariationalSettings
from lgt.variational.stepper import fit_trajectory


def _arg(name: str, default: str) -> str:
    return sys.argv[sys.argv.index(name) + 1] if name in sys.argv else default


def sizing_run(sites: int, t_final: float, fast: bool) -> dict:
    """One ``size`` run; wall time, chosen depth and mean iterations per step of each family."""
    from lgt.variational.workflow import run_size

    config = {"model": {"sites": sites, "hopping": 1.0, "mass": 0.5, "coupling": 1.0, "levels": 3},
              "initial": {"kind": "vacuum"},
              "variational": {"dt": 0.1, "t_final": t_final, "tolerance": 0.01, "fast_fit": fast}}
    t0 = time.perf_counter()
    result = run_size(config)
    seconds = time.perf_counter() - t0
    out = {"seconds": seconds}
    for row in result.tables["families"].rows():
        traj = result.tables[f"trajectories_{row['family']}"].columns
        steps = traj["time"] > 0
        out[row["family"]] = (row["layers"], float(traj["optimizer_iterations"][steps].mean()))
    return out


def sizing_main() -> None:
    sites = int(_arg("--sites", "6"))
    t_final = float(_arg("--t-final", "2"))
    only = _arg("--only", "")
    print(f"N = {sites}, T = {t_final}: load {os.getloadavg()[0]:.2f} (1-min average) at start")
    runs = {}
    for label, fast in (("plain", False), ("fast", True)):
        if only and only != label:
            continue
        runs[label] = r = sizing_run(sites, t_final, fast)
        fams = ", ".join(f"{f}: D = {d if d > 0 else 'none'} ({it:.0f} iterations/step)"
                         for f, (d, it) in r.items() if f != "seconds")
        print(f"{label:6s} {r['seconds']:8.1f} s   {fams}   load {os.getloadavg()[0]:.2f}", flush=True)
    if len(runs) == 2:
        same = all(runs["plain"][f][0] == runs["fast"][f][0] for f in runs["plain"] if f != "seconds")
        print(f"speed-up {runs['plain']['seconds'] / runs['fast']['seconds']:.1f}x; same chosen depths: {same}")


def per_step(ansatz, psi0, steps: int, step_tol: float) -> tuple[float, float, float]:
    t0 = time.perf_counter()
    traj = fit_trajectory(ansatz, psi0, 0.1, steps, step_tol, maxiter=500, restarts=1)
    return (time.perf_counter() - t0) / steps, float(traj.iterations[1:].mean()), traj.max_infidelity


def per_step_main() -> None:
    steps = int(_arg("--steps", "5"))
    sites = int(_arg("--sites", "8"))
    params = ModelParams(sites=sites, hopping=1.0, mass=0.5, coupling=1.0, levels=3)
    basis = PhysicalBasis(params)
    psi0 = basis_state(basis, np.zeros(params.n_links))
    tol = 1e-7
    print(f"K = {params.n_links}, d = 3: physical dimension {basis.dimension}, register {basis.register_dimension}; "
          f"D = 4, dt = 0.1, {steps} steps, step tolerance {tol:g}")
    rows = {}
    cases = [("symmetric / physical subspace", symmetric_ansatz(basis, 4, space="physical")),
             ("symmetric / full register", symmetric_ansatz(basis, 4, space="register"))]
    if "--no-hardware" not in sys.argv:
        cases.append(("hardware / full register",
                      make_ansatz(basis, "hardware", 4, spec=VariationalSettings().native_spec())))
    for label, ansatz in cases:
        rows[label] = per_step(ansatz, psi0, steps, tol)
        s, it, inf = rows[label]
        print(f"{label:32s} {ansatz.n_params:5d} params  {s * 1e3:9.1f} ms/step  {it:6.1f} iterations/step  "
              f"max 1-F {inf:.1e}")
    ratio = rows["symmetric / full register"][0] / rows["symmetric / physical subspace"][0]
    print(f"physical subspace speed-up over the register for the same layers: {ratio:.1f}x")
    prof = cProfile.Profile()
    ansatz = symmetric_ansatz(basis, 4)
    prof.enable()
    fit_trajectory(ansatz, psi0, 0.1, steps, tol, maxiter=500)
    prof.disable()
    out = io.StringIO()
    pstats.Stats(prof, stream=out).sort_stats("tottime").print_stats(12)
    print("\nprofile of the symmetric/physical fit (top functions by own time):")
    print("\n".join(out.getvalue().splitlines()[:30]))


if __name__ == "__main__":
    per_step_main() if "per-step" in sys.argv else sizing_main()
