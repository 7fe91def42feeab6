"""One-pass kernels for the exact propagator and the observables (numba, numpy fallback).

* :meth:`SparseKernel.fused` — ``out = a·(H x) + b·x − g·prev`` for real H and real x, prev, out
  of shape (dim, m): one Chebyshev step (a = 2/r, b = −2c/r, g = 1) in a single sweep over the
  matrix, written straight into ``out`` (no temporaries). Rows are split into blocks of equal
  non-zeros handled by a small thread pool; the numba kernel releases the GIL, so the blocks run
  in parallel without an OpenMP runtime (no spin-waiting threads on a shared machine).
* The **pattern format** (:func:`pattern_of`): when every off-diagonal entry of H has one value w
  (the truncated-link model: the link raising operator has unit elements, so every hopping entry
  is w), H = diag + w·A with A a 0/1 pattern, stored as int32 column indices of the off-diagonal
  entries plus the diagonal vector: 4 B per non-zero moved instead of 12 (value + index), and
  about 40 % of the CSR's memory. Matrices with varying values (e.g. quantum-link √ factors) keep
  the general CSR route.
* :func:`quadratic_form` — Σ_i x_i·(H x)_i summed over columns, without storing H x.
* :func:`state_moments` — in one sweep over a complex state: the norm, the per-link level
  histograms, the overlap with a reference, and joint histograms of byte-sized blocks of the
  occupation pattern (from which ⟨n_i n_j⟩ follows with 256 × 256 products per block pair).

Without numba (``HAVE_NUMBA`` False) the same functions fall back to scipy/numpy.
"""

from __future__ import annotations

import functools
import importlib.util
import os
import threading
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import scipy.sparse as sp

#: numba is a core dependency; without it (or with FLUXLINE_NO_NUMBA set) scipy/numpy are used.
HAVE_NUMBA = importlib.util.find_spec("numba") is not None and not os.environ.get("FLUXLINE_NO_NUMBA")

#: Below this many non-zeros one thread does the whole product (dispatch would cost more).
THREADED_NONZEROS = 200_000
#: Below this many non-zeros (or basis states, for the observables) the scipy/numpy route is
#: used: importing numba and loading its cached machine code costs about a second per process,
#: more than such small runs take.
NUMBA_NONZEROS = 400_000
NUMBA_DIMENSION = 40_000

_COMPILED: dict = {}
_COMPILE_LOCK = threading.Lock()


def _compiled(name: str):
    """The numba-compiled kernel ``name`` (compiled, or loaded from the cache, on first use)."""
    with _COMPILE_LOCK:
        if name not in _COMPILED:
            import numba

            _COMPILED[name] = numba.njit(nogil=True, cache=True)(globals()[name])
        return _COMPILED[name]


def _fused_rows(indptr, indices, data, x, prev, out, a, b, g, r0, r1):  # pragma: no cover - jitted
    m = x.shape[1]
    if m == 1:  # one partial sum per row in storage order: H x bit-identical to scipy's product
        for i in range(r0, r1):
            s = 0.0
            for p in range(indptr[i], indptr[i + 1]):
                s += data[p] * x[indices[p], 0]
            out[i, 0] = a * s + b * x[i, 0] - g * prev[i, 0]
        return
    acc = np.empty(m)
    for i in range(r0, r1):
        acc[:] = 0.0
        for p in range(indptr[i], indptr[i + 1]):
            v = data[p]
            j = indices[p]
            for c in range(m):
                acc[c] += v * x[j, c]
        for c in range(m):
            out[i, c] = a * acc[c] + b * x[i, c] - g * prev[i, c]


def _pattern_rows1(indptr, indices, diag, w, x, prev, out, a, b, g, r0, r1):  # pragma: no cover
    # one real column; two partial sums per row break the chain of dependent additions (the
    # sweep is bound by the latency of the gathered adds, not by bandwidth)
    aw = a * w
    for i in range(r0, r1):
        s0 = 0.0
        s1 = 0.0
        p = indptr[i]
        end = indptr[i + 1]
        while p + 1 < end:
            s0 += x[indices[p]]
            s1 += x[indices[p + 1]]
            p += 2
        if p < end:
            s0 += x[indices[p]]
        out[i] = aw * (s0 + s1) + (a * diag[i] + b) * x[i] - g * prev[i]


