"""Speed of the qudit circuit engine (run by hand: ``python benchmarks/bench_circuits.py``).

1. gate application time relative to ``psi.copy()`` (memory-bandwidth bound) for
   K = 8..12 qudits at d = 3 and K = 8..11 at d = 5 (d = 5, K = 12 needs 3.9 GB per vector);
2. subspace mode: sparse-generator gates with 2-state blocks, dim 1e5 and 1e6;
3. adjoint gradient cost / forward cost for about 50, 200, 800 parameters;
4. our local application against the naive route (dense d^K x d^K gate matrix);
5. small circuits (per-gate overhead): native brickwork, 4 layers, K = 3, 5, 7 at d = 3, and
   64 sparse pair-block generators in subspace mode (dim 1e3, 1e4): forward us per gate
   and fidelity+gradient ms per call (what one L-BFGS iteration costs);
6. ``compile_unitary`` cost per loss evaluation on a 3-qutrit 27 x 27 target.
"""
from __future__ import annotations

import os

# single-threaded BLAS: compare like with like (psi.copy() runs on one core)
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")

import argparse
import time
from typing import Callable

import numpy as np
import scipy.sparse as sp

from circuits.circuit import ParametrizedCircuit
from circuits.gates import DiagonalGate, GeneratorGate, MSGate, TwoLevelRotation
from circuits.layers import NativeLayerSpec, native_brickwork
from circuits.random_circuits import random_hermitian, random_sparse_generator, random_state
from circuits.register import Space, embed_local
from circuits.sparse_gates import SparseGeneratorGate


def best_time(fun: Callable[[], object], repeat: int = 5, min_time: float = 0.05) -> float:
    """Best-of-``repeat`` mean seconds per call (each sample runs at least ``min_time``)."""
    best = np.inf
    for _ in range(repeat):
        n, start = 0, time.perf_counter()
        while True:
            fun()
            n += 1
            el = time.perf_counter() - start
            if el >= min_time:
                break
        best = min(best, el / n)
    return best


def throughput(rng: np.random.Generator, sizes: list[tuple[int, int]]) -> None:
    print("\n## gate time / psi.copy() time (register mode, one state)")
    print(f"{'d':>2} {'K':>3} {'dim':>10} {'copy ms':>8} {'R^jk':>6} {'phase1':>6} {'MS':>6} {'phase2':>6} {'gen2':>6} {'gen3':>6}")
    for d, k in sizes:
        mid = k // 2
        gates = [
            TwoLevelRotation(mid, 0, 1, d, 0.3),
            DiagonalGate((mid,), rng.normal(size=d), d),
            MSGate((mid, mid + 1), 0, 1, d, 0.1),
            DiagonalGate((mid, mid + 1), rng.normal(size=(d, d)), d),
            GeneratorGate((mid, mid + 1), random_hermitian(rng, d * d), d),
            GeneratorGate((mid - 1, mid, mid + 1), random_hermitian(rng, d**3), d),
        ]
        view = random_state(rng, d**k).reshape((1,) + (d,) * k)
        t_copy = best_time(view.copy)
        ratios = []
        for g in gates:
            state = [view.copy()]

            def step(g=g, state=state):
                state[0] = g.apply(state[0], 0.37)

            ratios.append(best_time(step) / t_copy)
        print(f"{d:>2} {k:>3} {d**k:>10} {1e3 * t_copy:>8.2f} " + " ".join(f"{r:>6.1f}" for r in ratios))


