"""Depth sizing before/after in one run (run by hand): ``fluxline size``'s search on an N-site chain
(d = 3, w = 1, m = 0.5, J = 1, bare-vacuum quench, dt = 0.1, tolerance 0.01, both families, the
defaults otherwise) for several variants, each in a fresh process, interleaved over the repeats:

* ``base-plain`` / ``base-fast``: the code of git revision ``--base-ref`` (default: the commit
  before this benchmark's changes; unpacked into a temporary folder) with ``fast_fit = false``
  (the plain fits, "the old path") and with its defaults;
* ``plain``: this tree with ``fast_fit = false``; ``serial``: this tree, ``workers = 1``;
  ``fast``: this tree with its defaults (worker processes per ``[variational] workers``).

Per variant: wall time, CPU time of the process and its workers (``RUSAGE_CHILDREN``), chosen
depth and mean optimiser iterations per step of each family; medians over the repeats; the
load average before and after each run. The answers of every variant are compared with the
first one's: chosen depths, best depths under noise, and the largest difference of each numeric
depth-table column (timing columns excluded).

Usage::

    python benchmarks/bench_sizing.py [--sites 6] [--t-final 2] [--repeats 3]
        [--variants base-plain,base-fast,serial,fast] [--base-ref REV] [--ref REV] [--json]
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent.parent
#: Revision measured as "before" by default: the tip before the sizing-speed work.
BASE_REF = "c566605"
#: Columns that are timings, not answers.
TIMING = {"fit_seconds", "step_seconds"}

CHILD = r"""
import json, sys, time
from lgt.variational.workflow import run_size
config = json.loads(sys.argv[1])
t0 = time.perf_counter()
result = run_size(config)
out = {"seconds": time.perf_counter() - t0, "families": {}}
for row in result.tables["families"].rows():
    name = row["family"]
    traj = result.tables[f"trajectories_{name}"].columns
    steps = traj["time"] > 0
    depth = result.tables[f"depth_{name}"].columns
    out["families"][name] = {
        "layers": int(row["layers"]), "best_under_noise": int(row["best_layers_under_noise"]),
        "best_simulated": int(row.get("best_layers_under_noise_simulated", -1)),
        "iterations": float(traj["optimizer_iterations"][steps].mean()),
        "table": {k: [float(x) for x in v] for k, v in depth.items() if v.dtype.kind in "fiub"}}
print("RESULT " + json.dumps(out))
"""


def config(sites: int, t_final: float, variant: str) -> dict:
    var = {"dt": 0.1, "t_final": t_final, "tolerance": 0.01}
    if variant.endswith("plain"):
        var["fast_fit"] = False
    if variant == "serial":
        var["workers"] = 1
    return {"model": {"sites": sites, "hopping": 1.0, "mass": 0.5, "coupling": 1.0, "levels": 3},
            "initial": {"kind": "vacuum"}, "variational": var}


def run_variant(tree: Path, cfg: dict) -> dict:
    """One sizing run in a fresh process on the code in ``tree``: its summary, wall and CPU."""
    env = dict(os.environ, PYTHONPATH=str(tree))
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    load0 = os.getloadavg()[0]
    t0 = time.perf_counter()
    # run from the tree itself: ``python -c`` puts the working folder first on sys.path
    proc = subprocess.run([sys.executable, "-c", CHILD, json.dumps(cfg)], env=env, capture_output=True, text=True,
                          cwd=str(tree))
    wall = time.perf_counter() - t0
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if proc.returncode != 0:
        raise SystemExit(f"run failed ({tree}):\n{proc.stderr[-3000:]}")
    line = next(x for x in proc.stdout.splitlines() if x.startswith("RESULT "))
    out = json.loads(line[len("RESULT "):])
    out["wall"] = wall
    out["cpu"] = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    out["load"] = (load0, os.getloadavg()[0])
    return out


def base_tree(ref: str) -> Path:
    """The code of ``ref`` unpacked into a temporary folder (kept for the run)."""
    folder = Path(tempfile.mkdtemp(prefix="fluxline-base-"))
    archive = subprocess.run(["git", "-C", str(HERE), "archive", ref], capture_output=True, check=True).stdout
    subprocess.run(["tar", "-x", "-C", str(folder)], input=archive, check=True)
    return folder


def compare(ref: dict, other: dict) -> dict:
    """Chosen depths equal, and the largest |difference| per numeric depth-table column."""
    out = {}
    for name, fam in ref["families"].items():
        o = other["families"].get(name)
        if o is None:
            out[name] = "missing"
            continue
        keys = ("layers", "best_under_noise", "best_simulated")
        same = {k: fam[k] if fam[k] == o[k] else f"{fam[k]} vs {o[k]}" for k in keys}
        diffs = {}
        for col, vals in fam["table"].items():
            if col in TIMING or col not in o["table"]:
                continue
            a, b = np.array(vals), np.array(o["table"][col])
            diffs[col] = float(np.max(np.abs(a - b))) if a.shape == b.shape else float("inf")
        out[name] = {"depths": same, "rows": (len(fam["table"]["layers"]), len(o["table"]["layers"])),
                     "largest_differences": {k: v for k, v in diffs.items() if v > 0}}
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sites", type=int, default=6)
    ap.add_argument("--t-final", type=float, default=2.0)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--variants", default="base-plain,base-fast,serial,fast")
    ap.add_argument("--base-ref", default=BASE_REF)
    ap.add_argument("--ref", default=None, help="measure this revision as 'after' (default: the working tree)")
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()
    variants = args.variants.split(",")
    base = base_tree(args.base_ref) if any(v.startswith("base") for v in variants) else None
    after = base_tree(args.ref) if args.ref else HERE
    runs: dict[str, list[dict]] = {v: [] for v in variants}
    print(f"N = {args.sites}, T = {args.t_final}, {args.repeats} repeats; before: {args.base_ref}, after: "
          f"{args.ref or 'working tree'}; load {os.getloadavg()} at start", flush=True)
    for rep in range(args.repeats):
        for v in variants:
            r = run_variant(base if v.startswith("base") else after, config(args.sites, args.t_final, v))
            runs[v].append(r)
            fams = ", ".join(f"{n}: D = {f['layers']} ({f['iterations']:.0f} it/step)" for n, f in r["families"].items())
            print(f"[{rep + 1}] {v:10s} {r['wall']:7.1f} s wall {r['cpu']:7.1f} s CPU  {fams}  "
                  f"load {r['load'][0]:.1f} -> {r['load'][1]:.1f}", flush=True)
    med = {v: {k: float(np.median([r[k] for r in rs])) for k in ("wall", "cpu")} for v, rs in runs.items()}
    print("\nmedians:")
    for v in variants:
        print(f"  {v:10s} {med[v]['wall']:7.1f} s wall {med[v]['cpu']:7.1f} s CPU")
    ref = variants[0]
    print(f"\nratios against {ref} (medians):")
    for v in variants[1:]:
        print(f"  {v:10s} {med[ref]['wall'] / med[v]['wall']:5.2f}x wall {med[ref]['cpu'] / med[v]['cpu']:5.2f}x CPU")
    for ref in variants[:2]:
        print(f"\nanswers against {ref} (first repeat; depths: equal value or 'a vs b'):")
        for v in variants:
            if v != ref:
                print(f"  {v}: {json.dumps(compare(runs[ref][0], runs[v][0]))}")
    if args.json:
        print(json.dumps({"runs": runs, "medians": med}))


if __name__ == "__main__":
    main()