def _pattern_rows(indptr, indices, diag, w, x, prev, out, a, b, g, r0, r1):  # pragma: no cover
    m = x.shape[1]
    aw = a * w
    acc = np.empty(m)
    for i in range(r0, r1):
        acc[:] = 0.0
        for p in range(indptr[i], indptr[i + 1]):
            j = indices[p]
            for c in range(m):
                acc[c] += x[j, c]
        ad = a * diag[i] + b
        for c in range(m):
            out[i, c] = aw * acc[c] + ad * x[i, c] - g * prev[i, c]


def _fused_rows_rot(indptr, indices, data, x, prev, out, a, b, g, s, r0, r1):  # pragma: no cover
    # two columns (u, v), x rotated first: R x = s·(−v, u) (multiplication by ±i)
    for i in range(r0, r1):
        h0 = 0.0
        h1 = 0.0
        for p in range(indptr[i], indptr[i + 1]):
            v = data[p]
            j = indices[p]
            h0 += v * x[j, 1]
            h1 += v * x[j, 0]
        out[i, 0] = -s * (a * h0 + b * x[i, 1]) - g * prev[i, 0]
        out[i, 1] = s * (a * h1 + b * x[i, 0]) - g * prev[i, 1]


def _pattern_rows_rot(indptr, indices, diag, w, x, prev, out, a, b, g, s, r0, r1):  # pragma: no cover
    aw = a * w
    for i in range(r0, r1):
        h0 = 0.0
        h1 = 0.0
        for p in range(indptr[i], indptr[i + 1]):
            j = indices[p]
            h0 += x[j, 1]
            h1 += x[j, 0]
        ad = a * diag[i] + b
        out[i, 0] = -s * (aw * h0 + ad * x[i, 1]) - g * prev[i, 0]
        out[i, 1] = s * (aw * h1 + ad * x[i, 0]) - g * prev[i, 1]


def _pattern_quadratic_rows(indptr, indices, diag, w, x, r0, r1):  # pragma: no cover - jitted
    total = 0.0
    m = x.shape[1]
    if m == 2:  # (Re, Im) of a complex state: one pass over the pattern for both columns
        for i in range(r0, r1):
            h0 = 0.0
            h1 = 0.0
            for p in range(indptr[i], indptr[i + 1]):
                j = indices[p]
                h0 += x[j, 0]
                h1 += x[j, 1]
            x0 = x[i, 0]
            x1 = x[i, 1]
            total += (w * h0 + diag[i] * x0) * x0 + (w * h1 + diag[i] * x1) * x1
        return total
    for i in range(r0, r1):
        for c in range(m):
            s = 0.0
            for p in range(indptr[i], indptr[i + 1]):
                s += x[indices[p], c]
            total += (w * s + diag[i] * x[i, c]) * x[i, c]
    return total


def _quadratic_rows(indptr, indices, data, x, r0, r1):  # pragma: no cover - jitted
    total = 0.0
    m = x.shape[1]
    for i in range(r0, r1):
        for c in range(m):
            s = 0.0
            for p in range(indptr[i], indptr[i + 1]):
                s += data[p] * x[indices[p], c]
            total += s * x[i, c]
    return total


def _moments_rows(psi, levels, ref, occ_bytes, hist, marginal, joint, r0, r1):  # pragma: no cover
    norm = 0.0
    ov_re = 0.0
    ov_im = 0.0
    K = levels.shape[1]
    B = occ_bytes.shape[1]
    with_ref = ref.shape[0] > 0
    for i in range(r0, r1):
        re = psi[i, 0]
        im = psi[i, 1]
        p = re * re + im * im
        norm += p
        for n in range(K):
            hist[n, levels[i, n]] += p
        if with_ref:  # ⟨ref|ψ⟩ = Σ conj(ref) ψ
            fr = ref[i, 0]
            fi = ref[i, 1]
            ov_re += fr * re + fi * im
            ov_im += fr * im - fi * re
        if B > 0:
            q = 0
            for c in range(B):
                marginal[c, occ_bytes[i, c]] += p
                for e in range(c + 1, B):
                    joint[q, occ_bytes[i, c], occ_bytes[i, e]] += p
                    q += 1
    return norm, ov_re, ov_im


