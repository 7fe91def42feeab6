"""Exact low-lying spectrum in the physical subspace (dense below a size threshold, Lanczos above)."""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

#: Below this dimension the full dense diagonalisation is used.
DENSE_THRESHOLD = 2500
#: Rounds of deflation that look for missed copies of degenerate levels.
MAX_DEFLATIONS = 4
#: Relative tolerance for a level found after deflation to count as inside the window.
DEGENERACY_TOL = 1e-9


def lowest_eigenpairs(H: sp.spmatrix | np.ndarray, count: int = 1,
                      dense_threshold: int = DENSE_THRESHOLD, tol: float = 1e-12) -> tuple[np.ndarray, np.ndarray]:
    """The ``count`` lowest eigenvalues (ascending, degenerate ones repeated) and eigenvectors.

    Parameters
    ----------
    H : Hermitian matrix (sparse or dense), lattice energy units.
    count : number of levels (clipped to the dimension).
    dense_threshold : use ``numpy.linalg.eigh`` when ``dim <= dense_threshold``.

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
    w, v = _lanczos(H, count, tol, seed=12345)
    # Lanczos on one start vector sees each eigenspace through a single direction, so copies of a
    # degenerate level are found only through rounding, not reliably. Deflate what was found
    # (shift it above the window) and search again until no further level falls inside.
    for attempt in range(MAX_DEFLATIONS):
        shift = 2.0 * (w[-1] - w[0]) + 2.0 * max(1.0, float(np.max(np.abs(w))))
        found = v

        def deflated(x: np.ndarray, found: np.ndarray = found, shift: float = shift) -> np.ndarray:
            return H @ x + shift * (found @ (found.conj().T @ x))

        op = spla.LinearOperator(H.shape, matvec=deflated, matmat=deflated, dtype=H.dtype)
        w2, v2 = _lanczos(op, count, tol, seed=54321 + attempt, orthogonal_to=found)
        inside = w2 <= w[-1] + DEGENERACY_TOL * max(1.0, abs(w[-1]))
        if not np.any(inside):
            break
        w = np.concatenate([w, w2[inside]])
        v = np.concatenate([v, v2[:, inside]], axis=1)
        order = np.argsort(w, kind="stable")[:count]
        w, v = w[order], v[:, order]
    return w, v


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
