"""DMRG ground state and low levels: wall time, CPU time and peak memory, in one run.

For each N (default 20, 50, 100) at d = 3 (w = 1, m = 0.5, J = 1): the DMRG ground state alone,
then the ground state with ``--excited`` (default 2) excited states (orthogonal DMRG + the
Rayleigh–Ritz step); at N ≤ ``--exact-up-to`` (default 20) the exact levels (lgt's sparse
spectrum of the physical subspace) in the same run, side by side. Each case runs in a fresh
subprocess so its peak memory (ru_maxrss) is its own; CPU time is the subprocess's own
(user + system, single-threaded BLAS inside DMRG), the fair measure on a shared machine.
``uptime`` load is printed first and last.

    python benchmarks/bench_dmrg.py
    python benchmarks/bench_dmrg.py --sites 100 --excited 0 --repeats 3
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys

CASE = r"""
import json, resource, sys, time
import numpy as np
spec = json.loads(sys.argv[1])
from lgt.model import ModelParams
p = ModelParams(sites=spec["sites"], hopping=1.0, mass=0.5, coupling=1.0, levels=3)
out = {}
t0, c0 = time.perf_counter(), time.process_time()
if spec["kind"] == "exact":
    from lgt.basis import PhysicalBasis
    from lgt.hamiltonian import build_hamiltonian
    from lgt.spectrum import lowest_levels
    out["energies"] = np.sort(lowest_levels(build_hamiltonian(PhysicalBasis(p)), spec["count"])).tolist()
else:
    from lgt.mps.dmrg import lowest_states
    r = lowest_states(p, spec["count"], spec["chi"])
    out.update(energies=r.energies.tolist(), dmrg_energies=r.dmrg_energies.tolist(), variance=r.variance,
               max_bond=r.max_bond, sweeps=r.sweeps, leakage=max(r.leakage))
out["wall_s"] = time.perf_counter() - t0
out["cpu_s"] = time.process_time() - c0
out["peak_mib"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
print(json.dumps(out))
"""


def run_case(spec: dict) -> dict:
    env = dict(os.environ)
    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    env["PYTHONPATH"] = root + os.pathsep + env.get("PYTHONPATH", "")
    proc = subprocess.run([sys.executable, "-c", CASE, json.dumps(spec)], capture_output=True, text=True, env=env)
    if proc.returncode:
        return {"error": proc.stderr.strip().splitlines()[-1] if proc.stderr else "failed"}
    return json.loads(proc.stdout.strip().splitlines()[-1])


def uptime() -> str:
    try:
        return subprocess.run(["uptime"], capture_output=True, text=True).stdout.strip()
    except OSError:  # pragma: no cover
        return "uptime unavailable"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sites", type=int, nargs="+", default=[20, 50, 100])
    ap.add_argument("--chi", type=int, default=128)
    ap.add_argument("--excited", type=int, default=2, help="excited states beside the ground state (0: none)")
    ap.add_argument("--exact-up-to", type=int, default=20)
    ap.add_argument("--repeats", type=int, default=1, help="repeats of the ground-state case (median quoted)")
    args = ap.parse_args()
    print("load before:", uptime(), flush=True)
    rows = []
    for N in args.sites:
        counts = [1] + ([1 + args.excited] if args.excited else [])
        exact = None
        if N <= args.exact_up_to:
            exact = run_case({"kind": "exact", "sites": N, "count": max(counts)})
            print(json.dumps({"N": N, "case": "exact", **exact}), flush=True)
        for count in counts:
            runs = [run_case({"kind": "dmrg", "sites": N, "count": count, "chi": args.chi})
                    for _ in range(args.repeats if count == 1 else 1)]
            for r in runs:
                print(json.dumps({"N": N, "case": f"dmrg {count} level(s)", **r}), flush=True)
            ok = [r for r in runs if "error" not in r]
            if not ok:
                rows.append((N, count, "failed", runs[0]["error"]))
                continue
            ok.sort(key=lambda r: r["cpu_s"])
            r = ok[len(ok) // 2]  # median by CPU time
            err = ("–" if exact is None or "energies" not in exact else
                   "%.1e" % max(abs(a - b) for a, b in zip(r["energies"], exact["energies"])))
            rows.append((N, count, "%.1f" % r["wall_s"], "%.1f" % r["cpu_s"], "%.0f" % r["peak_mib"],
                         max(r["max_bond"]), sum(r["sweeps"]), "%.1e" % max(r["variance"]), err,
                         " ".join("%.10f" % e for e in r["energies"])))
    print("load after:", uptime())
    print("\n| N | levels | wall s | CPU s | peak MiB | max χ | sweeps | max variance | max \\|ΔE\\| vs exact | energies |")
    print("|---|---|---|---|---|---|---|---|---|---|")
    for row in rows:
        print("| " + " | ".join(str(x) for x in row) + " |")


if __name__ == "__main__":
    main()
