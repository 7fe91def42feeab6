"""The one exact propagator: ψ(t) = exp(−iHt) ψ₀ for real symmetric sparse H (ħ = 1, lattice units).

Used by the ``evolve`` task (:mod:`lgt.evolution`), the variational reference trajectory
(:func:`lgt.variational.stepper.exact_trajectory`) and the Trotter baseline
(:mod:`lgt.variational.trotter_baseline`). Two methods:

* ``"chebyshev"`` (default): :mod:`lgt.chebyshev` — one recurrence per block of stored times on
  real vectors, fused products (:mod:`lgt.kernels`), the spectral interval from Gershgorin
  discs for short runs and from a 40-step Lanczos run plus a margin for long ones.
* ``"expm_multiply"``: :func:`scipy.sparse.linalg.expm_multiply` (Al-Mohy & Higham, SIAM J. Sci.
  Comput. 33, 488 (2011)) on −i(H − shift); uniform grids through its start/stop/num form.
"""

from __future__ import annotations

import os
from typing import Iterator

import numpy as np
import scipy.sparse as sp
from scipy.sparse.linalg import LinearOperator, expm_multiply

from fluxline_threads import single_threaded_blas
from lgt.chebyshev import LANCZOS_STEPS, ChebyshevPropagator, lanczos_interval
from lgt.kernels import THREADED_NONZEROS, SparseKernel
from lgt.resources import CHUNK_BYTES

#: Propagators: Chebyshev series over blocks of stored times (default), or scipy's expm_multiply.
METHODS = ("chebyshev", "expm_multiply")
#: Most stored times one Chebyshev block holds: the fold of the series into the outputs costs
#: ∝ terms × times, so long blocks lose more to folding than they save in products.
MAX_BLOCK_TIMES = 128
#: Use the Lanczos interval when the run needs more Gershgorin products than this many Lanczos runs.
LANCZOS_PAYS = 4


def product_threads() -> int:
    """Threads for sparse products: OMP_NUM_THREADS if set (sweep workers pin it to 1), else
    the CPUs this process may use, at most 4."""
    env = os.environ.get("OMP_NUM_THREADS", "")
    if env.isdigit() and int(env) > 0:
        return int(env)
    try:
        available = len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not on Linux
        available = os.cpu_count() or 1
    return max(1, min(available, 4))


class SchrodingerOperator(LinearOperator):
    """A = sign · (−i) (H − shift) for real symmetric sparse H (for ``expm_multiply``).

    ``sign = −1`` gives the adjoint (needed by the 1-norm estimator of ``expm_multiply``).
    ``shift`` defaults to the midpoint of the diagonal, which minimises the diagonal's share of
    ‖A‖₁ (about 10 % below scipy's own trace/n shift at N = 20), so fewer Taylor terms are needed.
    Products go through the real (dim, 2k) view of the complex block (no complex copy of H).
    """

    def __init__(self, kernel: SparseKernel, sign: int = 1, shift: float | None = None) -> None:
        super().__init__(np.complex128, kernel.shape)
        self.kernel = kernel
        self.sign = sign
        if shift is None:
            diag = kernel.diagonal()
            shift = 0.5 * float(diag.max() + diag.min()) if diag.size else 0.0
        self.shift = shift
        self.products = 0  # H products applied (columns)

    def _matmat(self, X: np.ndarray) -> np.ndarray:
        X = np.ascontiguousarray(X, dtype=np.complex128)
        n, k = X.shape
        self.products += k
        xr = X.view(np.float64).reshape(n, 2 * k)
        hx = np.empty_like(xr)
        self.kernel.fused(xr, xr, hx, 1.0, -self.shift, 0.0)
        hx = hx.reshape(n, k, 2)
        out = np.empty((n, k), dtype=np.complex128)
        parts = out.view(np.float64).reshape(n, k, 2)
        # ∓i (a + ib) = ±b ∓ ia, written straight into the real view (no complex multiply)
        np.multiply(hx[..., 1], self.sign, out=parts[..., 0])
        np.multiply(hx[..., 0], -self.sign, out=parts[..., 1])
        return out

    def _matvec(self, x: np.ndarray) -> np.ndarray:
        return self._matmat(np.reshape(x, (-1, 1))).ravel()

    def _adjoint(self) -> "SchrodingerOperator":
        return SchrodingerOperator(self.kernel, sign=-self.sign, shift=self.shift)


