"""Variational benchmarks (run by hand).

``sizing`` (default): ``fluxline size`` on an N-site chain (d = 3, w = 1, m = 0.5, J = 1, bare-vacuum
quench, dt = 0.1, tolerance 0.01, both families), plain fits against the fast path
(``[variational] fast_fit``) in one run: wall and CPU time (CPU time is the steadier figure on a
shared machine), chosen depths, mean optimiser iterations per step per family, and the ratios.

``predictor``: hardware layers, N = 6, D = 4, T = 2 (fast step fits): each step started from the
better of the extrapolation θ_k + (θ_k − θ_{k−1}) and θ_k (today), or also offered McLachlan's
predictor θ_k + dt θ̇ (:func:`lgt.variational.geometry.mclachlan_velocity`): start infidelity,
iterations, wall time and accumulated 1 − F(T).

``per-step``: per-step fit time at K = 7 (N = 8), D = 4: symmetric layers on the physical subspace
against the same layers on the register, hardware layers, and a cProfile summary.

Usage::

    python benchmarks/bench_variational.py [sizing] [--sites 6] [--t-final 2] [--variants plain,fast,fast-nowarm]
    python benchmarks/bench_variational.py predictor
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


def sizing_run(sites: int, t_final: float, fast: bool, warm: bool = True) -> dict:
    """One ``size`` run; wall time, chosen depth and mean iterations per step of each family."""
    from lgt.variational import sizing
    from lgt.variational.workflow import run_size

    sizing.WARM_STARTS = warm
    config = {"model": {"sites": sites, "hopping": 1.0, "mass": 0.5, "coupling": 1.0, "levels": 3},
              "initial": {"kind": "vacuum"},
              "variational": {"dt": 0.1, "t_final": t_final, "tolerance": 0.01, "fast_fit": fast}}
    t0, c0 = time.perf_counter(), time.process_time()
    result = run_size(config)
    seconds, cpu = time.perf_counter() - t0, time.process_time() - c0
    out = {"seconds": seconds, "cpu": cpu}
    for row in result.tables["families"].rows():
        traj = result.tables[f"trajectories_{row['family']}"].columns
        steps = traj["time"] > 0
        out[row["family"]] = (row["layers"], float(traj["optimizer_iterations"][steps].mean()))
    return out


def sizing_main() -> None:
    sites = int(_arg("--sites", "6"))
    t_final = float(_arg("--t-final", "2"))
    variants = _arg("--variants", "plain,fast").split(",")
    print(f"N = {sites}, T = {t_final}: load {os.getloadavg()[0]:.2f} (1-min average) at start")
    runs = {}
    for label in variants:
        runs[label] = r = sizing_run(sites, t_final, label != "plain", warm=label != "fast-nowarm")
        fams = ", ".join(f"{f}: D = {v[0] if v[0] > 0 else 'none'} ({v[1]:.0f} iterations/step)"
                         for f, v in r.items() if f not in ("seconds", "cpu"))
        print(f"{label:6s} {r['seconds']:8.1f} s wall {r['cpu']:8.1f} s CPU   {fams}   load {os.getloadavg()[0]:.2f}",
              flush=True)
    if "plain" in runs and "fast" in runs:
        same = all(runs["plain"][f][0] == runs["fast"][f][0] for f in runs["plain"] if f not in ("seconds", "cpu"))
        print(f"speed-up {runs['plain']['seconds'] / runs['fast']['seconds']:.1f}x wall, "
              f"{runs['plain']['cpu'] / runs['fast']['cpu']:.1f}x CPU; same chosen depths: {same}")


def predictor_main() -> None:
    from scipy.sparse.linalg import expm_multiply

    from lgt.variational.geometry import mclachlan_velocity
    from lgt.variational.stepper import _better_start, _fit_step_fast

    params = ModelParams(sites=6, hopping=1.0, mass=0.5, coupling=1.0, levels=3)
    basis = PhysicalBasis(params)
    psi0 = basis_state(basis, np.zeros(params.n_links))
    ansatz = make_ansatz(basis, "hardware", 4, spec=VariationalSettings().native_spec())
    v0, H, dt, n = ansatz.embed(psi0), ansatz.hamiltonian.tocsr(), 0.1, 20
    print(f"hardware D = 4, N = 6, T = 2: load {os.getloadavg()[0]:.2f}")
    for label, use in (("extrapolation / previous", False), ("+ McLachlan predictor", True)):
        rng = np.random.default_rng(0)
        theta, prev, current, starts, iters = np.zeros(ansatz.n_params), None, v0, [], []
        t0 = time.perf_counter()
        for k in range(n):
            target = expm_multiply((-1j * dt) * H, current)
            candidates = [theta] if prev is None else [2 * theta - prev, theta]
            if use and prev is not None:
                candidates.append(theta + dt * mclachlan_velocity(ansatz.circuit, theta, v0, H))
            guess = _better_start(ansatz.circuit, v0, target, candidates)
            starts.append(1 - abs(np.vdot(target, ansatz.circuit.apply(guess, v0))) ** 2)
            res = _fit_step_fast(ansatz.circuit, v0, target, guess, 0.01 / n ** 2, 500, 1, rng)
            prev, theta = theta, res.params
            current = ansatz.circuit.apply(theta, v0)
            iters.append(res.iterations)
        exact = expm_multiply((-1j * dt * n) * H, v0)
        print(f"{label:26s} start 1-F {np.mean(starts):.1e}  {np.mean(iters):5.0f} iterations/step  "
              f"{time.perf_counter() - t0:6.1f} s  1-F(T) {1 - abs(np.vdot(exact, current)) ** 2:.2e}", flush=True)


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
    if "per-step" in sys.argv:
        per_step_main()
    elif "predictor" in sys.argv:
        predictor_main()
    else:
        sizing_main()
