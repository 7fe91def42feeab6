"""MPS backend: wall time, peak memory and accuracy of long-chain quenches, in one run.

For each requested N (default 24, 50, 100) at d = 3, bare-vacuum and meson quenches to
``--t-final`` (default 10, dt = 0.1) at bond dimensions ``--chi`` (default 64, 128); exact
evolution at N = 24 in the same run; accuracy against exact (N ≤ 24) and against the largest χ
(longer chains, t ≤ ``--compare-until``); DMRG ground state at the largest N. Each case runs in
a fresh subprocess so its peak memory (ru_maxrss) is its own. Prints one JSON line per case
and a table; ``uptime`` load is printed first and last (shared machine: quote ratios).

    python benchmarks/bench_mps.py                       # the full set (long: ~1 h on 2 cores)
    python benchmarks/bench_mps.py --sites 24 --chi 64 --t-final 2
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys

CASE = r"""
import json, resource, sys, time, warnings
import numpy as np
warnings.simplefilter("ignore", RuntimeWarning)
spec = json.loads(sys.argv[1])
N = spec["sites"]
model = {"sites": N, "hopping": 1.0, "mass": 0.5, "coupling": 1.0}
initial = {"kind": "vacuum"} if spec["state"] == "vacuum" else {"kind": "meson", "sites": [N // 2 - 2, N // 2 + 1]}
t0 = time.perf_counter()
if spec["kind"] == "dmrg":
    from lgt.model import ModelParams
    from lgt.mps.dmrg import lowest_states
    res = lowest_states(ModelParams(**model), 1, spec["chi"])
    out = {"energy": float(res.energies[0]), "max_bond": res.max_bond[0], "sweeps": res.sweeps[0]}
else:
    from lgt.evolution import run_evolution
    ev = {"t_final": spec["t_final"], "dt": 0.1}
    if spec["kind"] == "mps":
        ev.update(method="mps", bond_dimension=spec["chi"])
    r = run_evolution({"model": model, "initial": initial, "evolution": ev})
    out = {k: np.asarray(r.series[k].values).tolist() for k in ("electric_field", "entanglement_entropy", "energy")}
    out.update({k: r.attributes[k] for k in ("discarded_weight", "max_bond_dimension", "energy_drift",
                                               "estimated_seconds") if k in r.attributes})
out["seconds"] = time.perf_counter() - t0
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


def max_error(a: dict, b: dict, until: int) -> float:
    """Largest |⟨L_n⟩| difference over the first ``until`` stored times."""
    import numpy as np

    x, y = np.asarray(a["electric_field"])[:until], np.asarray(b["electric_field"])[:until]
    return float(np.abs(x - y).max())


def uptime() -> str:
    try:
        return subprocess.run(["uptime"], capture_output=True, text=True).stdout.strip()
    except OSError:  # pragma: no cover
        return "uptime unavailable"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sites", type=int, nargs="+", default=[24, 50, 100])
    ap.add_argument("--chi", type=int, nargs="+", default=[64, 128])
    ap.add_argument("--t-final", type=float, default=10.0)
    ap.add_argument("--compare-until", type=float, default=5.0, help="accuracy window against the largest χ")
    ap.add_argument("--states", nargs="+", default=["vacuum", "meson"])
    ap.add_argument("--skip-dmrg", action="store_true")
    args = ap.parse_args()
    print("load before:", uptime(), flush=True)
    rows = []
    until = int(round(args.compare_until / 0.1)) + 1
    for N in args.sites:
        for state in args.states:
            exact = None
            if N <= 24:
                exact = run_case({"kind": "exact", "sites": N, "state": state, "t_final": args.t_final})
                rows.append({"N": N, "state": state, "method": "exact", **_summary(exact)})
                print(json.dumps(rows[-1]), flush=True)
            runs = {}
            for chi in args.chi:
                runs[chi] = run_case({"kind": "mps", "sites": N, "state": state, "chi": chi, "t_final": args.t_final})
                row = {"N": N, "state": state, "method": f"mps chi={chi}", **_summary(runs[chi])}
                if "error" not in runs[chi] and exact is not None and "error" not in exact:
                    row["err_vs_exact"] = max_error(runs[chi], exact, len(exact["energy"]))
                rows.append(row)
                print(json.dumps(row), flush=True)
            top = max(args.chi)
            for chi in args.chi:  # fill err_vs_top_chi once the largest χ has run
                r = next(x for x in rows if x["N"] == N and x["state"] == state and x["method"] == f"mps chi={chi}")
                if chi != top and "error" not in runs[chi] and "error" not in runs[top]:
                    r["err_vs_top_chi"] = max_error(runs[chi], runs[top], until)
    if not args.skip_dmrg:
        N = max(args.sites)
        d = run_case({"kind": "dmrg", "sites": N, "state": "vacuum", "chi": min(args.chi)})
        rows.append({"N": N, "state": "ground", "method": f"dmrg chi={min(args.chi)}", **_summary(d)})
        print(json.dumps(rows[-1]), flush=True)
    print("load after:", uptime())
    print(f"\n{'N':>4} {'state':>7} {'method':>14} {'seconds':>9} {'peak MiB':>9} {'max chi':>7} "
          f"{'discarded':>10} {'err exact':>10} {'err top chi':>11}")
    for r in rows:
        print(f"{r['N']:>4} {r['state']:>7} {r['method']:>14} {r.get('seconds', float('nan')):>9.1f} "
              f"{r.get('peak_mib', float('nan')):>9.0f} {str(r.get('max_bond', '')):>7} "
              f"{r.get('discarded_weight', float('nan')):>10.1e} {r.get('err_vs_exact', float('nan')):>10.1e} "
              f"{r.get('err_vs_top_chi', float('nan')):>11.1e}")


def _summary(out: dict) -> dict:
    if "error" in out:
        return {"error": out["error"]}
    keep = {k: out[k] for k in ("seconds", "peak_mib", "discarded_weight", "energy_drift", "estimated_seconds")
            if k in out}
    keep["max_bond"] = out.get("max_bond_dimension", out.get("max_bond"))
    return keep


if __name__ == "__main__":
    main()
