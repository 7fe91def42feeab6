"""Speed of the noisy simulators and of ``fluxline predict`` (run by hand:
``python benchmarks/bench_noise.py [--predict]``).

1. density matrix: seconds per circuit for K = 5, 7 qutrits (4 native brickwork layers, the
   built-in illustrative noise model, default hardware profile durations and fidelities);
2. trajectories: seconds per trajectory for K = 9, 11 qutrits (same circuits), batches of 32;
3. ``--predict``: a full ``fluxline predict`` of a 6-site d = 3 quench, 50 steps, 1000 shots per
   step (fit included), wall seconds, split into fit and simulate + mitigate.
Each number is the median of ``--repeat`` runs (K = 7 density matrix: one run); the machine load (``os.getloadavg``) is printed.
"""
from __future__ import annotations

import argparse
import os
import statistics
import time

import numpy as np

from circuits.density import simulate_density
from circuits.hardware import load_profile
from circuits.layers import build_layers, native_layer_builder
from circuits.noise_model import NoiseModel
from circuits.noise_program import noisy_program
from circuits.register import Space, product_state
from circuits.trajectories import run_batch


def _program(K: int, d: int = 3, layers: int = 4):
    space = Space.qudits(K, d)
    circuit = build_layers(space, layers, native_layer_builder(space, None))
    rng = np.random.default_rng(0)
    params = rng.uniform(-1, 1, circuit.n_params)
    profile = load_profile()
    spec = lambda g: (profile.spec(g).duration_us, profile.spec(g).fidelity)  # noqa: E731
    return noisy_program(circuit, params, NoiseModel.default(), spec), len(circuit.ops)


def _median(fun, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fun()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--predict", action="store_true", help="also time a full 6-site, 50-step predict")
    args = ap.parse_args()
    print(f"load average {os.getloadavg()}, {os.cpu_count()} cores")
    for K in (5, 7):
        prog, n_gates = _program(K)
        psi0 = product_state([1] * K, 3)
        s = _median(lambda: simulate_density(prog, psi0), args.repeat if K < 7 else 1)
        print(f"density matrix  K = {K:2d} qutrits: {n_gates:4d} gates, {len(prog.events):5d} events, {s:8.3f} s per circuit")
    for K in (9, 11):
        prog, n_gates = _program(K)
        psi0 = product_state([1] * K, 3)
        rng = np.random.default_rng(1)
        s = _median(lambda: run_batch(prog, psi0, 32, rng), args.repeat)
        print(f"trajectories    K = {K:2d} qutrits: {n_gates:4d} gates, {len(prog.events):5d} events, "
              f"{s / 32 * 1e3:8.2f} ms per trajectory (batches of 32)")
    if args.predict:
        from lgt.lab.workflow import run_predict

        config = {
            "model": {"sites": 6, "hopping": 1.0, "mass": 0.5, "coupling": 1.0, "levels": 3},
            "initial": {"kind": "vacuum"},
            "variational": {"family": "symmetric", "layers": 3, "dt": 0.1, "t_final": 5.0, "tolerance": 0.01,
                            "compile": False, "compare_families": False},
            "lab": {"shots": 1000},
        }
        t0 = time.perf_counter()
        report, _ = run_predict(config)
        wall = time.perf_counter() - t0
        tm = report["timings"]
        print(f"predict 6 sites, 50 steps, 1000 shots/step: {wall:.1f} s wall "
              f"(fit {tm['fit_seconds']:.1f} s, simulate + mitigate {tm['simulate_and_mitigate_seconds']:.1f} s)")


if __name__ == "__main__":
    main()
