"""Gates on a plain vector space (subspace mode) from sparse Hermitian generators.

A generator ``G`` (``dim x dim``, ``scipy.sparse``) is split once into the connected
components of its coupling graph.  Components of equal size ``n`` are stacked and
diagonalised together (``numpy.linalg.eigh`` on an ``(m, n, n)`` array), so that
``U(t) = exp(-i t G)`` is applied by a gather, two small batched products and a scatter.
Isolated states (``n = 1``) only pick up a phase; components larger than
``max_block`` fall back to ``scipy.sparse.linalg.expm_multiply``.

States are canonical subspace views of shape ``(B, dim)``.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components
from scipy.sparse.linalg import expm_multiply

from .gates import Gate

__all__ = ["SparseGeneratorGate"]

#: Spaces up to this dimension apply non-diagonal generators through a dense eigendecomposition.
DENSE_DIM = 160


@dataclass
class _BlockGroup:
    """All components of one size ``n``: indices ``(m, n)``, eigenpairs.

    For ``n = 2`` the exponential has a closed form: with ``h = mu 1 + r n.sigma``
    (``|n| = 1``), ``exp(-i t h) = e^{-i t mu} (cos(t r) 1 - i sin(t r) n.sigma)``, applied
    on two gathered index arrays without batched small products.
    """

    idx: np.ndarray
    w: np.ndarray  # (m, n)
    v: np.ndarray  # (m, n, n)

    def __post_init__(self) -> None:
        if self.idx.shape[1] == 2:
            h = np.einsum("mij,mj,mkj->mik", self.v, self.w, self.v.conj())
            self.i0, self.i1 = np.ascontiguousarray(self.idx[:, 0]), np.ascontiguousarray(self.idx[:, 1])
            self.mu = 0.5 * (self.w[:, 0] + self.w[:, 1])
            self.r = 0.5 * (self.w[:, 1] - self.w[:, 0])  # > 0: coupled pair
            self.nz = 0.5 * (h[:, 0, 0] - h[:, 1, 1]).real / self.r
            self.noff = h[:, 0, 1] / self.r

    def apply(self, view: np.ndarray, t: float) -> None:
        if self.idx.shape[1] == 2:
            ph = np.exp(-1j * t * self.mu)
            q = (-1j * np.sin(t * self.r)) * ph
            pc = np.cos(t * self.r) * ph
            qz = q * self.nz
            x0, x1 = view[:, self.i0], view[:, self.i1]
            view[:, self.i0] = (pc + qz) * x0 + (q * self.noff) * x1
            view[:, self.i1] = (q * self.noff.conj()) * x0 + (pc - qz) * x1
            return
        x = view[:, self.idx]  # (B, m, n)
        y = np.einsum("mji,bmj->bmi", self.v.conj(), x)
        y *= np.exp(-1j * t * self.w)
        view[:, self.idx] = np.einsum("mij,bmj->bmi", self.v, y)


def _block_groups(gen: sp.coo_matrix, labels: np.ndarray, max_block: int):
    """Split the components by size; return (phase idx, phase h, groups, large comps)."""
    sizes = np.bincount(labels)
    order = np.argsort(labels, kind="stable")
    starts = np.concatenate(([0], np.cumsum(sizes)[:-1]))
    pos = np.empty_like(labels)
    pos[order] = np.arange(labels.size) - starts[labels[order]]
    diag = gen.diagonal().real
    single = np.flatnonzero(sizes[labels] == 1)
    keep = diag[single] != 0
    groups: list[_BlockGroup] = []
    large: list[tuple[np.ndarray, sp.csr_matrix]] = []
    csr = gen.tocsr()
    for n in np.unique(sizes[sizes > 1]):
        comps = np.flatnonzero(sizes == n)
        if n > max_block:
            for c in comps:
                members = order[starts[c] : starts[c] + n]
                large.append((members, csr[members][:, members].tocsr()))
            continue
        slot = np.full(sizes.size, -1)
        slot[comps] = np.arange(comps.size)
        idx = order[starts[comps][:, None] + np.arange(n)[None, :]]
        mask = slot[labels[gen.row]] >= 0
        r, c, val = gen.row[mask], gen.col[mask], gen.data[mask]
        blocks = np.zeros((comps.size, n, n), dtype=np.complex128)
        np.add.at(blocks, (slot[labels[r]], pos[r], pos[c]), val)
        w, v = np.linalg.eigh(blocks)
        groups.append(_BlockGroup(idx, w, v))
    return single[keep], diag[single][keep], groups, large


class SparseGeneratorGate(Gate):
    """``exp(-i t G)`` for a sparse Hermitian ``G`` on a ``dim``-dimensional space.

    Parameters
    ----------
    g
        ``dim x dim`` Hermitian ``scipy.sparse`` matrix (or dense array).
    max_block
        Components larger than this use ``expm_multiply`` instead of ``eigh``.
    label
        Free-text name, kept for accounting and export.
    dense_below
        Spaces of at most this dimension use one dense eigendecomposition of ``G`` instead of
        the block structure (default :data:`DENSE_DIM`; 0 always uses the blocks).
    """

    kind = "generator"

    def export(self) -> dict:
        coo = sp.coo_matrix(self.g)
        return {"kind": "sparse_generator", "label": self.label,
                "generator": {"rows": coo.row.tolist(), "cols": coo.col.tolist(),
                              "real": coo.data.real.tolist(), "imag": coo.data.imag.tolist()}}

    def __init__(self, g, max_block: int = 64, label: str = "", atol: float = 1e-10,
                 dense_below: int | None = None) -> None:
        mat = sp.csr_matrix(g, dtype=np.complex128)
        mat.eliminate_zeros()
        if mat.shape[0] != mat.shape[1]:
            raise ValueError(f"generator must be square, got {mat.shape}")
        diff = mat - mat.getH()
        if diff.nnz and np.max(np.abs(diff.data)) > atol:
            raise ValueError("generator is not Hermitian")
        self.g, self.dim, self.label = mat, mat.shape[0], label
        off = sp.coo_matrix(mat - sp.diags(mat.diagonal()))
        off.eliminate_zeros()
        self.is_diagonal = off.nnz == 0
        self.dense = None
        if self.is_diagonal:
            self.h = mat.diagonal().real.copy()
            return
        if self.dim <= (DENSE_DIM if dense_below is None else dense_below):  # tiny spaces: two small matrix products beat gather/scatter
            dense = mat.toarray()
            w, v = np.linalg.eigh(dense)
            self.dense = (dense, w, np.ascontiguousarray(v), np.ascontiguousarray(v.conj()))
            return
        pattern = sp.coo_matrix((np.ones(off.nnz), (off.row, off.col)), shape=off.shape)
        _, labels = connected_components(pattern, directed=False)
        self.phase_idx, self.phase_h, self.groups, self.large = _block_groups(
            sp.coo_matrix(mat), labels, max_block
        )

    def generator(self) -> np.ndarray:
        return self.g.toarray()

    def two_state_form(self) -> tuple[np.ndarray, ...] | None:
        """The generator as isolated states and coupled pairs, if its coupling graph has no
        component larger than two: ``(single, h, first, second, h00, h11, h01)`` — the isolated
        states and their diagonal entries, then each pair's states and its 2 x 2 entries
        (``h01 = G[first, second]``, non-zero); None otherwise (used by the compiled kernel)."""
        cached = self.__dict__.get("_two_state")
        if cached is None:
            cached = self._two_state = (self._find_two_state(),)
        return cached[0]

    def _find_two_state(self) -> tuple[np.ndarray, ...] | None:
        mat = self.g
        diag = mat.diagonal()
        off = sp.triu(sp.coo_matrix(mat - sp.diags(diag)), k=1).tocoo()
        off.eliminate_zeros()
        degree = np.bincount(np.concatenate([off.row, off.col]), minlength=self.dim)
        if degree.max(initial=0) > 1:
            return None
        single = np.flatnonzero(degree == 0)
        return (single, diag[single].real.copy(), off.row.astype(np.int64), off.col.astype(np.int64),
                diag[off.row].real.copy(), diag[off.col].real.copy(), off.data.astype(np.complex128))

    def _phases(self, t: float) -> np.ndarray:
        """``exp(-i t h)`` of a diagonal generator; the last two angles are cached
        (fixed-angle circuits and forward/backward passes reuse them)."""
        cache = self.__dict__.setdefault("_phase_cache", {})
        if t not in cache:
            if len(cache) >= 2:
                cache.pop(next(iter(cache)))
            cache[t] = np.exp(-1j * t * self.h)
        return cache[t]

    def apply(self, view: np.ndarray, t: float) -> np.ndarray:
        if self.is_diagonal:
            view *= self._phases(t)
            return view
        if self.dense is not None:
            _, w, v, v_conj = self.dense
            coeff = view @ v_conj  # rows: V† ψ_b
            coeff *= np.exp(-1j * t * w)
            view[...] = coeff @ v.T
            return view
        if self.phase_idx.size:
            view[:, self.phase_idx] *= np.exp(-1j * t * self.phase_h)
        for grp in self.groups:
            grp.apply(view, t)
        for members, sub in self.large:
            x = view[:, members].T
            view[:, members] = expm_multiply((-1j * t) * sub, x).T
        return view

    def _apply_flat(self, x: np.ndarray, t: float, plan: object) -> np.ndarray:
        return self.apply(x, t)  # subspace views are already flat (B, dim)

    def _overlap_unapply(
        self, work: np.ndarray, nb: int, t: float, plan: object, unapply: bool
    ) -> tuple[complex, np.ndarray]:
        if self.dense is None:
            return super()._overlap_unapply(work, nb, t, plan, unapply)
        # in the eigenbasis: <lam|G|psi> = sum_k conj(c_lam,k) w_k c_psi,k with c = V^dag x,
        # and the un-apply reuses the same coefficients
        _, w, v, v_conj = self.dense
        coeff = work @ v_conj
        ov = complex(np.sum(coeff[nb:].conj() * (w * coeff[:nb])))
        if unapply:
            coeff *= np.exp(1j * t * w)
            work = coeff @ v.T
        return ov, work

    def generator_overlap(self, lam: np.ndarray, psi: np.ndarray) -> complex:
        if self.is_diagonal:
            return complex(np.vdot(lam, psi * self.h))
        if self.dense is not None:
            return complex(np.vdot(lam, psi @ self.dense[0].T))
        return complex(np.vdot(lam, (self.g @ psi.T).T))