# ---------------------------------------------------------------------- products
def row_blocks(H: sp.csr_matrix | np.ndarray, threads: int) -> list[tuple[int, int]]:
    """Row ranges [r0, r1) holding about equal numbers of non-zeros (one per thread).

    ``H`` is a CSR matrix or its row-pointer array."""
    indptr = H.indptr if sp.issparse(H) else np.asarray(H)
    n, nnz = indptr.size - 1, int(indptr[-1])
    if threads <= 1 or nnz < THREADED_NONZEROS:
        return [(0, n)]
    targets = np.linspace(0, nnz, threads + 1)[1:-1]
    cuts = np.searchsorted(indptr, targets).tolist()
    edges = [0] + [int(c) for c in cuts] + [n]
    return [(a, b) for a, b in zip(edges[:-1], edges[1:]) if b > a]


def _index_type(n: int) -> type:
    return np.int32 if n < 2 ** 31 - 1 else np.int64


def pattern_of(H: sp.csr_matrix) -> tuple[np.ndarray, np.ndarray, np.ndarray, float] | None:
    """(indptr, indices, diagonal, w) of the off-diagonal pattern of real CSR H, or None.

    Not None when every stored off-diagonal entry equals one value w ≠ 0: then
    H = diag(diagonal) + w·A, A the 0/1 matrix of (indptr, indices) (sorted column indices,
    int32 while they fit). One pass over H's arrays; the pieces are new arrays.
    """
    n = H.shape[0]
    if H.nnz == 0 or n != H.shape[1]:
        return None
    rows = np.repeat(np.arange(n, dtype=_index_type(n)), np.diff(H.indptr))
    off = H.indices != rows
    del rows
    if not off.any():
        return None
    w = H.data[np.argmax(off)]
    varying = H.data != w
    varying &= off
    if w == 0 or varying.any():
        return None
    del varying
    itype = _index_type(int(np.count_nonzero(off)))
    position = np.zeros(H.nnz + 1, dtype=itype)  # off-diagonal entries before each stored entry
    np.cumsum(off, dtype=itype, out=position[1:])
    indptr = position[H.indptr]
    del position
    indices = H.indices[off].astype(_index_type(n), copy=False)
    diagonal = H.diagonal()
    return indptr, indices, diagonal, float(w)


def rotated(x: np.ndarray, sign: int) -> np.ndarray:
    """sign·i·ψ on the (dim, 2) real columns (Re ψ, Im ψ): sign·(−x[:, 1], x[:, 0]) (a copy)."""
    return np.ascontiguousarray(np.stack([-sign * x[:, 1], sign * x[:, 0]], axis=1))


