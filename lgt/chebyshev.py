"""Chebyshev propagation of ψ(t) = e^{−iHt} ψ for real symmetric sparse H.

Tal-Ezer & Kosloff, J. Chem. Phys. 81, 3967 (1984): with H mapped onto [−1, 1] by
H = c + r X, e^{−iHt} = e^{−ict} Σ_k a_k T_k(X), a_0 = J_0(rt), a_k = 2(−i)^k J_k(rt), and the
T_k(X)ψ from the three-term recurrence. The Bessel coefficients fall off faster than
exponentially once k > rt, so a step costs about rt + O(log 1/tol) products with H — the least
of the polynomial methods for a known spectral interval. The interval comes from Gershgorin
discs (rigorous for any vector; no eigenvalue estimate that could be exceeded).
"""

from __future__ import annotations

from typing import Callable

import numpy as np
import scipy.sparse as sp
from scipy.linalg.blas import zgemm
from scipy.special import jv

#: Chebyshev vectors gathered before they are folded into the outputs (one BLAS product),
#: and the most memory that buffer may take (large states use fewer columns).
BUFFER = 16
BUFFER_BYTES = 256 * 2 ** 20
#: Coefficients below this (relative to the sum's norm) end the series.
DEFAULT_TOL = 1e-14


def gershgorin_interval(H: sp.spmatrix) -> tuple[float, float]:
    """[E_min, E_max] bounds of a real symmetric sparse matrix from its Gershgorin discs."""
    H = sp.csr_matrix(H)
    diag = H.diagonal()
    radius = np.asarray(abs(H).sum(axis=1)).ravel() - np.abs(diag)
    return float(np.min(diag - radius)), float(np.max(diag + radius))


def chebyshev_coefficients(r_t: float, tol: float = DEFAULT_TOL) -> np.ndarray:
    """a_k / (−i)^k = (J_0, 2J_1, 2J_2, …) up to the last term above ``tol``."""
    n = int(r_t + 12.0 * max(r_t, 1.0) ** (1.0 / 3.0) + 30)
    k = np.arange(n)
    a = jv(k, r_t) * np.where(k == 0, 1.0, 2.0)
    above = np.flatnonzero(np.abs(a) > tol)
    return a[: (above[-1] + 2 if above.size else 2)]


class ChebyshevPropagator:
    """Fixed-step propagator e^{−iH dt}.

    Parameters
    ----------
    apply_real : callable
        x ↦ H x for real x of shape (dim, k) (e.g. a threaded sparse product).
    interval : (E_min, E_max)
        Bounds of the spectrum of H (see :func:`gershgorin_interval`).
    dt : float
        Step, lattice time units.
    """

    def __init__(self, apply_real: Callable[[np.ndarray], np.ndarray], interval: tuple[float, float],
                 dt: float, tol: float = DEFAULT_TOL) -> None:
        lo, hi = interval
        self.apply_real = apply_real
        self.center = 0.5 * (hi + lo)
        self.radius = max(0.5 * (hi - lo), 1e-300) * (1.0 + 1e-9)
        self.dt = float(dt)
        self.tol = tol
        self.coefficients = chebyshev_coefficients(self.radius * self.dt, tol)

    @property
    def products_per_step(self) -> int:
        """Number of H products one step costs."""
        return len(self.coefficients) - 1

    def _scaled(self, v: np.ndarray) -> np.ndarray:
        """X v = (H − c) v / r for complex v (H real, applied to the (dim, 2) real view)."""
        n = v.shape[0]
        real = v.view(np.float64).reshape(n, 2)
        hv = self.apply_real(real)
        hv -= self.center * real
        hv *= 1.0 / self.radius
        return hv.reshape(-1).view(np.complex128)

    def block(self, psi: np.ndarray, offsets: np.ndarray) -> np.ndarray:
        """e^{−iH t_j} ψ for every t_j in ``offsets`` (ascending, ≥ 0) from one recurrence.

        The Chebyshev vectors T_k(X)ψ do not depend on t, so all outputs share them: the cost
        is about r·max(t) + O(log 1/tol) products with H for the whole block, instead of that
        many per stored time. Returns shape (len(offsets), dim).
        """
        psi = np.ascontiguousarray(psi, dtype=np.complex128)
        t = np.asarray(offsets, dtype=float)
        n_terms = len(chebyshev_coefficients(self.radius * float(t.max()), self.tol))
        k = np.arange(n_terms)
        coeff = jv(k[None, :], self.radius * t[:, None]) * np.where(k == 0, 1.0, 2.0)[None, :]
        coeff = coeff * ((-1j) ** (k % 4))[None, :]  # (n_times, n_terms)
        # T_k ψ are collected in a buffer of BUFFER columns; each full buffer is folded into the
        # outputs with one BLAS product acc += buffer @ coeff[:, block].T (acc = outputs as a
        # Fortran (dim, n_times) array), so the outputs are swept once per BUFFER terms
        acc = np.zeros((psi.size, t.size), dtype=np.complex128, order="F")
        width = max(1, min(BUFFER, n_terms, BUFFER_BYTES // (16 * max(psi.size, 1))))
        buf = np.empty((psi.size, width), dtype=np.complex128, order="F")
        coeff_t = np.asfortranarray(coeff.T)  # (n_terms, n_times)
        filled, first = 0, 0

        def push(vec: np.ndarray) -> None:
            nonlocal filled, first, acc
            buf[:, filled] = vec
            filled += 1
            if filled == width or first + filled == n_terms:
                acc = zgemm(1.0, buf[:, :filled], coeff_t[first:first + filled], beta=1.0, c=acc,
                            overwrite_c=True)
                first += filled
                filled = 0

        push(psi)
        prev = psi
        if n_terms > 1:
            cur = self._scaled(psi)
            push(cur)
            for _ in range(2, n_terms):
                nxt = self._scaled(cur)
                nxt *= 2.0
                nxt -= prev
                prev, cur = cur, nxt
                push(cur)
        out = acc.T
        out *= np.exp(-1j * self.center * t)[:, None]
        return out

    def step(self, psi: np.ndarray) -> np.ndarray:
        """e^{−iH dt} ψ."""
        psi = np.ascontiguousarray(psi, dtype=np.complex128)
        a = self.coefficients
        prev = psi
        out = a[0] * psi
        if len(a) > 1:
            cur = self._scaled(psi)
            out += (-1j) * a[1] * cur
            phase = -1j
            for k in range(2, len(a)):
                nxt = self._scaled(cur)
                nxt *= 2.0
                nxt -= prev
                prev, cur = cur, nxt
                phase *= -1j
                out += (phase * a[k]) * cur
        out *= np.exp(-1j * self.center * self.dt)
        return out
