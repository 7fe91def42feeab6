"""Memory and time estimates of an MPS run from N, d and the bond dimension (before any work).

Bond dimensions are capped by χ and by the register itself: χ_b ≤ min(χ, d^b, d^(K−b)).
Memory: the MPS (Σ_b χ_b d χ_{b+1} complex numbers), a few gate workspaces of χ² d³ complex
numbers, the cached gates and the interpreter baseline.

Time (a realistic estimate, not a bound): the run's single-core CPU seconds, i.e. its wall
time on an idle machine. A quench from a product state starts at χ = 1; the bond dimension is
modelled as growing like χ(t) = e^{t/τ} (τ = :data:`GROWTH_TIME`, entanglement growing linearly
in t) until it meets the cap min(χ, d^b, d^(K−b), e^{s·min(b, K−b)}) of each bond, s =
:data:`ENTROPY_PER_LINK` (a quench saturates the entanglement of a bond at an extensive value
set by the distance to the nearer chain end, below the register's own bound ln d per link).
One 3-link gate costs
``GATE_OVERHEAD + GATE_CUBIC · (d/3)⁴ · χ³`` CPU seconds (fit to the measured cost of saturated
gates, χ = 8…128, d = 3); a fourth-order step applies 7 layers per group (21 layers, 7·(K−2)
gates; second order 4/3·(K−2) per step plus one layer per stored interval), and each stored
time costs :data:`MEASURE_GATES` gate-equivalents per link (canonical sweep, MPO energy, leakage
and echo). The constants are calibrated on this project's shared development machine (how:
docs/mps.md "Guards"); replace them with your machine's. On a shared machine multiply by the
load factor (the estimate printed with the progress bar does so).
"""

from __future__ import annotations

import numpy as np

from lgt.resources import BASELINE_BYTES

#: CPU seconds of one 3-link gate independent of χ (Python and call overhead); measured, d = 3.
GATE_OVERHEAD = 6.0e-4
#: CPU seconds per χ³ of one 3-link gate at d = 3, fitted together with GROWTH_TIME and
#: ENTROPY_PER_LINK to the 14 MPS runs of docs/mps.md "Measured" (N = 24, 50, 100; χ = 64, 128;
#: t = 5, 10; rms error of the estimate a factor 1.29). Consistent with one isolated saturated
#: gate (4.7e-8 at χ = 128, 7.6e-8 at χ = 64, where the quadratic parts still count).
GATE_CUBIC = 5.7e-8
#: Growth time τ of the bond dimension, χ(t) ≈ e^{t/τ}, lattice time units (fit, docs/mps.md).
GROWTH_TIME = 0.99
#: Saturated entanglement per link of distance to the nearer chain end, nats (fit, docs/mps.md;
#: below ln 3 = 1.10, the register's bound at d = 3). Without it the model cannot tell short
#: chains, whose bonds near the ends never fill χ, from long ones, where almost every bond does.
ENTROPY_PER_LINK = 0.49
#: Measurement cost per stored time, in gate-equivalents per link (fit, docs/mps.md).
MEASURE_GATES = 0.5
#: Merged layers per Trotter step, by order (Suzuki's five second-order stages share 4 layers).
LAYERS_PER_STEP = {2: 4, 4: 20}


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


def gate_seconds(n_links: int, d: int, chi: int, t: float, start_chi: float = 1.0) -> float:
    """Mean CPU seconds of one gate at time ``t`` (bond profile grown from ``start_chi``)."""
    b = np.arange(1, n_links)
    saturated = np.exp(np.minimum(np.minimum(b, n_links - b) * ENTROPY_PER_LINK, 60.0))
    cap = np.minimum(bond_profile(n_links, d, chi), np.maximum(saturated, start_chi))
    grown = np.minimum(cap, start_chi * np.exp(min(t / GROWTH_TIME, 60.0)))
    return GATE_OVERHEAD + GATE_CUBIC * (d / 3.0) ** 4 * float(np.mean(grown ** 3))


def estimate_mps_seconds(n_links: int, d: int, chi: int, times: np.ndarray, max_step: float,
                         order: int = 4, start_chi: float = 1.0) -> float:
    """Estimated single-core CPU seconds of an evolution storing ``times`` (see module docstring).

    ``start_chi``: bond dimension of the initial state (1 for product states, the DMRG
    bond dimension for ``kind = "ground"``).
    """
    times = np.asarray(times, dtype=float)
    windows = max(n_links - 2, 1)
    total, t_prev = 0.0, 0.0
    for t in times:
        gap = t - t_prev
        if gap > 0:
            n = max(1, int(np.ceil(gap / max_step - 1e-9)))
            layers = n * LAYERS_PER_STEP[order] + 1
            mid = t_prev + 0.5 * gap
            total += layers * windows / 3.0 * gate_seconds(n_links, d, chi, mid, start_chi)
        total += MEASURE_GATES * n_links * gate_seconds(n_links, d, chi, t, start_chi)
        t_prev = t
    return float(total)


__all__ = ["estimate_mps_memory", "estimate_mps_seconds", "gate_seconds", "bond_profile",
           "GATE_OVERHEAD", "GATE_CUBIC", "GROWTH_TIME", "ENTROPY_PER_LINK", "MEASURE_GATES"]