class SparseKernel:
    """Real sparse H with its row blocks and threads, applied by the fused kernels.

    Parameters
    ----------
    H : real sparse matrix (converted to CSR with int32/int64 indices as stored).
    threads : worker threads (1: the calling thread only).
    compiled : use the numba kernels (default: from :data:`NUMBA_NONZEROS` non-zeros on).
    pattern : store H in the pattern format when its off-diagonal values allow
        (:func:`pattern_of`; default: whenever the kernels are compiled).
    keep_matrix : keep a reference to the CSR matrix. With False (pattern format only) the kernel
        holds just the pattern, and :attr:`matrix` rebuilds the CSR when asked (the caller must
        drop its own reference for the memory to be freed).
    """

    def __init__(self, H: sp.spmatrix, threads: int = 1, compiled: bool | None = None,
                 pattern: bool | None = None, keep_matrix: bool = True) -> None:
        H = sp.csr_matrix(H)
        if H.dtype != np.float64:
            H = H.astype(np.float64)
        H.sort_indices()
        self.compiled = HAVE_NUMBA and (H.nnz >= NUMBA_NONZEROS if compiled is None else compiled)
        self._shape = H.shape
        self.nnz = int(H.nnz)
        self.pattern = pattern_of(H) if (self.compiled if pattern is None else pattern) else None
        self._matrix = H if keep_matrix or self.pattern is None else None
        self.blocks = row_blocks(self.pattern[0] if self.pattern is not None else H, threads)
        self.pool = ThreadPoolExecutor(len(self.blocks)) if len(self.blocks) > 1 else None

    @property
    def shape(self) -> tuple[int, int]:
        return self._shape

    @property
    def matrix(self) -> sp.csr_matrix:
        """H as CSR (rebuilt from the pattern when the kernel does not keep it)."""
        if self._matrix is not None:
            return self._matrix
        indptr, indices, diagonal, w = self.pattern
        off = sp.csr_matrix((np.full(indices.size, w), indices, indptr), shape=self._shape)
        return sp.csr_matrix(off + sp.diags(diagonal))

    def diagonal(self) -> np.ndarray:
        """The diagonal of H."""
        return self.pattern[2] if self.pattern is not None else self._matrix.diagonal()

    def gershgorin(self) -> tuple[float, float]:
        """[E_min, E_max] from the Gershgorin discs of H (rigorous outer bounds)."""
        if self.pattern is None:
            H = self._matrix
            diag = H.diagonal()
            radius = np.asarray(abs(H).sum(axis=1)).ravel() - np.abs(diag)
        else:
            indptr, _, diag, w = self.pattern
            radius = abs(w) * np.diff(indptr)
        return float(np.min(diag - radius)), float(np.max(diag + radius))

    def fused(self, x: np.ndarray, prev: np.ndarray, out: np.ndarray, a: float, b: float,
              g: float, rotate: int = 0) -> np.ndarray:
        """out = a·(H x') + b·x' − g·prev for real C-contiguous (dim, m) arrays; returns ``out``.

        x' = x, or for ``rotate`` = ±1 and m = 2 (columns Re, Im of a complex vector) x' = ±i x,
        i.e. ±(−x[:, 1], x[:, 0]) (read rotated, no copy).
        """
        if rotate and x.shape[1] != 2:
            raise ValueError("rotate needs two columns (Re, Im)")
        if not self.compiled:
            if rotate:
                x = rotated(x, rotate)
            H = self.matrix
            np.multiply((H @ x[:, 0])[:, None] if x.shape[1] == 1 else H @ x, a, out=out)
            if b:
                out += b * x
            if g:
                out -= g * prev
            return out
        if rotate:
            if self.pattern is not None:
                kernel, arrays = _compiled("_pattern_rows_rot"), self.pattern
            else:
                H = self._matrix
                kernel, arrays = _compiled("_fused_rows_rot"), (H.indptr, H.indices, H.data)
            args = (*arrays, x, prev, out, float(a), float(b), float(g), float(rotate))
        elif self.pattern is not None:
            indptr, indices, diagonal, w = self.pattern
            if x.shape[1] == 1:  # 1-D views: the single-column kernel
                kernel = _compiled("_pattern_rows1")
                x, prev, out_ = x.reshape(-1), prev.reshape(-1), out.reshape(-1)
            else:
                kernel, out_ = _compiled("_pattern_rows"), out
            args = (indptr, indices, diagonal, w, x, prev, out_, float(a), float(b), float(g))
        else:
            H = self._matrix
            kernel = _compiled("_fused_rows")
            args = (H.indptr, H.indices, H.data, x, prev, out, float(a), float(b), float(g))
        if self.pool is None:
            kernel(*args, 0, self._shape[0])
        else:
            list(self.pool.map(lambda blk: kernel(*args, *blk), self.blocks))
        return out

    def apply(self, x: np.ndarray) -> np.ndarray:
        """H x for real x of shape (dim,) or (dim, m)."""
        x2 = np.ascontiguousarray(x, dtype=np.float64)
        flat = x2.ndim == 1
        x2 = x2.reshape(x2.shape[0], -1)
        out = np.empty_like(x2)
        self.fused(x2, x2, out, 1.0, 0.0, 0.0)
        return out.ravel() if flat else out

    def quadratic(self, x: np.ndarray) -> float:
        """Σ_c x[:, c]ᵀ H x[:, c] for real (dim, m) x (⟨ψ|H|ψ⟩ for the real view of ψ)."""
        x = np.ascontiguousarray(x, dtype=np.float64).reshape(self._shape[0], -1)
        if not self.compiled:
            return float(np.sum(x * (self.matrix @ x)))
        if self.pattern is not None:
            kernel, arrays = _compiled("_pattern_quadratic_rows"), self.pattern
        else:
            H = self._matrix
            kernel, arrays = _compiled("_quadratic_rows"), (H.indptr, H.indices, H.data)
        if self.pool is None:
            return float(kernel(*arrays, x, 0, self._shape[0]))
        parts = self.pool.map(lambda blk: kernel(*arrays, x, *blk), self.blocks)
        return float(sum(parts))

    def bytes_per_product(self, columns: int = 1) -> int:
        """Bytes one fused step must move at least: the matrix arrays read once, x and prev read
        and out written once (8 B per entry)."""
        if self.pattern is not None:
            arrays = sum(a.nbytes for a in self.pattern[:3])
        else:
            H = self._matrix
            arrays = H.data.nbytes + H.indices.nbytes + H.indptr.nbytes
        return int(arrays + 3 * 8 * columns * self._shape[0])

    def close(self) -> None:
        if self.pool is not None:
            self.pool.shutdown()
            self.pool = None


