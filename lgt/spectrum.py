"""Exact low-lying spectrum in the physical subspace (dense below a size threshold, Lanczos above)."""

from __future__ import annotations

import time
from typing import Callable

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from scipy.linalg import eigh_tridiagonal

#: Below this dimension the full dense diagonalisation is used.
DENSE_THRESHOLD = 2500
#: Rounds of deflation that look for missed copies of degenerate levels.
MAX_DEFLATIONS = 4
#: Relative tolerance for a level found after deflation to count as inside the window.
DEGENERACY_TOL = 1e-9
#: Relative gap below which two found levels count as degenerate (a symmetry is at work).
DEGENERATE_GAP = 1e-8
#: Lanczos steps of the probe for a missed level (a small fraction of one ARPACK call).
PROBE_STEPS = 30


def lowest_eigenpairs(H: sp.spmatrix | np.ndarray, count: int = 1,
                      dense_threshold: int = DENSE_THRESHOLD, tol: float = 1e-12,
                      progress: Callable[[str], None] | None = None) -> tuple[np.ndarray, np.ndarray]:
    """The ``count`` lowest eigenvalues (ascending, degenerate ones repeated) and eigenvectors.

    One ARPACK call (implicitly restarted Lanczos) for the ``count`` lowest pairs. Lanczos on one
    start vector sees each eigenspace through a single direction, so copies of a degenerate level
    can be missed. Extra deflated rounds are run only when a copy may be missing: when the levels
    found contain a degeneracy (a symmetry is at work), or when a short Lanczos probe
    (:data:`PROBE_STEPS` products) on H restricted to the complement of the found vectors has a
    Ritz value — an upper bound of that restriction's lowest level — below the highest level found.

    Parameters
    ----------
    H : Hermitian matrix (sparse or dense), lattice energy units.
    count : number of levels (clipped to the dimension).
    dense_threshold : use ``numpy.linalg.eigh`` when ``dim <= dense_threshold``.
    progress : optional callable receiving one line per Lanczos round (for long runs).

    Returns
    -------
    energies : (k,) float array
    vectors : (dim, k) array, orthonormal columns
    """
    n = H.shape[0]
    count = int(min(max(count, 1), n))
    if n <= dense_threshold or count >= n - 1:
        dense = H.toarray() if sp.issparse(H) else np.asarray(H)
        w, v = np.linalg.eigh(dense)
        return w[:count], v[:, :count]
    say = progress or (lambda line: None)
    t0 = time.perf_counter()
    w, v = _lanczos(H, count, tol, seed=12345)
    say(f"spectrum: {count} levels of a {n}-state matrix by Lanczos in {time.perf_counter() - t0:.1f} s")
    if not _copy_may_be_missing(H, w, v):
        return w, v
    # deflate what was found (shift it above the window) and search again until no further
    # level falls inside
    for attempt in range(MAX_DEFLATIONS):
        shift = 2.0 * (w[-1] - w[0]) + 2.0 * max(1.0, float(np.max(np.abs(w))))
        found = v

        def deflated(x: np.ndarray, found: np.ndarray = found, shift: float = shift) -> np.ndarray:
            return H @ x + shift * (found @ (found.conj().T @ x))

        op = spla.LinearOperator(H.shape, matvec=deflated, matmat=deflated, dtype=H.dtype)
        w2, v2 = _lanczos(op, count, tol, seed=54321 + attempt, orthogonal_to=found)
        inside = w2 <= w[-1] + DEGENERACY_TOL * max(1.0, abs(w[-1]))
        say(f"spectrum: deflated round {attempt + 1}: {int(inside.sum())} more level(s) in the window "
            f"({time.perf_counter() - t0:.1f} s)")
        if not np.any(inside):
            break
        w = np.concatenate([w, w2[inside]])
        v = np.concatenate([v, v2[:, inside]], axis=1)
        order = np.argsort(w, kind="stable")[:count]
        w, v = w[order], v[:, order]
    return w, v


def _copy_may_be_missing(H, w: np.ndarray, v: np.ndarray) -> bool:
    """True when the found levels are degenerate or a short probe finds a level below w[-1]."""
    scale = max(1.0, float(np.max(np.abs(w))))
    if w.size > 1 and np.min(np.diff(w)) <= DEGENERATE_GAP * scale:
        return True
    n = H.shape[0]
    x = np.random.default_rng(777).standard_normal(n).astype(H.dtype)
    x -= v @ (v.conj().T @ x)

    def restricted(y: np.ndarray) -> np.ndarray:
        y = y - v @ (v.conj().T @ y)
        hy = H @ y
        return hy - v @ (v.conj().T @ hy)

    lowest = _lanczos_lowest(restricted, x, min(PROBE_STEPS, n - w.size - 1))
    return lowest < w[-1] + DEGENERACY_TOL * scale


def lanczos_tridiagonal(apply: Callable[[np.ndarray], np.ndarray], x: np.ndarray,
                        steps: int) -> tuple[np.ndarray, np.ndarray]:
    """Plain three-vector Lanczos (no reorthogonalisation) from ``x``: the diagonal α and the
    off-diagonal β of the tridiagonal matrix (β[-1] is the last residual norm). Lost
    orthogonality only repeats converged Ritz values; the extreme ones stay inside the spectrum."""
    x = x / np.linalg.norm(x)
    prev = np.zeros_like(x)
    alpha, beta = [], []
    b = 0.0
    for _ in range(max(1, steps)):
        y = apply(x) - b * prev
        a = float(np.vdot(x, y).real)
        y -= a * x
        b = float(np.linalg.norm(y))
        alpha.append(a)
        beta.append(b)
        if b < 1e-12:
            break
        prev, x = x, y / b
    return np.array(alpha), np.array(beta)


def _lanczos_lowest(apply: Callable[[np.ndarray], np.ndarray], x: np.ndarray, steps: int) -> float:
    """Lowest Ritz value of ``steps`` Lanczos steps from ``x`` (an upper bound of the lowest
    eigenvalue of the operator on the Krylov space's span)."""
    alpha, beta = lanczos_tridiagonal(apply, x, steps)
    return float(eigh_tridiagonal(alpha, beta[:-1], eigvals_only=True)[0])


def _lanczos(H, count: int, tol: float, seed: int,
             orthogonal_to: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """ARPACK's implicitly restarted Lanczos for the ``count`` lowest pairs, ascending."""
    n = H.shape[0]
    ncv = min(n, max(2 * count + 1, count + 32))
    v0 = np.random.default_rng(seed).standard_normal(n).astype(H.dtype)
    if orthogonal_to is not None:
        v0 -= orthogonal_to @ (orthogonal_to.conj().T @ v0)
    w, v = spla.eigsh(H, k=count, which="SA", tol=tol, ncv=ncv, v0=v0)
    order = np.argsort(w)
    return w[order], v[:, order]


def lowest_levels(H: sp.spmatrix | np.ndarray, count: int = 1, **kwargs) -> np.ndarray:
    """Ascending lowest ``count`` eigenvalues of H (see :func:`lowest_eigenpairs`)."""
    return lowest_eigenpairs(H, count, **kwargs)[0]


def gaps(energies: np.ndarray) -> np.ndarray:
    """E_k − E_0 for k ≥ 1."""
    energies = np.asarray(energies)
    return energies[1:] - energies[0]
