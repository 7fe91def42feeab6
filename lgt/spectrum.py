"""Exact low-lying spectrum in the physical subspace (dense below a size threshold, Lanczos above)."""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

#: Below this dimension the full dense diagonalisation is used.
DENSE_THRESHOLD = 2500


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
    ncv = min(n, max(2 * count + 1, count + 32))
    v0 = np.random.default_rng(12345).standard_normal(n).astype(H.dtype)
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
