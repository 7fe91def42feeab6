"""Sweep benchmarks: parallel efficiency with 2 workers, and the cost of writing HDF5 per run.

Usage: ``python benchmarks/bench_sweep.py [--runs 12] [--sites 14] [--workers 2]``

1. Parallel efficiency on a sweep of equal runs (spectrum task, fixed model size, distinct
   masses): E = T(1 worker) / (W · T(W workers)). Both timings use the same process pool
   machinery (one BLAS thread per worker) and include worker start-up and all HDF5 writing.
2. Writing overhead: time spent by the coordinator storing runs (part files + copy-on-write
   merges) against the computation time, on the same sweep; plus the time to write a typical
   time-evolution result (1000 stored times, per-link observables) as a single-run file.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from lgt.io import write_run_file
from lgt.results import RunResult, TimeSeries
from lgt.sweep.executors import ProcessPoolRunner
from lgt.sweep.runner import run_sweep
from lgt.sweep.store import SweepStore


def sweep_config(runs: int, sites: int) -> dict:
    """Equal-cost runs: same model size, distinct masses."""
    masses = [round(0.1 + 0.05 * k, 4) for k in range(runs)]
    return {"model": {"sites": sites, "levels": 3}, "spectrum": {"count": 4},
            "sweep": {"task": "spectrum", "grid": {"model.mass": masses}}}


class StoreTimer:
    """Accumulates the coordinator's time in SweepStore.add / merge (instrumented in place)."""

    def __init__(self) -> None:
        self.add = 0.0
        self.merge = 0.0
        self._orig_add, self._orig_merge = SweepStore.add, SweepStore.merge

    def __enter__(self) -> "StoreTimer":
        timer = self

        def add(store, *args, **kwargs):
            t0 = time.perf_counter()
            merged_before = timer.merge
            timer._orig_add(store, *args, **kwargs)
            timer.add += time.perf_counter() - t0 - (timer.merge - merged_before)

        def merge(store, *args, **kwargs):
            t0 = time.perf_counter()
            try:
                return timer._orig_merge(store, *args, **kwargs)
            finally:
                timer.merge += time.perf_counter() - t0
        SweepStore.add, SweepStore.merge = add, merge
        return self

    def __exit__(self, *exc) -> None:
        SweepStore.add, SweepStore.merge = self._orig_add, self._orig_merge


def timed_sweep(config: dict, workers: int, directory: Path, merge_every: float) -> dict:
    directory.mkdir(exist_ok=True)
    out = directory / f"bench_{workers}.h5"
    with StoreTimer() as timer, ProcessPoolRunner(workers) as pool:
        t0 = time.perf_counter()
        summary = run_sweep(config, out, pool, progress=False, merge_every=merge_every)
        wall = time.perf_counter() - t0
    assert summary.completed == len(config["sweep"]["grid"]["model.mass"])
    from lgt.sweep import list_runs
    import h5py
    with h5py.File(out, "r") as f:
        cpu = sum(float(g.attrs["cpu_seconds"]) for g in f["runs"].values())
    compute = sum(r["wall_seconds"] for r in list_runs(out))
    return {"workers": workers, "wall_s": wall, "compute_s": compute, "cpu_s": cpu,
            "store_add_s": timer.add, "merge_s": timer.merge, "file_bytes": out.stat().st_size}


def evolution_like_write(directory: Path) -> float:
    """Seconds to write a 1000-time, 15-link evolution-sized result as a single-run file."""
    times = np.linspace(0.0, 50.0, 1000)
    rng = np.random.default_rng(0)
    result = RunResult("evolve", {"model": {"sites": 16, "levels": 3}},
                       series={name: TimeSeries(times, rng.random((1000, 15)))
                               for name in ("field", "field_squared", "occupation", "charge")}
                       | {"echo": TimeSeries(times, rng.random(1000)),
                          "entropy": TimeSeries(times, rng.random(1000))},
                       arrays={"initial": rng.random(15)})
    best = np.inf
    for k in range(5):
        t0 = time.perf_counter()
        write_run_file(directory / f"evolve_{k}.h5", result)
        best = min(best, time.perf_counter() - t0)
    return best


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=12)
    parser.add_argument("--sites", type=int, default=14)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--merge-every", type=float, default=30.0)
    args = parser.parse_args(argv)
    config = sweep_config(args.runs, args.sites)
    load_before = os.getloadavg()[0]
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        one = timed_sweep(config, 1, tmp, args.merge_every)
        many = timed_sweep(config, args.workers, tmp, args.merge_every)
        worst = timed_sweep(sweep_config(40, 8), 1, tmp / "w", 0.0)  # merge after every run
        evolve_write = evolution_like_write(tmp)
    efficiency = one["wall_s"] / (args.workers * many["wall_s"])
    # Busy fraction of the W workers during the W-worker sweep: what the sweep machinery
    # (start-up, dispatch, storing) leaves to computation, independent of other load.
    utilisation = many["compute_s"] / (args.workers * many["wall_s"])
    per_run_compute = one["compute_s"] / args.runs
    per_run_store = (one["store_add_s"] + one["merge_s"]) / args.runs
    report = {
        "runs": args.runs, "sites": args.sites, "workers": args.workers,
        "wall_1_worker_s": round(one["wall_s"], 3), "wall_n_workers_s": round(many["wall_s"], 3),
        "parallel_efficiency": round(efficiency, 3),
        "worker_utilisation": round(utilisation, 3),
        "cpu_per_run_1_worker_s": round(one["cpu_s"] / args.runs, 3),
        "cpu_per_run_n_workers_s": round(many["cpu_s"] / args.runs, 3),
        "load_average_before_after": [load_before, os.getloadavg()[0]],
        "compute_per_run_s": round(per_run_compute, 4),
        "part_write_per_run_ms": round(1e3 * one["store_add_s"] / args.runs, 2),
        "merge_total_ms": round(1e3 * one["merge_s"], 2),
        "store_overhead_fraction": round(per_run_store / per_run_compute, 5),
        "sweep_file_bytes": one["file_bytes"],
        "evolution_result_write_ms": round(1e3 * evolve_write, 2),
        "merge_after_every_run_ms_40_runs": round(1e3 * worst["merge_s"] / 40, 2),
    }
    print(json.dumps(report, indent=2))
    print(f"parallel efficiency with {args.workers} workers: {efficiency:.1%} (target >= 85%)",
          file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
