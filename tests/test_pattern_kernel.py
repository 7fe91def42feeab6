"""The pattern format of H and the rotated two-column recurrence, against scipy (reference library)."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings, strategies as st
from scipy.sparse.linalg import expm_multiply

import lgt.kernels as kernels
from lgt.basis import PhysicalBasis
from lgt.chebyshev import gershgorin_interval
from lgt.hamiltonian import build_hamiltonian
from lgt.model import ModelParams
from lgt.propagation import ExactPropagator

needs_numba = pytest.mark.skipif(not kernels.HAVE_NUMBA, reason="numba not installed")


def lattice(N: int = 10, d: int = 3, w: float = 1.0) -> sp.csr_matrix:
    basis = PhysicalBasis(ModelParams(sites=N, hopping=w, mass=0.4, coupling=0.8, levels=d))
    return build_hamiltonian(basis).tocsr()


def pattern_matrix(seed: int, n: int, density: float, w: float) -> sp.csr_matrix:
    """Random symmetric H = diag + w·A with A a 0/1 pattern (no diagonal)."""
    rng = np.random.default_rng(seed)
    a = sp.random(n, n, density=density, random_state=rng, data_rvs=np.ones)
    a = ((a + a.T) > 0).astype(np.float64)
    a.setdiag(0)
    a.eliminate_zeros()
    return sp.csr_matrix(w * a + sp.diags(rng.normal(size=n)))


def test_lattice_hamiltonian_has_one_offdiagonal_value_and_round_trips():
    # truncated-link model: the link raising operator has unit elements, so every hopping entry is w
    # (docs/conventions.md); reference: the scipy CSR matrix itself
    H = lattice(w=0.7)
    pattern = kernels.pattern_of(H)
    assert pattern is not None
    indptr, indices, diagonal, w = pattern
    assert w == 0.7 and indices.dtype == np.int32 and indptr.dtype == np.int32
    rebuilt = sp.csr_matrix((np.full(indices.size, w), indices, indptr), shape=H.shape) + sp.diags(diagonal)
    assert abs(rebuilt - H).max() == 0.0
    k = kernels.SparseKernel(H, compiled=True, keep_matrix=False)
    assert k.pattern is not None and k._matrix is None
    assert abs(k.matrix - H).max() == 0.0
    np.testing.assert_allclose(k.gershgorin(), gershgorin_interval(H), rtol=1e-14)
    assert k.bytes_per_product() < H.data.nbytes + H.indices.nbytes + H.indptr.nbytes + 24 * H.shape[0]


def test_varying_values_keep_the_csr_route():
    # reference: scipy.sparse random matrices (values vary), and one off-diagonal entry changed
    rng = np.random.default_rng(2)
    a = sp.random(200, 200, density=0.05, random_state=rng)
    assert kernels.pattern_of(sp.csr_matrix(a + a.T)) is None
    H = lattice().tolil()
    i, j = H.nonzero()
    off = np.flatnonzero(i != j)[0]
    H[i[off], j[off]] = 2.0
    assert kernels.pattern_of(H.tocsr()) is None
    assert kernels.pattern_of(sp.diags(np.arange(5.0)).tocsr()) is None  # no off-diagonal entries
    assert kernels.SparseKernel(sp.csr_matrix(a + a.T), compiled=True).pattern is None


@needs_numba
@pytest.mark.parametrize("m", [1, 2, 3])
def test_pattern_kernel_equals_scipy_product(m, monkeypatch):
    # reference: scipy.sparse CSR product on the plain matrix
    monkeypatch.setattr(kernels, "THREADED_NONZEROS", 0)
    H = lattice()
    n = H.shape[0]
    rng = np.random.default_rng(1)
    x, prev = rng.normal(size=(n, m)), rng.normal(size=(n, m))
    for threads in (1, 2):
        k = kernels.SparseKernel(H, threads, compiled=True)
        assert k.pattern is not None and len(k.blocks) == threads
        out = np.empty_like(x)
        k.fused(x, prev, out, 2 / 3.0, -0.25, 1.0)
        np.testing.assert_allclose(out, (2 / 3.0) * (H @ x) - 0.25 * x - prev, rtol=1e-13, atol=1e-12)
        np.testing.assert_allclose(k.apply(x), H @ x, rtol=1e-13, atol=1e-12)
        assert k.quadratic(x) == pytest.approx(float(np.sum(x * (H @ x))), rel=1e-12)
        k.close()


@needs_numba
@pytest.mark.parametrize("pattern", [True, False])
@pytest.mark.parametrize("sign", [1, -1])
def test_rotated_product_is_the_product_of_i_times_psi(pattern, sign):
    # reference: scipy CSR product applied to ±i ψ formed with numpy complex arithmetic
    H = lattice()
    n = H.shape[0]
    rng = np.random.default_rng(4)
    psi, prev = rng.normal(size=n) + 1j * rng.normal(size=n), rng.normal(size=(n, 2))
    x = np.ascontiguousarray(psi.view(np.float64).reshape(n, 2))
    for compiled in (True, False):
        k = kernels.SparseKernel(H, compiled=compiled, pattern=pattern and compiled)
        out = np.empty_like(x)
        k.fused(x, prev, out, 0.3, -0.1, 1.0, rotate=sign)
        z = sign * 1j * psi
        want = 0.3 * (H @ z) - 0.1 * z - (prev[:, 0] + 1j * prev[:, 1])
        np.testing.assert_allclose(out[:, 0] + 1j * out[:, 1], want, rtol=1e-13, atol=1e-12)
    with pytest.raises(ValueError, match="two columns"):
        k.fused(x[:, :1].copy(), x[:, :1].copy(), out[:, :1].copy(), 1.0, 0.0, 0.0, rotate=1)


@needs_numba
@pytest.mark.parametrize("complex_start", [False, True])
def test_pattern_propagator_equals_expm_multiply(complex_start, monkeypatch):
    # reference: scipy.sparse.linalg.expm_multiply (Al-Mohy & Higham 2011) on the plain CSR;
    # small blocks (3 stored times) so later blocks start from complex states
    monkeypatch.setattr(kernels, "NUMBA_NONZEROS", 0)
    H = lattice()
    n = H.shape[0]
    rng = np.random.default_rng(6)
    psi0 = rng.normal(size=n) + (1j * rng.normal(size=n) if complex_start else 0)
    psi0 /= np.linalg.norm(psi0)
    times = np.linspace(0.0, 3.0, 13)
    with ExactPropagator(H, chunk_bytes=32 * n * 3, keep_matrix=False) as prop:
        assert prop.kernel.pattern is not None and prop.kernel._matrix is None
        got = prop.trajectory(psi0, times)
    want = expm_multiply(-1j * H, psi0, start=0.0, stop=3.0, num=13, endpoint=True)
    np.testing.assert_allclose(got, want, atol=1e-11)


@needs_numba
@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 2 ** 31), n=st.integers(20, 200), density=st.floats(0.01, 0.2),
       w=st.floats(-3.0, 3.0).filter(lambda v: abs(v) > 1e-3))
def test_pattern_format_is_exact_for_any_one_value_matrix(seed, n, density, w):
    # invariant: H = diag + w·A is stored exactly, and the pattern kernel's product equals the
    # scipy CSR product (reference library) for any pattern, diagonal and value w
    H = pattern_matrix(seed, n, density, w)
    pattern = kernels.pattern_of(H)
    if H.nnz == np.count_nonzero(H.diagonal()):  # no off-diagonal entry drawn
        assert pattern is None
        return
    assert pattern is not None and pattern[3] == w
    k = kernels.SparseKernel(H, compiled=True, keep_matrix=False)
    assert abs(k.matrix - H).max() == 0.0
    x = np.random.default_rng(seed).normal(size=(n, 1))
    np.testing.assert_allclose(k.apply(x), H @ x, rtol=1e-13, atol=1e-12)
