"""Per-step fit time of the variational evolution (run by hand).

K = 7 link qutrits (N = 8 sites), D = 4 layers, bare-vacuum quench, dt = 0.1:
* symmetric layers in the physical subspace vs the same layers on the full 3^7 register (ratio);
* hardware (native brickwork) layers on the register;
* where the time goes: a cProfile summary of one symmetric-layer fit (optimiser vs state updates).

Usage: python benchmarks/bench_variational.py [--steps 5] [--sites 8] [--no-hardware]
"""

from __future__ import annotations

import cProfile
import io
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


def per_step(ansatz, psi0, steps: int, step_tol: float) -> tuple[float, float, float]:
    t0 = time.perf_counter()
    traj = fit_trajectory(ansatz, psi0, 0.1, steps, step_tol, maxiter=500, restarts=1)
    return (time.perf_counter() - t0) / steps, float(traj.iterations[1:].mean()), traj.max_infidelity


def main() -> None:
    steps = int(sys.argv[sys.argv.index("--steps") + 1]) if "--steps" in sys.argv else 5
    sites = int(sys.argv[sys.argv.index("--sites") + 1]) if "--sites" in sys.argv else 8
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
    main()
