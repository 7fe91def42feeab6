"""Bytes moved per Chebyshev step against a measured copy bandwidth, in one run.

One step T_{k+1} = 2X T_k − T_{k−1} on the physical-subspace H (w = 1, m = 0.5, J = 1, d = 3)
must at least read the CSR arrays once (8 B value + 4 B column index per non-zero, 4 B per row
pointer) and the vectors x, prev and write out (3 × 8 B per row for a real state): that is the
bandwidth bound, bytes / (copy bandwidth), with the copy bandwidth measured by ``np.copyto`` of
an array of the same size as H's arrays (read + write counted), interleaved with the steps.
Three routes: the fused kernel (``lgt.kernels``, real vector), and the previous route — scipy's
product on the (dim, 2) real view of a complex state followed by the vector algebra.

Usage::

    python benchmarks/bench_bandwidth.py [--sizes 20 22 24] [--repeats 15] [--threads 1] [--json]
"""

from __future__ import annotations

import json
import os
import sys
import time

import numpy as np

from _common import comparison_parser, lattice_hamiltonian
from lgt.kernels import SparseKernel


def _timed(fn) -> float:
    t0 = time.perf_counter()
    fn()
    return time.perf_counter() - t0


def main() -> None:
    ap = comparison_parser(__doc__, [20, 22, 24], 15)
    ap.add_argument("--threads", type=int, default=1)
    args = ap.parse_args()
    rows = []
    for N in args.sizes:
        H = lattice_hamiltonian(N)
        dim = H.shape[0]
        kernel = SparseKernel(H, args.threads, compiled=True)
        rng = np.random.default_rng(0)
        x, prev = rng.normal(size=(dim, 1)), rng.normal(size=(dim, 1))
        out = np.empty_like(x)
        z, zprev = rng.normal(size=(dim, 2)), rng.normal(size=(dim, 2))
        nbytes = H.data.nbytes + H.indices.nbytes + H.indptr.nbytes + 3 * x.nbytes
        src = np.ones(nbytes // 16)
        dst = np.ones_like(src)

        def old_step():  # scipy product on the complex state's real view + vector algebra
            hv = H @ z
            hv -= 0.1 * z
            hv *= 1.0 / 20.0
            hv *= 2.0
            hv -= zprev

        kernel.fused(x, prev, out, 0.1, -0.01, 1.0)
        fused, copy, old, loads = [], [], [], []
        for _ in range(args.repeats):
            loads.append(os.getloadavg()[0])
            fused.append(_timed(lambda: kernel.fused(x, prev, out, 0.1, -0.01, 1.0)))
            copy.append(_timed(lambda: np.copyto(dst, src)))
            old.append(_timed(old_step))
        kernel.close()
        bandwidth = 2 * src.nbytes / np.median(copy)
        bound = nbytes / bandwidth
        row = {"sites": N, "dimension": dim, "nonzeros": int(H.nnz), "bytes_per_step": int(nbytes),
               "copy_bandwidth_gbs": bandwidth / 1e9, "bound_ms": 1e3 * bound,
               "fused_ms": 1e3 * float(np.median(fused)), "old_route_ms": 1e3 * float(np.median(old)),
               "threads": args.threads, "load": float(np.median(loads))}
        row["fused_over_bound"] = row["fused_ms"] / row["bound_ms"]
        row["old_over_bound"] = row["old_route_ms"] / row["bound_ms"]
        rows.append(row)
        print(json.dumps(row), file=sys.stderr)
    if args.json:
        print(json.dumps(rows))
        return
    print(f"{'N':>3} {'dim':>8} {'MB/step':>8} {'copy GB/s':>9} {'bound ms':>8} {'fused ms':>8} "
          f"{'×bound':>6} {'old ms':>7} {'×bound':>6} {'load':>5}")
    for r in rows:
        print(f"{r['sites']:>3} {r['dimension']:>8} {r['bytes_per_step'] / 1e6:>8.1f} {r['copy_bandwidth_gbs']:>9.1f} "
              f"{r['bound_ms']:>8.2f} {r['fused_ms']:>8.2f} {r['fused_over_bound']:>6.1f} "
              f"{r['old_route_ms']:>7.2f} {r['old_over_bound']:>6.1f} {r['load']:>5.1f}")


if __name__ == "__main__":
    main()
