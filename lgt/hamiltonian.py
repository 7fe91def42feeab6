"""The lattice Schwinger Hamiltonian on the link register (DESIGN §1–2).

Three views of one operator:

* :func:`build_hamiltonian` — sparse CSR on the physical (Gauss-law) subspace, real symmetric;
* :func:`register_hamiltonian` — the same on the full d^K register (small K only);
* :func:`local_terms` / :func:`physical_terms` — its decomposition into hopping terms
  (3-link operators), mass terms (2-link diagonal) and electric terms (1-link diagonal),
  used by circuit layers and Trotter circuits.

Hopping across link n raises L_n by one iff n_n = 0 and n_{n+1} = 1 (and lowers it in the
conjugate case), with amplitude w ⟨L+1|U|L⟩; the constant Jordan–Wigner sign is dropped.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import reduce

import numpy as np
import scipy.sparse as sp

from lgt.basis import PhysicalBasis, codes_of, occupations_from_levels, staggering
from lgt.model import ModelParams

TERM_KINDS = ("hopping", "mass", "electric")


# ---------------------------------------------------------------------- physical subspace
def hopping_pairs(basis: PhysicalBasis, link: int,
                  occupations: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Basis pairs connected by the hopping across ``link``.

    Returns
    -------
    source, target : int64 arrays
        ``target`` has L_link raised by one relative to ``source``.
    amplitude : float array
        ⟨target|H_hop|source⟩ = w ⟨L+1|U|L⟩.
    """
    p = basis.params
    occ = basis.occupations() if occupations is None else occupations
    j = basis.levels[:, link]
    src = np.flatnonzero((occ[:, link] == 0) & (occ[:, link + 1] == 1) & (j < p.levels - 1))
    step = np.int64(p.levels) ** (p.n_links - 1 - link)
    dst = basis.index_of_codes(basis.codes[src] + step)
    if np.any(dst < 0):  # Gauss's law guarantees the raised state is physical
        raise AssertionError("hopping left the physical subspace; basis is inconsistent")
    amp = p.hopping * p.raising_amplitudes()[j[src]]
    return src, dst, amp


def mass_diagonal(basis: PhysicalBasis, occupations: np.ndarray | None = None) -> np.ndarray:
    """m Σ_n (−1)^n n_n for every basis state (per-site columns summed)."""
    occ = basis.occupations() if occupations is None else occupations
    sign = 1 - 2 * staggering(basis.params.sites)
    return basis.params.mass * (occ @ sign).astype(float)


def electric_diagonal(basis: PhysicalBasis) -> np.ndarray:
    """J Σ_n (L_n + θ/2π)² for every basis state."""
    p = basis.params
    per_level = p.coupling * (p.field_values + p.theta / (2 * np.pi)) ** 2
    return per_level[basis.levels].sum(axis=1)


def build_hamiltonian(basis: PhysicalBasis) -> sp.csr_matrix:
    """H on the physical subspace as a real symmetric CSR matrix (lattice energy units)."""
    occ = basis.occupations()
    index_type = np.int32 if basis.dimension < 2 ** 31 - 1 else np.int64
    rows, cols, vals = [], [], []
    for link in range(basis.params.n_links):
        src, dst, amp = hopping_pairs(basis, link, occ)
        src, dst = src.astype(index_type), dst.astype(index_type)
        rows += [src, dst]
        cols += [dst, src]
        vals += [amp, amp]
    diag = mass_diagonal(basis, occ) + electric_diagonal(basis)
    del occ
    idx = np.arange(basis.dimension, dtype=index_type)
    rows.append(idx)
    cols.append(idx)
    vals.append(diag)
    n = basis.dimension
    H = sp.coo_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
                      shape=(n, n)).tocsr()
    H.sum_duplicates()
    return H


@dataclass(frozen=True)
class PhysicalTerm:
    """One term of H restricted to the physical subspace.

    ``kind`` is ``"hopping"`` (``index`` = link), ``"mass"`` (``index`` = site) or
    ``"electric"`` (``index`` = link); ``matrix`` is real symmetric sparse (dim × dim).
    """

    kind: str
    index: int
    matrix: sp.csr_matrix


def physical_terms(basis: PhysicalBasis) -> list[PhysicalTerm]:
    """Decomposition of :func:`build_hamiltonian` into its local terms (they sum to H)."""
    p = basis.params
    n = basis.dimension
    occ = basis.occupations()
    terms = []
    for link in range(p.n_links):
        src, dst, amp = hopping_pairs(basis, link, occ)
        m = sp.coo_matrix((np.concatenate([amp, amp]), (np.concatenate([src, dst]), np.concatenate([dst, src]))),
                          shape=(n, n)).tocsr()
        terms.append(PhysicalTerm("hopping", link, m))
    sign = 1 - 2 * staggering(p.sites)
    for site in range(p.sites):
        terms.append(PhysicalTerm("mass", site, sp.diags(p.mass * sign[site] * occ[:, site].astype(float)).tocsr()))
    per_level = p.coupling * (p.field_values + p.theta / (2 * np.pi)) ** 2
    for link in range(p.n_links):
        terms.append(PhysicalTerm("electric", link, sp.diags(per_level[basis.levels[:, link]]).tocsr()))
    return terms


# ---------------------------------------------------------------------- local register terms
@dataclass(frozen=True)
class LocalTerm:
    """A term of H as a dense operator on a few register qudits.

    Attributes
    ----------
    kind : {"hopping", "mass", "electric"}
    index : int
        Link (hopping, electric) or site (mass) of the term.
    qudits : tuple of int
        Register qudits it acts on, ascending (row-major order inside ``matrix``).
    matrix : (d^k, d^k) float array
        Real symmetric.
    """

    kind: str
    index: int
    qudits: tuple[int, ...]
    matrix: np.ndarray


