"""Native compilation: seconds per block and native gates per block, d = 2, 3, 5, 7.

    python benchmarks/bench_compile.py [--repeat 3] [--fit]

For every distinct term block of an 8-site chain (boundary and interior hopping, mass, electric)
and each gate set (controlled rotation, light-shift, Molmer-Sorensen), prints the median time to
construct the exact block (no cache), its two- and single-qudit gate counts and its process
fidelity against scipy.linalg.expm. The last column compares the hopping blocks' two-qudit
counts with the template fits shipped before exact blocks (commit e360a21: native brickwork
fitted at theta w = pi/4, 18-22 two-qudit gates per interior block at d = 3). ``--fit`` also
times ``fluxline fit``'s work for a 6-site d = 5 chain from an empty cache.
"""

from __future__ import annotations

import argparse
import os
import statistics
import tempfile
import time

from fluxline_threads import single_threaded_blas
from circuits.native import NativeGateSet, block_fidelity, exponential_block
from lgt.hamiltonian import local_terms
from lgt.model import ModelParams
from lgt.variational.native_cost import block_kind

#: two-qudit gates of the previous template fits (layers x bonds of lgt/data/compiled_blocks.json
#: at commit e360a21; d = 3 truncated, light-shift entangler)
TEMPLATE_TWO_QUDIT = {(3, "hopping-interior"): "18-22", (3, "hopping-left"): "4-6", (3, "hopping-right"): "4-6"}
GATE_SETS = {"CR": NativeGateSet("controlled_rotation"), "LS": NativeGateSet("light_shift", (0, 1)),
             "MS": NativeGateSet("ms", (0, 1))}


def blocks(d: int, link: str):
    params = ModelParams(sites=8, levels=d, link=link, mass=1.0)
    seen = {}
    for t in local_terms(params):
        seen.setdefault(block_kind(t.kind, t.index, params), t)
    return seen


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--fit", action="store_true")
    args = parser.parse_args()
    print(f"load average {os.getloadavg()[0]:.1f} (2-core machine)")
    print(f"{'d':>2} {'link':<12} {'block':<17} {'set':<3} {'seconds':>8} {'2q':>4} {'1q':>5} {'1-F':>8} {'template 2q':>11}")
    with single_threaded_blas():
        for d in (2, 3, 5, 7):
            for link in ("truncated", "quantum-link"):
                if link == "truncated" and d % 2 == 0:
                    continue
                for kind, term in blocks(d, link).items():
                    if kind in ("electric", "mass-boundary"):
                        continue
                    for name, gs in GATE_SETS.items():
                        times = []
                        for _ in range(args.repeat):
                            t0 = time.perf_counter()
                            block = exponential_block(term.matrix, len(term.qudits), d, gs)
                            times.append(time.perf_counter() - t0)
                        two = sum(op.gate.kind == "two" for op in block.ops)
                        fid = block_fidelity(block, term.matrix, (0.83,))
                        ref = TEMPLATE_TWO_QUDIT.get((d, kind), "") if link == "truncated" and name == "LS" else ""
                        print(f"{d:>2} {link:<12} {kind:<17} {name:<3} {statistics.median(times):>8.4f} {two:>4} "
                              f"{len(block.ops) - two:>5} {1 - fid:>8.1e} {ref:>11}")
    from circuits.hardware import load_profile
    from lgt.variational import native_cost

    native_cost._shipped = lambda: {}  # measure from nothing: no shipped blocks either
    gs = load_profile().gate_set()
    for d, link in ((2, "quantum-link"), (3, "truncated"), (5, "truncated"), (5, "quantum-link"), (7, "truncated")):
        with tempfile.TemporaryDirectory() as tmp:
            os.environ["FLUXLINE_CACHE_DIR"] = tmp
            t0 = time.perf_counter()
            native_cost.compile_blocks(ModelParams(sites=8, levels=d, link=link, mass=1.0), gs, progress=False)
            print(f"all blocks of an 8-site chain, d = {d} {link}, no cache, expm check included: "
                  f"{time.perf_counter() - t0:.2f} s")
    if args.fit:
        from lgt.variational.workflow import run_fit

        with tempfile.TemporaryDirectory() as tmp:
            os.environ["FLUXLINE_CACHE_DIR"] = tmp
            config = {"model": {"sites": 6, "levels": 5, "link": "quantum-link", "mass": 0.5},
                      "initial": {"kind": "vacuum"},
                      "variational": {"layers": 2, "dt": 0.1, "t_final": 0.5, "tolerance": 0.01}}
            t0 = time.perf_counter()
            result = run_fit(config)
            print(f"fit, 6 sites, d = 5 quantum-link, empty cache and no shipped blocks: {time.perf_counter() - t0:.1f} s "
                  f"(fit {result.timings['fit']:.1f} s)")


if __name__ == "__main__":
    main()
