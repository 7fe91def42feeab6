"""Build time and peak memory of the physical-subspace Hamiltonian (run by hand).

Each size runs in a fresh subprocess so that its peak resident memory (ru_maxrss) is its own.
For comparison, in the same run, the by-hand route: the same model assembled on the full
fermion ⊗ link space (2^N · d^(N−1) states) with scipy sparse Kronecker products.

Usage: python benchmarks/bench_build.py [--quick]
"""

from __future__ import annotations

import json
import subprocess
import sys

CHILD = r"""
import json, resource, sys, time
import numpy as np
N, d, route = int(sys.argv[1]), int(sys.argv[2]), sys.argv[3]
t0 = time.perf_counter()
if route == "fluxline":
    from lgt.basis import PhysicalBasis
    from lgt.hamiltonian import build_hamiltonian
    from lgt.model import ModelParams
    basis = PhysicalBasis(ModelParams(sites=N, levels=d, hopping=1.0, mass=0.5, coupling=1.0))
    H = build_hamiltonian(basis)
    dim, nnz = basis.dimension, H.nnz
else:
    import scipy.sparse as sp
    K = N - 1
    S = (d - 1) / 2
    Lm = sp.diags(np.arange(d) - S)
    Um = sp.diags(np.ones(d - 1), -1)
    sm = sp.csr_matrix(np.array([[0.0, 1.0], [0.0, 0.0]]))
    Z = sp.diags([1.0, -1.0])
    def site_op(op, n):  # Jordan-Wigner string on sites < n
        mats = [Z] * n + [op] + [sp.identity(2)] * (N - n - 1)
        out = mats[0]
        for m in mats[1:]:
            out = sp.kron(out, m, format="csr")
        return out
    def link_op(op, k):
        out = sp.identity(d ** k, format="csr")
        out = sp.kron(out, op, format="csr")
        return sp.kron(out, sp.identity(d ** (K - k - 1)), format="csr")
    IF, IL = sp.identity(2 ** N, format="csr"), sp.identity(d ** K, format="csr")
    c = [site_op(sm, n) for n in range(N)]
    H = sp.csr_matrix((2 ** N * d ** K,) * 2)
    for n in range(K):
        hop = sp.kron(c[n].T @ c[n + 1], link_op(Um, n), format="csr")
        H = H + hop + hop.T
    for n in range(N):
        H = H + 0.5 * (-1) ** n * sp.kron(c[n].T @ c[n], IL, format="csr")
    for k in range(K):
        H = H + sp.kron(IF, link_op(Lm @ Lm, k), format="csr")
    dim, nnz = H.shape[0], H.nnz
seconds = time.perf_counter() - t0
peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # MiB (Linux reports KiB)
print(json.dumps({"N": N, "d": d, "route": route, "dim": dim, "nnz": nnz, "seconds": seconds, "peak_mib": peak}))
"""


def run(N: int, d: int, route: str) -> dict:
    out = subprocess.run([sys.executable, "-c", CHILD, str(N), str(d), route], capture_output=True, text=True)
    if out.returncode:
        return {"N": N, "d": d, "route": route, "error": out.stderr.strip().splitlines()[-1]}
    return json.loads(out.stdout)


def main() -> None:
    quick = "--quick" in sys.argv
    cases = [(N, 3) for N in range(8, 27 if not quick else 19, 2)] + [(N, 5) for N in range(8, 23 if not quick else 15, 2)]
    cases.append((20, 11))  # register 11^19 beyond int64 codes; physical subspace C(20, 10)
    if "--n28" in sys.argv:
        cases.append((28, 3))
    print(f"{'route':>9} {'N':>3} {'d':>2} {'dimension':>12} {'nnz':>12} {'seconds':>9} {'peak MiB':>9}")
    rows = [run(N, d, "fluxline") for N, d in cases] + [run(N, 3, "by-hand") for N in (6, 8, 10)]
    for r in rows:
        if "error" in r:
            print(f"{r['route']:>9} {r['N']:>3} {r['d']:>2}  failed: {r['error']}")
            continue
        print(f"{r['route']:>9} {r['N']:>3} {r['d']:>2} {r['dim']:>12} {r['nnz']:>12} {r['seconds']:>9.3f} {r['peak_mib']:>9.0f}")
    ours = {(r["N"], r["d"]): r for r in rows if r["route"] == "fluxline" and "error" not in r}
    for r in rows:
        if r["route"] == "by-hand" and "error" not in r and (r["N"], 3) in ours:
            f = ours[(r["N"], 3)]
            print(f"N = {r['N']}, d = 3: by-hand / fluxline build time = {r['seconds'] / f['seconds']:.0f}x, "
                  f"memory {r['peak_mib']:.0f} / {f['peak_mib']:.0f} MiB")


if __name__ == "__main__":
    main()
