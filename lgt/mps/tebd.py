"""Real-time evolution of a :class:`~lgt.mps.chain.ChainMPS` by 3-link gates (TEBD-type).

Every term of :func:`lgt.hamiltonian.local_terms` acts on at most three contiguous links, so
H = Σ_s h_s with h_s a dense (d³, d³) operator on the window of links s, s+1, s+2 (each term
added to the window that starts at its first link, or the last window). Windows s and s + 3
do not overlap, so the three groups G_r = Σ_{s ≡ r mod 3} h_s each exponentiate exactly
into a layer of disjoint gates. One step is Suzuki's fourth-order product of second-order
symmetric products S₂(τ) = e^{−iG₀τ/2} e^{−iG₁τ/2} e^{−iG₂τ} e^{−iG₁τ/2} e^{−iG₀τ/2}
(Suzuki, Phys. Lett. A 146, 319 (1990)); consecutive layers of one group are merged.
TEBD grows the bond dimension from a product state by itself (Vidal, PRL 93, 040502 (2004)),
so no warm-up algorithm is needed.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np

from lgt.hamiltonian import local_terms
from lgt.model import ModelParams
from lgt.mps.chain import ChainMPS, Truncation

#: Suzuki's fourth-order weight p = 1 / (4 − 4^{1/3}).
SUZUKI_P = 1.0 / (4.0 - 4.0 ** (1.0 / 3.0))
ORDERS = (2, 4)


def window_hamiltonians(params: ModelParams) -> list[np.ndarray]:
    """h_s (d³, d³) for s = 0..K−3: every local term embedded in one 3-link window; Σ_s h_s = H."""
    K, d = params.n_links, params.levels
    if K < 3:
        raise ValueError("the gate evolution needs at least 3 links (N ≥ 4)")
    windows = [np.zeros((d ** 3, d ** 3)) for _ in range(K - 2)]
    for term in local_terms(params):
        first = term.qudits[0]
        s = min(first, K - 3)
        before = first - s
        after = 3 - before - len(term.qudits)
        windows[s] += np.kron(np.kron(np.eye(d ** before), term.matrix), np.eye(d ** after))
    return windows


def layer_sequence(order: int, tau: float, substeps: int) -> list[tuple[int, float]]:
    """(group, time) layers of ``substeps`` steps of length τ, adjacent equal groups merged."""
    def s2(t: float) -> list[tuple[int, float]]:
        return [(0, t / 2), (1, t / 2), (2, t), (1, t / 2), (0, t / 2)]

    if order == 2:
        one = s2(tau)
    elif order == 4:
        p = SUZUKI_P
        one = s2(p * tau) + s2(p * tau) + s2((1 - 4 * p) * tau) + s2(p * tau) + s2(p * tau)
    else:
        raise ValueError(f"order must be one of {ORDERS}")
    merged: list[tuple[int, float]] = []
    for group, t in one * substeps:
        if merged and merged[-1][0] == group:
            merged[-1] = (group, merged[-1][1] + t)
        else:
            merged.append((group, t))
    return merged


class GateEvolver:
    """Applies e^{−iHt} to a ChainMPS by the layered gates above (lattice time units)."""

    def __init__(self, params: ModelParams, trunc: Truncation, order: int = 4, max_step: float = 0.05) -> None:
        self.params = params
        self.trunc = trunc
        self.order = order
        self.max_step = max_step
        self._eig = [np.linalg.eigh(h) for h in window_hamiltonians(params)]
        self.windows = len(self._eig)
        self._gate = lru_cache(maxsize=4096)(self._make_gate)
        self.rightward = True

    def _make_gate(self, s: int, t: float) -> np.ndarray:
        lam, V = self._eig[s]
        return (V * np.exp(-1j * t * lam)[None, :]) @ V.T

    def substeps(self, interval: float) -> int:
        return max(1, int(np.ceil(interval / self.max_step - 1e-9)))

    def evolve(self, psi: ChainMPS, interval: float) -> None:
        """ψ ← e^{−iH·interval} ψ in place (Trotter steps ≤ ``max_step``)."""
        if interval <= 0:
            return
        n = self.substeps(interval)
        for group, t in layer_sequence(self.order, interval / n, n):
            sites = [s for s in range(self.windows) if s % 3 == group]
            if not sites:
                continue
            if self.rightward:
                for s in sites:
                    psi.move_center(max(psi.center, s) if psi.center <= s + 2 else s + 2)
                    psi.apply_three_site(s, self._gate(s, round(t, 15)), self.trunc, True)
            else:
                for s in reversed(sites):
                    psi.move_center(min(psi.center, s + 2) if psi.center >= s else s)
                    psi.apply_three_site(s, self._gate(s, round(t, 15)), self.trunc, False)
            self.rightward = not self.rightward


__all__ = ["GateEvolver", "window_hamiltonians", "layer_sequence", "ORDERS", "SUZUKI_P"]