# ---------------------------------------------------------------------- observables
def occupation_bytes(occupations: np.ndarray) -> np.ndarray:
    """Occupation patterns (dim, N) of 0/1 packed into bytes of 8 sites, shape (dim, ⌈N/8⌉)."""
    return np.ascontiguousarray(np.packbits(np.asarray(occupations, dtype=np.uint8), axis=1,
                                            bitorder="little"))


@functools.lru_cache(maxsize=64)
def byte_bits(N: int, block: int) -> np.ndarray:
    """(256, w) 0/1 matrix: bit s of each byte value for the sites of byte ``block`` (w ≤ 8)."""
    width = min(8, N - 8 * block)
    bits = ((np.arange(256)[:, None] >> np.arange(width)[None, :]) & 1).astype(np.float64)
    bits.flags.writeable = False  # shared by the cache
    return bits


def occupation_products_from_histograms(marginal: np.ndarray, joint: np.ndarray, N: int) -> np.ndarray:
    """⟨n_i n_j⟩ (N, N) from byte-block marginal (B, 256) and joint (pairs, 256, 256) histograms."""
    B = marginal.shape[0]
    bits = [byte_bits(N, c) for c in range(B)]
    out = np.zeros((N, N))
    q = 0
    for c in range(B):
        sc = slice(8 * c, 8 * c + bits[c].shape[1])
        out[sc, sc] = bits[c].T @ (marginal[c][:, None] * bits[c])
        for e in range(c + 1, B):
            se = slice(8 * e, 8 * e + bits[e].shape[1])
            block = bits[c].T @ joint[q] @ bits[e]
            out[sc, se] = block
            out[se, sc] = block.T
            q += 1
    return out


def state_moments(psi: np.ndarray, levels: np.ndarray, d: int, reference: np.ndarray | None = None,
                  occ_bytes: np.ndarray | None = None, compiled: bool | None = None):
    """One sweep over ψ: (norm, level histograms (K, d), ⟨ref|ψ⟩ or None, byte histograms or None).

    ``levels`` is the (dim, K) int8 level array of the basis; ``occ_bytes`` from
    :func:`occupation_bytes` (histograms for ⟨n_i n_j⟩) or None. ``compiled``: use the numba
    sweep (default: from :data:`NUMBA_DIMENSION` basis states on, when numba is installed).
    """
    psi = np.ascontiguousarray(psi, dtype=np.complex128)
    view = psi.view(np.float64).reshape(-1, 2)
    dim, K = levels.shape
    hist = np.zeros((K, d))
    B = 0 if occ_bytes is None else occ_bytes.shape[1]
    marginal = np.zeros((B, 256))
    joint = np.zeros((B * (B - 1) // 2, 256, 256))
    ref = (np.zeros((0, 2)) if reference is None
           else np.ascontiguousarray(reference, dtype=np.complex128).view(np.float64).reshape(-1, 2))
    ob = occ_bytes if occ_bytes is not None else np.zeros((dim, 0), dtype=np.uint8)
    if compiled is None:
        compiled = dim >= NUMBA_DIMENSION
    if HAVE_NUMBA and compiled:
        norm, ore, oim = _compiled("_moments_rows")(view, levels, ref, ob, hist, marginal, joint, 0, dim)
        overlap = complex(ore, oim)
    else:
        prob = view[:, 0] ** 2 + view[:, 1] ** 2
        norm = float(prob.sum())
        for n in range(K):
            hist[n] = np.bincount(levels[:, n], weights=prob, minlength=d)  # levels ≥ 0
        overlap = complex(np.vdot(reference, psi)) if reference is not None else 0j
        for c in range(B):
            marginal[c] = np.bincount(ob[:, c], weights=prob, minlength=256)
        q = 0
        for c in range(B):
            for e in range(c + 1, B):
                joint[q] = np.bincount(ob[:, c].astype(np.int64) * 256 + ob[:, e], weights=prob,
                                       minlength=65536).reshape(256, 256)
                q += 1
    return (float(norm), hist, overlap if reference is not None else None,
            (marginal, joint) if occ_bytes is not None else None)


__all__ = ["HAVE_NUMBA", "SparseKernel", "row_blocks", "pattern_of", "state_moments", "occupation_bytes",
           "occupation_products_from_histograms", "byte_bits"]
