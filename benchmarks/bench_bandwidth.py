"""Bytes moved per Chebyshev step against a measured copy bandwidth, in one run.

One step T_{k+1} = 2X T_k − T_{k−1} on the physical-subspace H (w = 1, m = 0.5, J = 1, d = 3)
must at least read the matrix once and x, prev and write out (3 × 8 B per row and column).
Two byte counts, each turned into a bound by the copy bandwidth of ``np.copyto`` (read + write
counted) on an array of that many bytes, measured interleaved with the steps:

* **plain CSR**: 8 B value + 4 B column index per non-zero, 4 B per row pointer — the bound of
  one ordinary CSR product;
* **pattern**: what the kernel actually moves when H has one off-diagonal value
  (:func:`lgt.kernels.pattern_of`): 4 B per off-diagonal index, 4 B row pointer and 8 B
  diagonal per row.

Routes timed (CPU time of the calling thread, medians): the fused kernel on the pattern format
and on the plain CSR (one real column, a real state), the pattern kernel on two columns read
rotated (the step of a complex state), and scipy's product on the (dim, 2) real view of a
complex state followed by the vector algebra (the route before the fused kernels).

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


def _timed(fn, threads: int) -> float:
    clock = time.thread_time if threads == 1 else time.perf_counter  # CPU time when single-threaded
    t0 = clock()
    fn()
    return clock() - t0


def main() -> None:
    ap = comparison_parser(__doc__, [20, 22, 24], 15)
    ap.add_argument("--threads", type=int, default=1)
    args = ap.parse_args()
    rows = []
    for N in args.sizes:
        H = lattice_hamiltonian(N)
        dim = H.shape[0]
        pattern = SparseKernel(H, args.threads, compiled=True)
        plain = SparseKernel(H, args.threads, compiled=True, pattern=False)
        rng = np.random.default_rng(0)
        x, prev = rng.normal(size=(dim, 1)), rng.normal(size=(dim, 1))
        out = np.empty_like(x)
        z, zprev = rng.normal(size=(dim, 2)), rng.normal(size=(dim, 2))
        zout = np.empty_like(z)
        csr_bytes = plain.bytes_per_product()
        pattern_bytes = pattern.bytes_per_product()
        src = np.ones(csr_bytes // 16)
        dst = np.ones_like(src)
        src_p = np.ones(pattern_bytes // 16)
        dst_p = np.ones_like(src_p)

        def old_step():  # scipy product on the complex state's real view + vector algebra
            hv = H @ z
            hv -= 0.1 * z
            hv *= 1.0 / 20.0
            hv *= 2.0
            hv -= zprev

        routes = {
            "pattern": lambda: pattern.fused(x, prev, out, 0.1, -0.01, 1.0),
            "csr": lambda: plain.fused(x, prev, out, 0.1, -0.01, 1.0),
            "pattern_complex": lambda: pattern.fused(z, zprev, zout, 0.1, -0.01, 1.0, rotate=1),
            "copy_csr": lambda: np.copyto(dst, src),
            "copy_pattern": lambda: np.copyto(dst_p, src_p),
            "old": old_step,
        }
        for fn in routes.values():
            fn()
        times = {name: [] for name in routes}
        loads = []
        for _ in range(args.repeats):
            loads.append(os.getloadavg()[0])
            for name, fn in routes.items():
                times[name].append(_timed(fn, args.threads))
        pattern.close()
        plain.close()
        med = {name: float(np.median(v)) for name, v in times.items()}
        bw_csr = 2 * src.nbytes / med["copy_csr"]
        bw_pattern = 2 * src_p.nbytes / med["copy_pattern"]
        row = {"sites": N, "dimension": dim, "nonzeros": int(H.nnz),
               "csr_bytes": int(csr_bytes), "pattern_bytes": int(pattern_bytes),
               "copy_bandwidth_gbs": bw_csr / 1e9, "copy_bandwidth_pattern_gbs": bw_pattern / 1e9,
               "csr_bound_ms": 1e3 * csr_bytes / bw_csr, "pattern_bound_ms": 1e3 * pattern_bytes / bw_pattern,
               "pattern_ms": 1e3 * med["pattern"], "csr_ms": 1e3 * med["csr"],
               "pattern_complex_ms": 1e3 * med["pattern_complex"], "old_route_ms": 1e3 * med["old"],
               "threads": args.threads, "repeats": args.repeats, "load": float(np.median(loads))}
        row["pattern_over_own_bound"] = row["pattern_ms"] / row["pattern_bound_ms"]
        row["pattern_over_csr_bound"] = row["pattern_ms"] / row["csr_bound_ms"]
        row["csr_over_csr_bound"] = row["csr_ms"] / row["csr_bound_ms"]
        rows.append(row)
        print(json.dumps(row), file=sys.stderr)
    if args.json:
        print(json.dumps(rows))
        return
    print(f"threads: {args.threads}; CPU time of the calling thread" if args.threads == 1 else
          f"threads: {args.threads}; wall time")
    print(f"{'N':>3} {'dim':>8} {'MB CSR/pat':>11} {'GB/s':>5} {'bound CSR/pat ms':>16} {'pattern ms':>10} "
          f"{'×own':>5} {'×CSR':>5} {'CSR ms':>7} {'×CSR':>5} {'cplx ms':>7} {'old ms':>7} {'load':>5}")
    for r in rows:
        print(f"{r['sites']:>3} {r['dimension']:>8} {r['csr_bytes'] / 1e6:>5.1f}/{r['pattern_bytes'] / 1e6:<5.1f} "
              f"{r['copy_bandwidth_gbs']:>5.1f} {r['csr_bound_ms']:>7.2f}/{r['pattern_bound_ms']:<8.2f} "
              f"{r['pattern_ms']:>10.2f} {r['pattern_over_own_bound']:>5.1f} {r['pattern_over_csr_bound']:>5.1f} "
              f"{r['csr_ms']:>7.2f} {r['csr_over_csr_bound']:>5.1f} {r['pattern_complex_ms']:>7.2f} "
              f"{r['old_route_ms']:>7.2f} {r['load']:>5.1f}")


if __name__ == "__main__":
    main()
