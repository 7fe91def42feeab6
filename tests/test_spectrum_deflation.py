"""Degenerate spectra stay complete when deflation runs only on demand (reference: LAPACK eigh)."""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from lgt.basis import PhysicalBasis
from lgt.hamiltonian import build_hamiltonian
from lgt.model import ModelParams
from lgt.spectrum import _copy_may_be_missing, lowest_eigenpairs


def lattice(N: int = 12) -> sp.csr_matrix:
    return build_hamiltonian(PhysicalBasis(ModelParams(sites=N, hopping=1.0, mass=0.5, coupling=1.0))).tocsr()


def test_two_fold_degenerate_spectrum_is_complete():
    # two uncoupled copies of one chain: every level exactly twice (reference: numpy eigvalsh)
    A = lattice(12)
    H = sp.block_diag([A, A], format="csr")
    w, v = lowest_eigenpairs(H, 6, dense_threshold=100)  # force the Lanczos path
    ref = np.linalg.eigvalsh(A.toarray())[:3]
    np.testing.assert_allclose(w, np.repeat(ref, 2), atol=1e-9)
    np.testing.assert_allclose(v.conj().T @ v, np.eye(6), atol=1e-8)


def test_probe_sees_a_missing_copy_and_passes_a_complete_set():
    A = lattice(12)
    H = sp.block_diag([A, A], format="csr")
    wa, va = np.linalg.eigh(A.toarray())
    n = A.shape[0]
    zero = np.zeros(n)
    # one copy each of the two lowest levels: their partners in the other block are missing
    v = np.column_stack([np.concatenate([va[:, 0], zero]), np.concatenate([va[:, 1], zero])])
    assert _copy_may_be_missing(H, wa[:2], v)
    # the single chain's two lowest levels are non-degenerate and complete
    assert not _copy_may_be_missing(A, wa[:2], va[:, :2])
