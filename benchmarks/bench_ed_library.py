"""Exact evolution against a general-purpose exact-diagonalisation library, both in one run.

Fluxline's ``evolve`` task (default observables, default propagator) against QuSpin's
``expm_multiply_parallel`` (Weinberg & Bukov, SciPost Phys. 2, 003 (2017); optional benchmark
dependency: ``pip install quspin``) stepping the same stored times on the same Hamiltonian:
the physical-subspace CSR matrix, which is the charge formulation of the truncated model (each
physical state is one charge pattern whose fields lie in the window). QuSpin's side records
⟨L_n⟩ and ⟨L_n²⟩ at every stored time (one pass over |ψ|²); Fluxline records its whole default
observable set. Without QuSpin, ``scipy.sparse.linalg.expm_multiply`` on the same CSR is the
stand-in (reported as such).

Each (size, side, repeat) runs in its own subprocess, one thread (``OMP_NUM_THREADS=1``, numba
and BLAS alike) unless ``--threads``; the sides alternate and the medians are compared.
Reported: the evolution phase in wall seconds (Fluxline: everything after the build of H,
Lanczos bound, observables and drift checks included; library: set-up of the propagator plus
stepping and its observables), the CPU seconds of the whole process (``time.process_time``:
build of H included on both sides, and on Fluxline's side its measurement thread — the number
to trust on a shared machine, where wall time depends on the other jobs), and each process's
peak resident memory (Fluxline's includes building H; the library side builds H with Fluxline's
builder, which is not timed).

Usage::

    python benchmarks/bench_ed_library.py [--sizes 16 20 22 24] [--t-final 10] [--dt 0.1]
                                          [--repeats 3] [--threads 1] [--json]
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
from _common import MODEL, comparison_parser

ROOT = Path(__file__).resolve().parents[1]


def _peak_gib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2 ** 20


def fluxline_side(N: int, t_final: float, dt: float) -> dict:
    from lgt.evolution import run_evolution

    config = {"model": {"sites": N, **MODEL}, "initial": {"kind": "vacuum"},
              "evolution": {"t_final": t_final, "dt": dt}}
    c0, t0 = time.process_time(), time.perf_counter()
    run = run_evolution(config)
    total = time.perf_counter() - t0
    return {"evolve_s": run.timings["prepare"] + run.timings["evolve"], "total_s": total,
            "cpu_s": time.process_time() - c0,
            "dimension": run.attributes["dimension"], "products": run.attributes["hamiltonian_products"],
            "entropy_stride": run.attributes["entropy_stride"],
            "observables": len(run.series), "peak_gib": _peak_gib(),
            "field_end": run.series["electric_field"].values[-1].tolist()}


def library_side(N: int, t_final: float, dt: float) -> dict:
    from lgt.basis import PhysicalBasis
    from lgt.hamiltonian import build_hamiltonian
    from lgt.model import ModelParams
    from lgt.states import prepare_initial_state

    c0 = time.process_time()
    params = ModelParams(sites=N, **MODEL)
    basis = PhysicalBasis(params)
    H = build_hamiltonian(basis).tocsr()
    psi = prepare_initial_state(basis, {"kind": "vacuum"}).astype(np.complex128)
    fields = params.field_values[basis.levels.T]  # (K, dim) field values L_n of each basis state
    steps = int(round(t_final / dt))
    t0 = time.perf_counter()
    try:
        from quspin.tools.evolution import expm_multiply_parallel

        U = expm_multiply_parallel(H, a=-1j * dt, dtype=np.complex128)
        work = np.zeros(2 * H.shape[0], dtype=np.complex128)

        def step(v):
            return U.dot(v, work_array=work, overwrite_v=True)
        library = "quspin expm_multiply_parallel"
    except ImportError:
        from scipy.sparse.linalg import expm_multiply

        A = (-1j * dt) * H

        def step(v):
            return expm_multiply(A, v)
        library = "scipy expm_multiply (stand-in: quspin not installed)"
    L = []
    for _ in range(steps + 1):
        prob = psi.real ** 2 + psi.imag ** 2
        L.append((fields @ prob, (fields ** 2) @ prob))
        if len(L) <= steps:
            psi = step(psi)
    evolve = time.perf_counter() - t0
    return {"evolve_s": evolve, "cpu_s": time.process_time() - c0, "library": library,
            "dimension": basis.dimension,
            "peak_gib": _peak_gib(), "field_end": L[-1][0].tolist()}


def run_one(side: str, N: int, args) -> dict:
    env = dict(os.environ)
    threads = args.fluxline_threads if side == "fluxline" and args.fluxline_threads else args.threads
    if threads:
        env.update({k: str(threads) for k in ("OMP_NUM_THREADS", "NUMBA_NUM_THREADS",
                                              "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")})
    cmd = [sys.executable, __file__, "--one", side, str(N), "--t-final", str(args.t_final), "--dt", str(args.dt)]
    out = subprocess.run(cmd, capture_output=True, text=True, cwd=ROOT, env=env)
    if out.returncode != 0:
        raise RuntimeError(out.stderr.strip())
    return json.loads(out.stdout.strip().splitlines()[-1])


def main() -> None:
    ap = comparison_parser(__doc__, [16, 20, 22, 24], 3)
    ap.add_argument("--t-final", type=float, default=10.0)
    ap.add_argument("--dt", type=float, default=0.1)
    ap.add_argument("--threads", type=int, default=1, help="threads per process (0: leave unset)")
    ap.add_argument("--fluxline-threads", type=int, default=0,
                    help="threads of the Fluxline side only (default: as --threads)")
    ap.add_argument("--one", nargs=2, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.one:
        side, N = args.one[0], int(args.one[1])
        fn = fluxline_side if side == "fluxline" else library_side
        print(json.dumps(fn(N, args.t_final, args.dt)))
        return
    rows = []
    for N in args.sizes:
        runs = {"fluxline": [], "library": []}
        loads = []
        for _ in range(args.repeats):
            for side in ("library", "fluxline"):
                loads.append(os.getloadavg()[0])
                runs[side].append(run_one(side, N, args))
        f, q = runs["fluxline"], runs["library"]
        dev = float(np.max(np.abs(np.subtract(f[-1]["field_end"], q[-1]["field_end"]))))
        row = {"sites": N, "dimension": f[0]["dimension"], "library": q[0]["library"],
               "fluxline_s": float(np.median([r["evolve_s"] for r in f])),
               "library_s": float(np.median([r["evolve_s"] for r in q])),
               "fluxline_cpu_s": float(np.median([r["cpu_s"] for r in f])),
               "library_cpu_s": float(np.median([r["cpu_s"] for r in q])),
               "fluxline_all_s": [round(r["evolve_s"], 3) for r in f],
               "library_all_s": [round(r["evolve_s"], 3) for r in q],
               "fluxline_peak_gib": float(np.median([r["peak_gib"] for r in f])),
               "library_peak_gib": float(np.median([r["peak_gib"] for r in q])),
               "products": f[0]["products"], "entropy_stride": f[0]["entropy_stride"],
               "observables": f[0]["observables"], "max_field_deviation": dev,
               "load": float(np.median(loads))}
        row["ratio"] = row["library_s"] / row["fluxline_s"]
        row["cpu_ratio"] = row["library_cpu_s"] / row["fluxline_cpu_s"]
        rows.append(row)
        print(json.dumps(row), file=sys.stderr)
    if args.json:
        print(json.dumps(rows))
        return
    print(f"library: {rows[0]['library']}; threads per process: {args.threads or 'unset'}"
          f" (Fluxline: {args.fluxline_threads or args.threads or 'unset'})")
    print(f"repeats: {args.repeats} (medians)")
    print(f"{'N':>3} {'dim':>8} {'Fluxline s':>10} {'library s':>10} {'ratio':>6} {'CPU s F/L':>13} {'ratio':>6} "
          f"{'peak GiB F/L':>13} {'stride':>6} {'max|ΔL|':>8} {'load':>5}")
    for r in rows:
        print(f"{r['sites']:>3} {r['dimension']:>8} {r['fluxline_s']:>10.2f} {r['library_s']:>10.2f} "
              f"{r['ratio']:>6.2f} {r['fluxline_cpu_s']:>6.1f}/{r['library_cpu_s']:<6.1f} {r['cpu_ratio']:>6.2f} "
              f"{r['fluxline_peak_gib']:>6.3f}/{r['library_peak_gib']:<6.3f} "
              f"{r['entropy_stride']:>6} {r['max_field_deviation']:>8.1e} {r['load']:>5.1f}")


if __name__ == "__main__":
    main()
