"""Exact evolution: time and peak memory for N = 16…28 at d = 3, and the speed-up over qutip 5
``sesolve`` on the full fermion ⊗ link space for N = 6, 8, 10 (same initial state and times).

Usage::

    python benchmarks/bench_evolution.py [--sizes 16 20 24 28] [--t-final 10] [--dt 0.1]
                                         [--qutip-sizes 6 8 10] [--qutip-t-final 2] [--json]

Each size of the first part runs in its own subprocess so that its peak RSS is its own.
Model: w = 1, m = 0.5, J = 1, truncated links, bare-vacuum quench, every observable recorded.
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

ROOT = Path(__file__).resolve().parents[1]
MODEL = {"hopping": 1.0, "mass": 0.5, "coupling": 1.0, "levels": 3}


def one_size(N: int, t_final: float, dt: float) -> dict:
    """Run one evolution in this process; report timings and peak RSS."""
    from lgt.evolution import run_evolution

    config = {"model": {"sites": N, **MODEL}, "initial": {"kind": "vacuum"},
              "evolution": {"t_final": t_final, "dt": dt}}
    t0, c0 = time.perf_counter(), time.process_time()
    run = run_evolution(config)
    total, cpu = time.perf_counter() - t0, time.process_time() - c0
    return {"sites": N, "dimension": run.attributes["dimension"],
            "nonzeros": run.attributes["hamiltonian_nonzeros"], "t_final": t_final, "dt": dt,
            "build_s": run.timings["build"], "evolve_s": run.timings["evolve"], "total_s": total,
            "cpu_s": cpu, "load_average": os.getloadavg()[0],
            "peak_rss_gib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2 ** 20,
            "energy_drift": run.attributes["energy_drift"], "norm_drift": run.attributes["norm_drift"]}


def scaling(sizes: list[int], t_final: float, dt: float) -> list[dict]:
    rows = []
    for N in sizes:
        cmd = [sys.executable, __file__, "--one", str(N), "--t-final", str(t_final), "--dt", str(dt)]
        out = subprocess.run(cmd, capture_output=True, text=True, cwd=ROOT)
        if out.returncode != 0:
            rows.append({"sites": N, "error": out.stderr.strip().splitlines()[-1]})
        else:
            rows.append(json.loads(out.stdout.strip().splitlines()[-1]))
        print(json.dumps(rows[-1]), file=sys.stderr)
    return rows


def against_qutip(sizes: list[int], t_final: float, dt: float) -> list[dict]:
    """Fluxline (physical subspace) vs qutip sesolve (full 2^N · 3^(N−1) space), ⟨L_n(t)⟩ only."""
    import qutip

    sys.path.insert(0, str(ROOT / "tests"))
    from test_evolution import fermion_link_model, product_state

    from lgt.evolution import run_evolution

    rows = []
    times = np.round(np.arange(int(round(t_final / dt)) + 1) * dt, 12)
    for N in sizes:
        config = {"model": {"sites": N, **MODEL}, "initial": {"kind": "meson", "sites": [N // 2 - 2, N // 2 + 1]},
                  "evolution": {"times": list(times), "observables": ["electric_field"]}}
        t0 = time.perf_counter()
        ours = run_evolution(config)
        ours_s = time.perf_counter() - t0
        t0 = time.perf_counter()
        H, c, Lops, _, _ = fermion_link_model(N, 3, MODEL["hopping"], MODEL["mass"], MODEL["coupling"])
        fields0 = np.rint(ours.series["electric_field"].values[0]).astype(int)
        occ = [n for n in range(N) if (n % 2 == 1) != (n in (N // 2 - 2, N // 2 + 1))]
        psi0 = product_state(N, 3, occ, list(fields0))
        build_s = time.perf_counter() - t0
        t0 = time.perf_counter()
        res = qutip.sesolve(H, psi0, times, e_ops=Lops)
        qutip_s = time.perf_counter() - t0
        ref = np.array([np.real(e) for e in res.expect]).T
        rows.append({"sites": N, "full_dimension": int(H.shape[0]), "dimension": ours.attributes["dimension"],
                     "fluxline_s": ours_s, "qutip_build_s": build_s, "qutip_sesolve_s": qutip_s,
                     "ratio": qutip_s / ours_s,
                     "max_field_deviation": float(np.max(np.abs(ref - ours.series["electric_field"].values)))})
        print(json.dumps(rows[-1]), file=sys.stderr)
    return rows


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="*", default=[16, 20, 24, 28])
    ap.add_argument("--t-final", type=float, default=10.0)
    ap.add_argument("--dt", type=float, default=0.1)
    ap.add_argument("--qutip-sizes", type=int, nargs="*", default=[6, 8, 10])
    ap.add_argument("--qutip-t-final", type=float, default=2.0)
    ap.add_argument("--one", type=int, help=argparse.SUPPRESS)
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()
    if args.one is not None:
        print(json.dumps(one_size(args.one, args.t_final, args.dt)))
        return
    report = {"scaling": scaling(args.sizes, args.t_final, args.dt),
              "qutip": against_qutip(args.qutip_sizes, args.qutip_t_final, args.dt)}
    if args.json:
        print(json.dumps(report))
        return
    print(f"{'N':>3} {'dim':>10} {'nnz':>11} {'build s':>8} {'evolve s':>9} {'cpu s':>8} {'load':>5} {'peak GiB':>9}")
    for r in report["scaling"]:
        if "error" in r:
            print(f"{r['sites']:>3} error: {r['error']}")
        else:
            print(f"{r['sites']:>3} {r['dimension']:>10} {r['nonzeros']:>11} {r['build_s']:>8.2f} "
                  f"{r['evolve_s']:>9.2f} {r['cpu_s']:>8.1f} {r['load_average']:>5.1f} {r['peak_rss_gib']:>9.2f}")
    print(f"{'N':>3} {'full dim':>10} {'dim':>6} {'fluxline s':>11} {'sesolve s':>10} {'ratio':>8} {'max |ΔL|':>9}")
    for r in report["qutip"]:
        print(f"{r['sites']:>3} {r['full_dimension']:>10} {r['dimension']:>6} {r['fluxline_s']:>11.4f} "
              f"{r['qutip_sesolve_s']:>10.2f} {r['ratio']:>8.0f} {r['max_field_deviation']:>9.1e}")


if __name__ == "__main__":
    main()
