"""Memory and time estimates of an MPS run from N, d and the bond dimension (before any work).

Bond dimensions are capped by χ and by the register itself: χ_b ≤ min(χ, d^b, d^(K−b)).
Memory: the MPS (Σ_b χ_b d χ_{b+1} complex numbers), a few gate workspaces of χ² d³ complex
numbers, the cached gates and the interpreter baseline. Time: one 3-link gate costs about
``GATE_FLOPS`` · (d χ)² · d² χ floating-point operations (two truncated Gram splits dominate); a Suzuki
fourth-order step applies about (20/3)·K gates (second order: (4/3)·K). ``FLOP_RATE`` is a
measured single-core throughput on this project's development machine (replace with yours).
"""

from __future__ import annotations

import numpy as np

from lgt.resources import BASELINE_BYTES

#: Effective flops per (dχ)²·d²χ of one gate (two Gram splits and the contractions), measured at χ = 64.
GATE_FLOPS = 14.0
#: Flop rate one process got on the shared 2-core development machine (load ≈ 10); illustrative.
FLOP_RATE = 2.0e9
#: Gates per Trotter step per link, by order (layer count of the merged product / 3).
GATES_PER_LINK = {2: 4.0 / 3.0, 4: 20.0 / 3.0}


def bond_profile(n_links: int, d: int, chi: int) -> np.ndarray:
    """Largest possible bond dimension of each internal bond b = 1..K−1."""
    b = np.arange(1, n_links)
    cap = np.minimum(b, n_links - b).astype(float) * np.log(d)
    return np.minimum(float(chi), np.exp(np.minimum(cap, 60.0)))


def estimate_mps_memory(n_links: int, d: int, chi: int) -> int:
    """Peak bytes of an MPS evolution (state, two copies for measurement/reference, workspaces)."""
    prof = np.concatenate([[1.0], bond_profile(n_links, d, chi), [1.0]])
    state = float(np.sum(prof[:-1] * d * prof[1:])) * 16
    work = 8 * float(prof.max()) ** 2 * d ** 3 * 16
    gates = (n_links - 2) * 12 * d ** 6 * 16
    return int(3 * state + work + gates + BASELINE_BYTES)


def estimate_mps_seconds(n_links: int, d: int, chi: int, steps: int, order: int = 4) -> float:
    """Rough wall seconds of ``steps`` Trotter steps at the full bond profile (an upper estimate)."""
    prof = bond_profile(n_links, d, chi)
    per_gate = GATE_FLOPS * float(np.mean(prof ** 3)) * d ** 4
    return float(steps * GATES_PER_LINK[order] * n_links * per_gate / FLOP_RATE)


__all__ = ["estimate_mps_memory", "estimate_mps_seconds", "bond_profile", "GATE_FLOPS", "FLOP_RATE"]