def subspace(rng: np.random.Generator) -> None:
    print("\n## subspace mode: sparse generator gate (40% of states in coupled pairs, 20% diagonal)")
    print(f"{'dim':>9} {'build s':>8} {'copy ms':>8} {'apply/copy':>10} {'<G>/copy':>9} {'diag apply/copy':>15}")
    for dim in (10**5, 10**6):
        g = random_sparse_generator(rng, dim, dim // 5, dim // 5)
        t0 = time.perf_counter()
        gate = SparseGeneratorGate(g)
        build = time.perf_counter() - t0
        diag = SparseGeneratorGate(sp.diags(rng.normal(size=dim)))
        psi = random_state(rng, (1, dim))
        t_copy = best_time(psi.copy)
        t_app = best_time(lambda: gate.apply(psi, 0.1))
        t_ov = best_time(lambda: gate.generator_overlap(psi, psi))
        t_dg = best_time(lambda: diag.apply(psi, 0.1))
        print(f"{dim:>9} {build:>8.2f} {1e3 * t_copy:>8.2f} {t_app / t_copy:>10.1f} {t_ov / t_copy:>9.1f} {t_dg / t_copy:>15.1f}")


def gradient_cost(rng: np.random.Generator, k: int, d: int) -> None:
    print(f"\n## adjoint gradient / forward pass (native brickwork, K={k}, d={d})")
    print(f"{'params':>7} {'gates':>6} {'forward ms':>11} {'grad ms':>9} {'ratio':>6}")
    spec = NativeLayerSpec(rotations=((0, 1, 0.0), (1, 2, np.pi / 2)))
    per_layer = 2 * k + (k - 1)
    for target in (50, 200, 800):
        layers = max(1, round(target / per_layer))
        c = native_brickwork(k, d, layers, spec)
        p = rng.normal(size=c.n_params)
        psi, phi = random_state(rng, d**k), random_state(rng, d**k)
        t_f = best_time(lambda: c.apply(p, psi), repeat=3)
        t_g = best_time(lambda: c.overlap_and_gradient(p, psi, phi), repeat=3)
        print(f"{c.n_params:>7} {len(c):>6} {1e3 * t_f:>11.2f} {1e3 * t_g:>9.2f} {t_g / t_f:>6.2f}")


def naive(rng: np.random.Generator, d: int, ks: list[int]) -> None:
    print(f"\n## naive dense d^K x d^K gate matrix vs local application (d={d}, 2-local generator gate)")
    print(f"{'K':>3} {'dim':>6} {'dense ms':>9} {'local ms':>9} {'dense/local':>11}")
    for k in ks:
        gate = GeneratorGate((1, 2), random_hermitian(rng, d * d), d)
        full = embed_local(gate.unitary(0.3), gate.qudits, k, d)
        psi = random_state(rng, d**k)
        view = psi.reshape((1,) + (d,) * k)
        t_dense = best_time(lambda: full @ psi)
        t_local = best_time(lambda: gate.apply(view, 0.3))
        print(f"{k:>3} {d**k:>6} {1e3 * t_dense:>9.3f} {1e3 * t_local:>9.3f} {t_dense / t_local:>11.1f}")


def small_circuits(rng: np.random.Generator) -> None:
    print("\n## small circuits: forward us/gate, fidelity+gradient ms/call, gradient/forward")
    print(f"{'circuit':>24} {'dim':>6} {'gates':>6} {'fwd us/gate':>12} {'fid+grad ms':>12} {'ratio':>6}")
    cases = []
    for k in (3, 5, 7):
        cases.append((f"brickwork K={k} d=3", native_brickwork(k, 3, 4), 3**k))
    for dim in (10**3, 10**4):
        space = Space.subspace(dim)
        c = ParametrizedCircuit(space)
        for i in range(64):
            c.append(SparseGeneratorGate(random_sparse_generator(rng, dim, dim // 5, dim // 5)), i)
        cases.append(("64 sparse pair gates", c, dim))
    for name, c, dim in cases:
        p = rng.normal(size=c.n_params)
        psi, phi = random_state(rng, dim), random_state(rng, dim)
        t_f = best_time(lambda: c.apply(p, psi), repeat=3)
        t_g = best_time(lambda: c.fidelity_and_gradient(p, psi, phi), repeat=3)
        print(f"{name:>24} {dim:>6} {len(c):>6} {1e6 * t_f / len(c):>12.1f} {1e3 * t_g:>12.2f} {t_g / t_f:>6.2f}")


def compile_cost(rng: np.random.Generator) -> None:
    print("\n## compile_unitary inner loop: one loss+gradient on the batch of 27 basis states (K=3, d=3)")
    print(f"{'layers':>7} {'gates':>6} {'ms/eval':>8}")
    basis = np.eye(27, dtype=np.complex128)
    images = np.ascontiguousarray(np.linalg.qr(random_state(rng, (27, 27)))[0].T)
    for layers in (6, 9):
        c = native_brickwork(3, 3, layers)
        p = rng.normal(size=c.n_params)
        t_g = best_time(lambda: c.fidelity_and_gradient(p, basis, images), repeat=3)
        print(f"{layers:>7} {len(c):>6} {1e3 * t_g:>8.2f}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="small sizes only")
    ap.add_argument("--small", action="store_true", help="only the small-circuit sections (5, 6)")
    args = ap.parse_args()
    rng = np.random.default_rng(0)
    if args.small:
        small_circuits(rng)
        compile_cost(rng)
        return
    if args.quick:
        sizes = [(3, 8), (5, 6)]
    else:
        sizes = [(3, k) for k in range(8, 13)] + [(5, k) for k in range(8, 12)]
    throughput(rng, sizes)
    subspace(rng)
    gradient_cost(rng, 6 if args.quick else 10, 3)
    naive(rng, 3, [4, 5, 6, 7])
    small_circuits(rng)
    compile_cost(rng)


if __name__ == "__main__":
    main()
