"""MPS backend: wall time, peak memory and accuracy of long-chain quenches, in one run.

For each requested N (default 24, 50, 100) at d = 3, bare-vacuum and meson quenches to
``--t-final`` (default 10, dt = 0.1) at bond dimensions ``--chi`` (default 64, 128); exact
evolution at N = 24 in the same run; accuracy against exact (N ≤ 24) and against the largest χ
(longer chains, t ≤ ``--compare-until``). Each case runs in a fresh subprocess so its peak memory
(ru_maxrss) and CPU time (ru_utime + ru_stime) are its own; the run is single-threaded, so on a
shared machine its CPU time is the fair proxy for the wall time on an idle one. Prints one JSON
line per case (with ``uptime`` load before and after it) and a table. The DMRG ground-state
timing lives in benchmarks/bench_dmrg.py.

    python benchmarks/bench_mps.py                       # the full set (long: hours on 2 shared cores)
    python benchmarks/bench_mps.py --sites 100 --chi 64 --states vacuum --t-final 10
    python benchmarks/bench_mps.py --sites 24 --chi 64 --t-final 2
    python benchmarks/bench_mps.py --sites 100 --chi 128 --t-final 5 --save /tmp/chi128.json
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys

CASE = r"""
import json, os, resource, sys, time, warnings
import numpy as np
warnings.simplefilter("ignore", RuntimeWarning)
spec = json.loads(sys.argv[1])
N = spec["sites"]
model = {"sites": N, "hopping": 1.0, "mass": 0.5, "coupling": 1.0}
initial = {"kind": "vacuum"} if spec["state"] == "vacuum" else {"kind": "meson", "sites": [N // 2 - 2, N // 2 + 1]}
t0 = time.perf_counter()
from lgt.evolution import run_evolution
ev = {"t_final": spec["t_final"], "dt": 0.1}
if spec["kind"] == "mps":
    ev.update(method="mps", bond_dimension=spec["chi"])
r = run_evolution({"model": model, "initial": initial, "evolution": ev})
out = {k: np.asarray(r.series[k].values).tolist() for k in
       ("electric_field", "electric_field_squared", "entanglement_entropy", "energy")}
out.update({k: r.attributes[k] for k in ("discarded_weight", "max_bond_dimension", "energy_drift",
                                           "estimated_seconds", "max_leakage") if k in r.attributes})
out["timings"] = dict(r.timings)
out["seconds"] = time.perf_counter() - t0
use = resource.getrusage(resource.RUSAGE_SELF)
out["cpu_seconds"] = use.ru_utime + use.ru_stime
out["peak_mib"] = use.ru_maxrss / 1024
print(json.dumps(out))
"""


def run_case(spec: dict) -> dict:
    env = dict(os.environ)
    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    env["PYTHONPATH"] = root + os.pathsep + env.get("PYTHONPATH", "")
    before = uptime()
    proc = subprocess.run([sys.executable, "-c", CASE, json.dumps(spec)], capture_output=True, text=True, env=env)
    if proc.returncode:
        return {"error": proc.stderr.strip().splitlines()[-1] if proc.stderr else "failed"}
    out = json.loads(proc.stdout.strip().splitlines()[-1])
    out["load_before"], out["load_after"] = before, uptime()
    return out


#: Series compared between runs (absolute differences, maximum over sites and times).
COMPARED = ("electric_field", "electric_field_squared", "energy")


def max_error(a: dict, b: dict, until: int) -> dict:
    """Largest absolute difference of each compared series over the first ``until`` stored times."""
    import numpy as np

    return {k: float(np.abs(np.asarray(a[k])[:until] - np.asarray(b[k])[:until]).max()) for k in COMPARED}


def uptime() -> str:
    try:
        return subprocess.run(["uptime"], capture_output=True, text=True).stdout.strip().split("load average: ")[-1]
    except OSError:  # pragma: no cover
        return "uptime unavailable"


def cached_case(spec: dict, save_dir: str | None) -> dict:
    """Run a case, or reuse its saved output (``--save-dir``: one JSON file per case)."""
    name = f"{spec['kind']}_N{spec['sites']}_{spec['state']}_chi{spec.get('chi', 0)}_t{spec['t_final']:g}.json"
    path = os.path.join(save_dir, name) if save_dir else None
    if path and os.path.exists(path):
        with open(path) as fh:
            return json.load(fh)
    out = run_case(spec)
    if path and "error" not in out:
        with open(path, "w") as fh:
            json.dump(out, fh)
    return out


def saved_reference(save_dir: str | None, kind: str, N: int, state: str, chi: int = 0) -> dict | None:
    """A saved run of any t_final (the longest one), for comparisons across invocations."""
    if not save_dir:
        return None
    import glob

    paths = sorted(glob.glob(os.path.join(save_dir, f"{kind}_N{N}_{state}_chi{chi}_t*.json")))
    best = None
    for p in paths:
        with open(p) as fh:
            out = json.load(fh)
        if best is None or len(out["energy"]) > len(best["energy"]):
            best = out
    return best


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sites", type=int, nargs="+", default=[24, 50, 100])
    ap.add_argument("--chi", type=int, nargs="+", default=[64, 128])
    ap.add_argument("--t-final", type=float, default=10.0)
    ap.add_argument("--compare-until", type=float, default=5.0, help="accuracy window against the largest χ")
    ap.add_argument("--states", nargs="+", default=["vacuum", "meson"])
    ap.add_argument("--exact-max-sites", type=int, default=24, help="exact evolution up to this N")
    ap.add_argument("--save-dir", help="keep each case's output here and reuse it (compare across runs)")
    args = ap.parse_args()
    if args.save_dir:
        os.makedirs(args.save_dir, exist_ok=True)
    print("load before:", uptime(), flush=True)
    rows = []
    until = int(round(args.compare_until / 0.1)) + 1
    for N in args.sites:
        for state in args.states:
            exact = None
            if N <= args.exact_max_sites:
                exact = cached_case({"kind": "exact", "sites": N, "state": state, "t_final": args.t_final},
                                    args.save_dir)
                rows.append({"N": N, "state": state, "method": "exact", **_summary(exact)})
                print(json.dumps(rows[-1]), flush=True)
            for chi in args.chi:
                run = cached_case({"kind": "mps", "sites": N, "state": state, "chi": chi,
                                   "t_final": args.t_final}, args.save_dir)
                row = {"N": N, "state": state, "method": f"mps chi={chi}", **_summary(run)}
                if "error" not in run and exact is not None and "error" not in exact:
                    row["err_vs_exact"] = max_error(run, exact, len(exact["energy"]))
                for top in sorted({2 * chi, 128} - {chi}):  # a larger bond dimension, this or an earlier run
                    ref = saved_reference(args.save_dir, "mps", N, state, top)
                    if "error" not in run and ref is not None and top > chi:
                        row[f"err_vs_chi{top}"] = max_error(run, ref, until)
                rows.append(row)
                print(json.dumps(row), flush=True)
    print("load after:", uptime())
    print(f"\n{'N':>4} {'state':>7} {'method':>12} {'t':>4} {'wall s':>8} {'CPU s':>8} {'peak MiB':>8} "
          f"{'max chi':>7} {'discarded':>9} {'est. s':>7}  errors")
    for r in rows:
        errs = "; ".join(f"{k}: " + ", ".join(f"{v:.1e}" for v in r[k].values())
                         for k in r if k.startswith("err_"))
        print(f"{r['N']:>4} {r['state']:>7} {r['method']:>12} {r.get('t_final', 0):>4g} "
              f"{r.get('seconds', float('nan')):>8.1f} {r.get('cpu_seconds', float('nan')):>8.1f} "
              f"{r.get('peak_mib', float('nan')):>8.0f} {str(r.get('max_bond', '')):>7} "
              f"{r.get('discarded_weight', float('nan')):>9.1e} {r.get('estimated_seconds', float('nan')):>7.0f}  "
              f"{errs}")


def _summary(out: dict) -> dict:
    if "error" in out:
        return {"error": out["error"]}
    keep = {k: out[k] for k in ("seconds", "cpu_seconds", "peak_mib", "discarded_weight", "energy_drift",
                                "estimated_seconds", "max_leakage", "timings", "load_before", "load_after")
            if k in out}
    keep["t_final"] = round(0.1 * (len(out["energy"]) - 1), 6)
    keep["max_bond"] = out.get("max_bond_dimension")
    return keep


if __name__ == "__main__":
    main()
