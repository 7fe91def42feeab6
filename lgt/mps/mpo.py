"""Exact MPO of a sum of local dense operators on a chain of qudits.

Each term (a dense operator on contiguous qudits) is split by successive SVDs into its operator
Schmidt chain; the chains are then placed in the usual finite-state-automaton MPO (channel
"start" = only identities so far, channel "done" = a complete term to the left, one channel per
Schmidt index of every term crossing a bond). No approximation beyond dropping operator Schmidt
values below 1e-13 of the largest, so the MPO is the same operator as the sum of the terms.

Convention: W[k] has shape (D_left, D_right, d, d) with legs (wL, wR, p, p*), physical index
j = L + S (docs/conventions.md §2). The first bond has only "start", the last only "done".
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Iterable, Sequence

import numpy as np

from lgt.hamiltonian import local_terms
from lgt.model import ModelParams

#: Relative cut-off on operator Schmidt values (numerical zero).
OPERATOR_SVD_CUTOFF = 1e-13


@dataclass(frozen=True)
class ChainMPO:
    """MPO tensors W[k] (D_left, D_right, d, d) with the start/done channel of every bond.

    ``start[b]`` / ``done[b]`` index the channels of bond b = 0..K (bond b sits left of site b;
    bond 0 is the left edge, bond K the right edge); None where the channel does not exist.
    """

    tensors: tuple[np.ndarray, ...]
    start: tuple[int | None, ...]
    done: tuple[int | None, ...]

    @property
    def bond_dimensions(self) -> list[int]:
        """Dimension of every internal bond (K − 1 values)."""
        return [W.shape[1] for W in self.tensors[:-1]]

    def to_dense(self) -> np.ndarray:
        """The operator as a dense (d^K, d^K) matrix, qudit 0 most significant (small K only)."""
        op = self.tensors[0][0]  # (D, d, d)
        for W in self.tensors[1:]:
            # op[a, I, J] · W[a, b, i, j] → op'[b, (I i), (J j)]
            op = np.einsum("aIJ,abij->bIiJj", op, W)
            b, n1, d1, n2, d2 = op.shape
            op = op.reshape(b, n1 * d1, n2 * d2)
        return op[0]


def operator_chain(matrix: np.ndarray, sites: int, d: int) -> list[np.ndarray]:
    """Split a (d^k, d^k) operator into tensors A_i (r_i, r_{i+1}, d, d) with r_0 = r_k = 1."""
    op = np.asarray(matrix).reshape((d,) * (2 * sites))
    # order legs as (out_0, in_0, out_1, in_1, ...)
    order = [x for i in range(sites) for x in (i, sites + i)]
    rest = op.transpose(order).reshape(1, -1)
    out = []
    for _ in range(sites - 1):
        r = rest.shape[0]
        mat = rest.reshape(r * d * d, -1)
        U, s, Vh = np.linalg.svd(mat, full_matrices=False)
        keep = max(1, int(np.sum(s > OPERATOR_SVD_CUTOFF * max(s[0], 1e-300))))
        out.append(U[:, :keep].reshape(r, d, d, keep).transpose(0, 3, 1, 2))
        rest = s[:keep, None] * Vh[:keep]
    r = rest.shape[0]
    out.append(rest.reshape(r, d, d, 1).transpose(0, 3, 1, 2))
    return out


def mpo_from_terms(terms: Iterable[tuple[Sequence[int], np.ndarray]], n_sites: int, d: int,
                   constant: float = 0.0) -> ChainMPO:
    """Exact MPO of Σ_terms (dense operator on contiguous ascending qudits) + constant · 1.

    Parameters
    ----------
    terms : iterable of (qudits, matrix)
        ``matrix`` is (d^k, d^k) in row-major order of ``qudits`` (first most significant).
    n_sites, d : chain length K and local dimension.
    constant : added multiple of the identity (lattice energy units).
    """
    K = n_sites
    onsite = [np.zeros((d, d), dtype=complex) for _ in range(K)]
    onsite[0] += constant * np.eye(d)
    chains = []  # (first site, list of tensors)
    for qudits, matrix in terms:
        qudits = tuple(int(q) for q in qudits)
        if list(qudits) != list(range(qudits[0], qudits[0] + len(qudits))):
            raise ValueError(f"qudits {qudits} are not contiguous and ascending")
        if len(qudits) == 1:
            onsite[qudits[0]] += matrix
        else:
            chains.append((qudits[0], operator_chain(matrix, len(qudits), d)))
    # channel layout per bond b (0..K): start, then term channels, then done
    start: list[int | None] = []
    done: list[int | None] = []
    offset: list[dict[int, int]] = []  # bond -> {chain index: first channel}
    widths = []
    for b in range(K + 1):
        pos = 0
        has_start = b < K
        has_done = b > 0
        st = 0 if has_start else None
        pos += int(has_start)
        off = {}
        for c, (first, tens) in enumerate(chains):
            if first < b < first + len(tens):
                off[c] = pos
                pos += tens[b - first - 1].shape[1]
        dn = pos if has_done else None
        pos += int(has_done)
        start.append(st)
        done.append(dn)
        offset.append(off)
        widths.append(pos)
    eye = np.eye(d)
    tensors = []
    for k in range(K):
        W = np.zeros((widths[k], widths[k + 1], d, d), dtype=complex)
        if start[k] is not None and start[k + 1] is not None:
            W[start[k], start[k + 1]] = eye
        if done[k] is not None and done[k + 1] is not None:
            W[done[k], done[k + 1]] = eye
        W[start[k], done[k + 1]] += onsite[k]
        for c, (first, tens) in enumerate(chains):
            i = k - first
            if not 0 <= i < len(tens):
                continue
            A = tens[i]
            rows = [start[k]] if i == 0 else range(offset[k][c], offset[k][c] + A.shape[0])
            cols = [done[k + 1]] if i == len(tens) - 1 else range(offset[k + 1][c], offset[k + 1][c] + A.shape[1])
            W[np.ix_(list(rows), list(cols))] += A
        tensors.append(W)
    if all(np.abs(W.imag).max(initial=0.0) == 0 for W in tensors):
        tensors = [W.real.copy() for W in tensors]
    return ChainMPO(tuple(tensors), tuple(start), tuple(done))


def gauss_penalty_terms(params: ModelParams) -> list[tuple[tuple[int, ...], np.ndarray]]:
    """Σ_n (1 − P_n): P_n projects on configurations whose implied occupation n_n is 0 or 1.

    Zero on the physical subspace, ≥ 1 on every other Gauss-law sector; it commutes with every
    local term (each preserves all sectors), so adding λ times it only lifts unphysical states.
    """
    from lgt.gauss import site_occupation

    K, d = params.n_links, params.levels
    out = []
    for site in range(params.sites):
        qudits = tuple(q for q in (site - 1, site) if 0 <= q < K)
        cfg = np.stack(np.unravel_index(np.arange(d ** len(qudits)), (d,) * len(qudits)), axis=1)
        col = {q: cfg[:, i] for i, q in enumerate(qudits)}
        n = site_occupation(params, site, col.get(site - 1), col.get(site))
        out.append((qudits, np.diag(((n != 0) & (n != 1)).astype(float))))
    return out


def hamiltonian_mpo(params: ModelParams, penalty: float = 0.0, constant: float = 0.0) -> ChainMPO:
    """MPO of H = Σ local_terms(params) (+ penalty · Σ_n (1 − P_n)) (+ constant), lattice units.

    With ``penalty = 0`` this equals ``register_hamiltonian(params, physical_only=False)``.
    """
    terms = [(t.qudits, t.matrix) for t in local_terms(params)]
    if penalty:
        terms += [(q, penalty * m) for q, m in gauss_penalty_terms(params)]
    return mpo_from_terms(terms, params.n_links, params.levels, constant)


def physical_projector_mpo(params: ModelParams) -> ChainMPO:
    """MPO of the projector P = Π_n P_n on the physical subspace (bond dimension d).

    The bond after link k carries its level j_k; the site tensor of link k checks that the
    occupation of site k implied by (j_{k−1}, j_k) is 0 or 1, and the last tensor also checks
    site N − 1 against L_{N−1} = ε.
    """
    K, d = params.n_links, params.levels
    eps = params.boundary_level
    step = params.charge_array() - np.arange(params.sites) % 2  # n_n = j_n − j_{n−1} − step_n

    def ok(site: int, left: np.ndarray, right: np.ndarray) -> np.ndarray:
        n = right - left - step[site]
        return (n == 0) | (n == 1)

    j = np.arange(d)
    tensors = []
    for k in range(K):
        left = np.array([eps]) if k == 0 else j
        allowed = ok(k, left[:, None], j[None, :]).astype(float)  # (Dl, d)
        if k == K - 1:
            allowed = allowed * ok(K, j, np.full(d, eps))[None, :]
        Dr = 1 if k == K - 1 else d
        W = np.zeros((left.size, Dr, d, d))
        for a in range(left.size):
            for jj in range(d):
                W[a, 0 if k == K - 1 else jj, jj, jj] = allowed[a, jj]
        tensors.append(W)
    return ChainMPO(tuple(tensors), tuple([None] * (K + 1)), tuple([None] * (K + 1)))


def to_tenpy(mpo: ChainMPO, sites: list):
    """The MPO as a :class:`tenpy.networks.mpo.MPO` on ``sites`` (trivial charges)."""
    from tenpy.linalg import np_conserved as npc
    from tenpy.networks.mpo import MPO

    Ws = [npc.Array.from_ndarray_trivial(W, labels=["wL", "wR", "p", "p*"]) for W in mpo.tensors]
    return MPO(sites, Ws, bc="finite", IdL=list(mpo.start), IdR=list(mpo.done),
               mps_unit_cell_width=len(sites))


__all__ = ["ChainMPO", "operator_chain", "mpo_from_terms", "hamiltonian_mpo", "gauss_penalty_terms",
           "physical_projector_mpo", "to_tenpy"]