def _uniform(times: np.ndarray) -> bool:
    if times.size < 3:
        return True
    steps = np.diff(times)
    return bool(np.allclose(steps, steps[0], rtol=1e-12, atol=0))


class ExactPropagator:
    """exp(−iHt) for one real symmetric sparse H, applied to physical-subspace states.

    Parameters
    ----------
    H : real symmetric sparse matrix (lattice energy units).
    method : one of :data:`METHODS`.
    threads : threads for the products (default: one below ``THREADED_NONZEROS`` non-zeros,
        else :func:`product_threads`).
    chunk_bytes : most bytes of stored vectors one block may hold.
    interval : spectral bounds for Chebyshev (default: chosen per run, see :meth:`interval_for`).
    keep_matrix : False lets the kernel hold only the pattern format of H when H has one
        off-diagonal value (:func:`lgt.kernels.pattern_of`, about 40 % of the CSR's memory); the
        caller then drops its own H to free the CSR (as the ``evolve`` task does).
    """

    def __init__(self, H: sp.spmatrix, method: str = "chebyshev", threads: int | None = None,
                 chunk_bytes: int = CHUNK_BYTES, interval: tuple[float, float] | None = None,
                 keep_matrix: bool = True) -> None:
        if method not in METHODS:
            raise ValueError(f"method must be one of {METHODS}, got {method!r}")
        H = sp.csr_matrix(H)
        if np.iscomplexobj(H.data):
            if np.any(H.data.imag):
                raise ValueError("ExactPropagator needs a real symmetric H")
            H = sp.csr_matrix(H.real)
        if threads is None:
            threads = 1 if H.nnz < THREADED_NONZEROS else product_threads()
        self.kernel = SparseKernel(H, threads, keep_matrix=keep_matrix)
        del H
        self.method = method
        self.chunk_bytes = int(chunk_bytes)
        self._interval = interval
        self._gershgorin: tuple[float, float] | None = None
        self.products = 0

    @property
    def matrix(self) -> sp.csr_matrix:
        """H as CSR (rebuilt from the pattern format when the kernel does not keep it)."""
        return self.kernel.matrix

    # ------------------------------------------------------------------ helpers
    def hamiltonian_matvec(self, psi: np.ndarray) -> np.ndarray:
        """H ψ for complex ψ (real H applied to the (dim, 2) real view)."""
        psi = np.ascontiguousarray(psi, dtype=np.complex128)
        return self.kernel.apply(psi.view(np.float64).reshape(-1, 2)).view(np.complex128).ravel()

    def energy(self, psi: np.ndarray) -> float:
        """⟨ψ|H|ψ⟩ (not normalised) in one sweep, without storing Hψ."""
        psi = np.ascontiguousarray(psi, dtype=np.complex128)
        return self.kernel.quadratic(psi.view(np.float64).reshape(-1, 2))

    def interval_for(self, duration: float) -> tuple[float, float]:
        """Chebyshev interval for a run of this total duration: Gershgorin discs, or the tighter
        Lanczos bound when the run needs more than ``LANCZOS_PAYS`` × 40 Gershgorin products."""
        if self._interval is not None:
            return self._interval
        if self._gershgorin is None:
            self._gershgorin = self.kernel.gershgorin()
        lo, hi = self._gershgorin
        if 0.5 * (hi - lo) * duration > LANCZOS_PAYS * LANCZOS_STEPS:
            with single_threaded_blas():
                self._interval = lanczos_interval(self.kernel)
            self.products += LANCZOS_STEPS
            return self._interval
        return self._gershgorin

    def close(self) -> None:
        self.kernel.close()

    def __enter__(self) -> "ExactPropagator":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    # ------------------------------------------------------------------ propagation
    def states(self, psi0: np.ndarray, times: np.ndarray) -> Iterator[tuple[int, np.ndarray]]:
        """Yield (index, ψ(times[index])) for ascending ``times`` ≥ 0, ψ(0) = ``psi0``.

        Each yielded vector is a fresh complex array the caller may keep.
        """
        times = np.asarray(times, dtype=float)
        if times.size and (times[0] < 0 or np.any(np.diff(times) < 0)):
            raise ValueError("times must be ascending and non-negative")
        psi = np.array(psi0, dtype=np.complex128)
        if self.method == "chebyshev":
            yield from self._chebyshev(psi, times)
        else:
            yield from self._expm(psi, times)

    def step(self, psi: np.ndarray, dt: float) -> np.ndarray:
        """ψ(dt) = e^{−iH dt} ψ (one step, e.g. the target of a variational step)."""
        return self.trajectory(psi, np.array([0.0, float(dt)]))[-1]

    def trajectory(self, psi0: np.ndarray, times: np.ndarray) -> np.ndarray:
        """States at every time, shape (len(times), dim)."""
        out = np.empty((len(times), np.size(psi0)), dtype=np.complex128)
        for i, psi in self.states(psi0, times):
            out[i] = psi
        return out

    def _chebyshev(self, psi: np.ndarray, times: np.ndarray) -> Iterator[tuple[int, np.ndarray]]:
        if times.size == 0:
            return
        prop = ChebyshevPropagator(self.kernel, self.interval_for(float(times[-1])))
        per_block = max(1, min(MAX_BLOCK_TIMES, int(self.chunk_bytes // (32 * max(psi.size, 1)))))  # acc: 16 B per entry and time
        t_now, i = 0.0, 0
        try:
            while i < times.size:
                if times[i] == t_now:
                    yield i, psi.copy()
                    i += 1
                    continue
                k = min(per_block, times.size - i)
                with single_threaded_blas():  # small dense folds; products threaded by the kernel
                    outputs = prop.iter_block(psi, times[i:i + k] - t_now)
                    for r, out in enumerate(outputs):
                        if r == k - 1:
                            psi = out.copy()  # the caller may change what it is given
                        yield i + r, out
                t_now = float(times[i + k - 1])
                i += k
        finally:
            self.products += prop.products

    def _expm(self, psi: np.ndarray, times: np.ndarray) -> Iterator[tuple[int, np.ndarray]]:
        op = SchrodingerOperator(self.kernel)
        per_chunk = max(1, int(self.chunk_bytes // (16 * max(psi.size, 1))) - 1)
        uniform = _uniform(times)
        try:
            yield from self._expm_chunks(op, psi, times, per_chunk, uniform)
        finally:
            self.products += op.products

    def _expm_chunks(self, op: SchrodingerOperator, psi: np.ndarray, times: np.ndarray, per_chunk: int,
                     uniform: bool) -> Iterator[tuple[int, np.ndarray]]:
        t_now, i = 0.0, 0
        while i < times.size:
            if times[i] == t_now:
                yield i, psi.copy()
                i += 1
                continue
            k = min(per_chunk, times.size - i) if uniform and i > 0 else 1
            t_end = times[i + k - 1]
            with single_threaded_blas():  # vector algebra only; H products are threaded by the kernel
                # traceA = 0: ``op`` is already shifted, scipy must not shift again
                out = expm_multiply(op, psi, start=0.0, stop=t_end - t_now, num=k + 1, endpoint=True,
                                    traceA=0.0)
            phases = np.exp(-1j * op.shift * (np.asarray(times[i:i + k]) - t_now))
            for r in range(1, k + 1):
                out[r] *= phases[r - 1]  # restore the global phase of the shift
                yield i + r - 1, out[r].copy()
            psi = np.ascontiguousarray(out[k])
            t_now = float(t_end)
            i += k
            del out


def evolve_states(H: sp.spmatrix, psi0: np.ndarray, times: np.ndarray,
                  method: str = "chebyshev") -> np.ndarray:
    """ψ(t) for every t in ``times`` (ascending, ≥ 0), shape (len(times), dim)."""
    with ExactPropagator(H, method) as prop:
        return prop.trajectory(psi0, times)


__all__ = ["METHODS", "ExactPropagator", "SchrodingerOperator", "evolve_states", "product_threads"]