def _local_levels(d: int, k: int) -> np.ndarray:
    """All k-qudit level configurations, row-major, shape (d^k, k)."""
    return np.stack(np.unravel_index(np.arange(d ** k), (d,) * k), axis=1)


def _site_occupation(params: ModelParams, site: int, left: np.ndarray | None, right: np.ndarray | None) -> np.ndarray:
    """n_site from the levels of link site−1 (``left``) and link site (``right``); None = boundary ε."""
    eps = params.boundary_level
    j_left = eps if left is None else left
    j_right = eps if right is None else right
    return j_right - j_left - params.charge_array()[site] + site % 2


def local_terms(params: ModelParams) -> list[LocalTerm]:
    """All terms of H as dense few-qudit operators (hopping on ≤ 3 links, mass on ≤ 2, electric on 1).

    On the physical subspace they sum to :func:`build_hamiltonian`; on the whole register they
    preserve every Gauss-law sector.
    """
    K, d = params.n_links, params.levels
    terms: list[LocalTerm] = []
    amps = params.raising_amplitudes()
    for link in range(K):
        qudits = tuple(q for q in (link - 1, link, link + 1) if 0 <= q < K)
        cfg = _local_levels(d, len(qudits))
        col = {q: cfg[:, i] for i, q in enumerate(qudits)}
        n_here = _site_occupation(params, link, col.get(link - 1), col[link])
        n_next = _site_occupation(params, link + 1, col[link], col.get(link + 1))
        jl = col[link]
        src = np.flatnonzero((n_here == 0) & (n_next == 1) & (jl < d - 1))
        step = d ** (len(qudits) - 1 - qudits.index(link))
        mat = np.zeros((d ** len(qudits),) * 2)
        mat[src + step, src] = params.hopping * amps[jl[src]]
        mat += mat.T
        terms.append(LocalTerm("hopping", link, qudits, mat))
    sign = 1 - 2 * staggering(params.sites)
    for site in range(params.sites):
        qudits = tuple(q for q in (site - 1, site) if 0 <= q < K)
        cfg = _local_levels(d, len(qudits))
        col = {q: cfg[:, i] for i, q in enumerate(qudits)}
        n = _site_occupation(params, site, col.get(site - 1), col.get(site))
        terms.append(LocalTerm("mass", site, qudits, np.diag(params.mass * sign[site] * n.astype(float))))
    per_level = params.coupling * (params.field_values + params.theta / (2 * np.pi)) ** 2
    for link in range(K):
        terms.append(LocalTerm("electric", link, (link,), np.diag(per_level)))
    return terms


def embed_local(matrix: np.ndarray, qudits: tuple[int, ...], n_qudits: int, d: int) -> sp.csr_matrix:
    """Sparse d^K operator of a dense operator on contiguous ascending ``qudits`` (identity elsewhere)."""
    if list(qudits) != list(range(qudits[0], qudits[0] + len(qudits))):
        raise ValueError(f"qudits {qudits} are not contiguous")
    left = sp.identity(d ** qudits[0], format="csr")
    right = sp.identity(d ** (n_qudits - qudits[-1] - 1), format="csr")
    return sp.kron(sp.kron(left, sp.csr_matrix(matrix)), right, format="csr")


#: Largest register the full-space builders accept (d^K entries).
MAX_REGISTER_DIMENSION = 5_000_000


def register_hamiltonian(params: ModelParams, physical_only: bool = True,
                         basis: PhysicalBasis | None = None) -> sp.csr_matrix:
    """H on the full d^K link register (small registers only).

    Parameters
    ----------
    physical_only : bool
        True: P H P — the physical-subspace Hamiltonian embedded, zero on unphysical states.
        False: the sum of :func:`local_terms` — equal to P H P on the physical subspace and
        also acting (block-diagonally) on the unphysical Gauss-law sectors.
    basis : PhysicalBasis, optional
        The model's basis when already built (``physical_only``), so it is not enumerated again.
    """
    D = params.levels ** params.n_links
    if D > MAX_REGISTER_DIMENSION:
        raise ValueError(f"register dimension {params.levels}^{params.n_links} = {D} exceeds "
                         f"{MAX_REGISTER_DIMENSION}; use the physical subspace instead")
    if physical_only:
        basis = PhysicalBasis(params) if basis is None else basis.with_couplings(params)
        H = build_hamiltonian(basis).tocoo()
        return sp.csr_matrix((H.data, (basis.codes[H.row], basis.codes[H.col])), shape=(D, D))
    mats = [embed_local(t.matrix, t.qudits, params.n_links, params.levels) for t in local_terms(params)]
    return reduce(lambda a, b: a + b, mats).tocsr()


def register_gauss_violation(params: ModelParams) -> np.ndarray:
    """Boolean mask over the d^K register: True where some implied occupation is not in {0, 1}."""
    levels = _local_levels(params.levels, params.n_links)
    occ = occupations_from_levels(levels, params)
    return ~np.all((occ == 0) | (occ == 1), axis=1)


__all__ = ["build_hamiltonian", "register_hamiltonian", "local_terms", "physical_terms",
           "hopping_pairs", "mass_diagonal", "electric_diagonal", "embed_local", "LocalTerm",
           "PhysicalTerm", "register_gauss_violation", "codes_of"]
