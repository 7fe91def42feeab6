"""Low-lying spectrum: ``lgt.spectrum.lowest_eigenpairs`` against one ARPACK call, in one run.

Both sides get the same physical-subspace H (w = 1, m = 0.5, J = 1, d = 3) and the same
ARPACK settings (``scipy.sparse.linalg.eigsh``, which = "SA", tol = 1e-12, the same ncv and
start vector); the sides alternate, ``--repeats`` times, and the medians are compared.

Usage::

    python benchmarks/bench_spectrum.py [--sizes 20 22 24] [--count 2] [--repeats 3] [--json]
"""

from __future__ import annotations

import json
import os
import sys
import time

import numpy as np
import scipy.sparse.linalg as spla

from _common import comparison_parser, lattice_hamiltonian
from lgt.spectrum import lowest_eigenpairs


def one_arpack(H, count: int) -> np.ndarray:
    """The single ARPACK call lowest_eigenpairs starts with (same ncv and start vector)."""
    n = H.shape[0]
    ncv = min(n, max(2 * count + 1, count + 32))
    v0 = np.random.default_rng(12345).standard_normal(n)
    return np.sort(spla.eigsh(H, k=count, which="SA", tol=1e-12, ncv=ncv, v0=v0)[0])


def main() -> None:
    ap = comparison_parser(__doc__, [20, 22, 24], 3)
    ap.add_argument("--count", type=int, default=2)
    args = ap.parse_args()
    rows = []
    for N in args.sizes:
        H = lattice_hamiltonian(N)
        ours, arpack, loads = [], [], []
        for _ in range(args.repeats):
            loads.append(os.getloadavg()[0])
            t0 = time.perf_counter()
            ref = one_arpack(H, args.count)
            arpack.append(time.perf_counter() - t0)
            t0 = time.perf_counter()
            w, _ = lowest_eigenpairs(H, args.count)
            ours.append(time.perf_counter() - t0)
        row = {"sites": N, "dimension": H.shape[0], "count": args.count,
               "fluxline_s": float(np.median(ours)), "arpack_s": float(np.median(arpack)),
               "fluxline_all_s": [round(x, 2) for x in ours], "arpack_all_s": [round(x, 2) for x in arpack],
               "max_level_deviation": float(np.max(np.abs(w - ref))), "load": float(np.median(loads))}
        row["ratio"] = row["fluxline_s"] / row["arpack_s"]
        rows.append(row)
        print(json.dumps(row), file=sys.stderr)
    if args.json:
        print(json.dumps(rows))
        return
    print(f"{'N':>3} {'dim':>8} {'levels':>6} {'Fluxline s':>10} {'ARPACK s':>9} {'ratio':>6} {'max|ΔE|':>8} {'load':>5}")
    for r in rows:
        print(f"{r['sites']:>3} {r['dimension']:>8} {r['count']:>6} {r['fluxline_s']:>10.2f} {r['arpack_s']:>9.2f} "
              f"{r['ratio']:>6.2f} {r['max_level_deviation']:>8.1e} {r['load']:>5.1f}")


if __name__ == "__main__":
    main()
