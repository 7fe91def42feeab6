"""The lattice Schwinger Hamiltonian on the link register (docs/conventions.md §1–2).

Every view is derived from the one term list of :mod:`lgt.terms`:

* :func:`build_hamiltonian` — sparse CSR on the physical (Gauss-law) subspace, real symmetric;
* :func:`physical_terms` — each term restricted to the physical subspace (they sum to H);
* :func:`local_terms` — the dense few-qudit operators themselves (circuit layers, Trotter);
* :func:`register_hamiltonian` — H on the full d^K register (small K only).

A term acts on the physical basis through its local matrix: the local configuration of each
basis state on the term's links selects a column, and each non-zero of that column gives a
target state with those links changed, found by the transfer-matrix rank
(:meth:`lgt.basis.PhysicalBasis.index_after_change`) — vectorised over states, no search.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import reduce

import numpy as np
import scipy.sparse as sp

from lgt.basis import PhysicalBasis, codes_of  # noqa: F401  (codes_of re-exported for old imports)
from lgt.gauss import is_physical
from lgt.model import ModelParams
from lgt.terms import TERM_KINDS, ModelTerm, local_configurations, model_terms  # noqa: F401

#: Deprecated alias of :class:`lgt.terms.ModelTerm` (circuits.terms has its own ``LocalTerm``).
LocalTerm = ModelTerm


# ---------------------------------------------------------------------- one term on the basis
def _codes_of_columns(columns, d: int) -> np.ndarray:
    """Row-major code Σ_i c_i d^{k−1−i} of level columns c_0..c_{k−1} (intp)."""
    code = np.zeros(len(columns[0]), dtype=np.intp)
    for column in columns:
        code *= d
        code += column
    return code


def _local_codes(basis: PhysicalBasis, links: tuple[int, ...], levels_t: np.ndarray | None) -> np.ndarray:
    """Row-major code of every basis state's levels on ``links`` (index into the term's matrix)."""
    cols = levels_t if levels_t is not None else basis.level_table.T
    return _codes_of_columns([cols[q] for q in links], basis.params.levels)


def term_diagonal(basis: PhysicalBasis, term: ModelTerm, levels_t: np.ndarray | None = None) -> np.ndarray:
    """Values of a diagonal term on every basis state, shape (dim,)."""
    return term.operator.diagonal()[_local_codes(basis, term.links, levels_t)]


def term_entries(basis: PhysicalBasis, term: ModelTerm, upper: bool = True,
                 levels_t: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Off-diagonal entries ⟨dst|term|src⟩ of a term on the physical basis.

    ``upper``: only entries whose local configuration increases (dst > src; for a hopping term the
    ones that raise L_link) — the rest follow by symmetry. Returns int64 ``src``, ``dst`` and the
    float values.
    """
    coo = term.operator.tocoo()
    keep = (coo.row > coo.col) if upper else (coo.row != coo.col)
    keep &= coo.data != 0
    rows, cols, data = coo.row[keep], coo.col[keep], coo.data[keep]
    order = np.argsort(cols, kind="stable")
    rows, cols, data = rows[order], cols[order], data[order]
    layer = np.arange(cols.size) - np.searchsorted(cols, cols)  # k-th non-zero of its column
    p, K = basis.params, basis.params.n_links
    # the index change depends on the levels of the term's links and of one neighbour on each side
    ext = tuple(range(max(term.links[0] - 1, 0), min(term.links[-1] + 2, K)))
    if p.levels ** len(ext) <= max(basis.dimension, 1 << 12):  # tables over neighbourhoods
        ext_configs = local_configurations(p.levels, len(ext))
        old = {q: ext_configs[:, i] for i, q in enumerate(ext)}
        code = _local_codes(basis, ext, levels_t)
    else:  # large d: the states themselves are the "neighbourhoods"
        table_t = levels_t if levels_t is not None else basis.level_table.T
        old = {q: table_t[q].astype(np.intp) for q in ext}
        code = np.arange(basis.dimension)
    local_of_ext = _codes_of_columns([old[q] for q in term.links], p.levels)
    configs = local_configurations(p.levels, len(term.links))
    out_src, out_dst, out_val = [], [], []
    for k in range(int(layer.max()) + 1 if cols.size else 0):
        sel = layer == k
        target = np.full(term.operator.shape[1], -1, dtype=np.intp)
        value = np.zeros(term.operator.shape[1])
        target[cols[sel]] = rows[sel]
        value[cols[sel]] = data[sel]
        # index change and value per neighbourhood configuration, then one gather per state
        tgt = target[local_of_ext]
        delta, ok = basis.rank_change(term.links, old, configs[np.maximum(tgt, 0)])
        src = np.flatnonzero(tgt[code] >= 0)
        at = code[src]
        if not np.all(ok[at]):  # the terms preserve Gauss's law: the target must be physical
            raise AssertionError(f"{term.kind} term {term.index} left the physical subspace")
        out_src.append(src)
        out_dst.append(src + delta[at])
        out_val.append(value[local_of_ext][at])
    if not out_src:
        return np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0)
    return np.concatenate(out_src).astype(np.int64), np.concatenate(out_dst), np.concatenate(out_val)


def _symmetric_csr(n: int, src: list[np.ndarray], dst: list[np.ndarray], val: list[np.ndarray],
                   diag: np.ndarray | None) -> sp.csr_matrix:
    """CSR of upper entries (src → dst, one array per term), their mirror images and a diagonal.

    The pieces are concatenated once, straight into the COO arrays (bounds the build's peak memory).
    """
    index_type = np.int32 if n < 2 ** 31 - 1 else np.int64
    idx = [np.arange(n, dtype=index_type)] if diag is not None else []
    rows = np.concatenate([a.astype(index_type, copy=False) for a in src + dst] + idx or [np.zeros(0, index_type)])
    cols = np.concatenate([a.astype(index_type, copy=False) for a in dst + src] + idx or [np.zeros(0, index_type)])
    vals = np.concatenate(val + val + ([diag] if diag is not None else []) or [np.zeros(0)])
    for pieces in (src, dst, val):
        pieces.clear()
    H = sp.coo_matrix((vals, (rows, cols)), shape=(n, n))
    del rows, cols, vals
    H = H.tocsr()
    H.sum_duplicates()
    return H


# ---------------------------------------------------------------------- physical subspace
def hopping_pairs(basis: PhysicalBasis, link: int,
                  occupations: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Basis pairs connected by the hopping across ``link`` (``occupations`` is accepted and unused).

    Returns
    -------
    source, target : int64 arrays
        ``target`` has L_link raised by one relative to ``source``.
    amplitude : float array
        ⟨target|H_hop|source⟩ = w ⟨L+1|U|L⟩.
    """
    (term,) = [t for t in model_terms(basis.params, ("hopping",)) if t.index == link]
    return term_entries(basis, term)


def _kind_diagonal(basis: PhysicalBasis, kind: str) -> np.ndarray:
    levels_t = np.ascontiguousarray(basis.level_table.T)
    out = np.zeros(basis.dimension)
    for term in model_terms(basis.params, (kind,)):
        out += term_diagonal(basis, term, levels_t)
    return out


def mass_diagonal(basis: PhysicalBasis, occupations: np.ndarray | None = None) -> np.ndarray:
    """m Σ_n (−1)^n n_n for every basis state (``occupations`` is accepted and unused)."""
    return _kind_diagonal(basis, "mass")


def electric_diagonal(basis: PhysicalBasis) -> np.ndarray:
    """J Σ_n (L_n + θ/2π)² for every basis state."""
    return _kind_diagonal(basis, "electric")


def build_hamiltonian(basis: PhysicalBasis) -> sp.csr_matrix:
    """H on the physical subspace as a real symmetric CSR matrix (lattice energy units)."""
    n = basis.dimension
    levels_t = np.ascontiguousarray(basis.level_table.T)
    index_type = np.int32 if n < 2 ** 31 - 1 else np.int64
    diag = np.zeros(n)
    src, dst, val = [], [], []
    for term in model_terms(basis.params):
        if term.operator.diagonal().any():
            diag += term_diagonal(basis, term, levels_t)
        if not term.diagonal:
            s, t, v = term_entries(basis, term, levels_t=levels_t)
            src.append(s.astype(index_type))
            dst.append(t.astype(index_type))
            val.append(v)
    del levels_t
    return _symmetric_csr(n, src, dst, val, diag)


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
    n = basis.dimension
    levels_t = np.ascontiguousarray(basis.level_table.T)
    out = []
    for term in model_terms(basis.params):
        diag = term_diagonal(basis, term, levels_t)
        if term.diagonal:
            m = sp.diags(diag).tocsr()
        else:
            m = _symmetric_csr(n, *([x] for x in term_entries(basis, term, levels_t=levels_t)),
                               diag if diag.any() else None)
        out.append(PhysicalTerm(term.kind, term.index, m))
    return out


# ---------------------------------------------------------------------- local register terms
def local_terms(params: ModelParams) -> list[ModelTerm]:
    """All terms of H as dense few-qudit operators (the term list of :mod:`lgt.terms`)."""
    return model_terms(params)


def embed_term(matrix: np.ndarray, qudits: tuple[int, ...], n_qudits: int, d: int) -> sp.csr_matrix:
    """Sparse d^K operator of a dense operator on contiguous ascending ``qudits`` (identity elsewhere)."""
    if list(qudits) != list(range(qudits[0], qudits[0] + len(qudits))):
        raise ValueError(f"qudits {qudits} are not contiguous")
    left = sp.identity(d ** qudits[0], format="csr")
    right = sp.identity(d ** (n_qudits - qudits[-1] - 1), format="csr")
    return sp.kron(sp.kron(left, sp.csr_matrix(matrix)), right, format="csr")


#: Deprecated alias of :func:`embed_term` (circuits.register has its own dense ``embed_local``).
embed_local = embed_term

#: Largest register the full-space builders accept (d^K entries).
MAX_REGISTER_DIMENSION = 5_000_000


def register_hamiltonian(params: ModelParams, physical_only: bool = True,
                         basis: PhysicalBasis | None = None) -> sp.csr_matrix:
    """H on the full d^K link register (small registers only).

    Parameters
    ----------
    physical_only : bool
        True: P H P — the physical-subspace Hamiltonian embedded, zero on unphysical states.
        False: the sum of the term list — equal to P H P on the physical subspace and
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
    mats = [embed_term(t.operator, t.links, params.n_links, params.levels) for t in model_terms(params)]
    return reduce(lambda a, b: a + b, mats).tocsr()


def register_gauss_violation(params: ModelParams) -> np.ndarray:
    """Boolean mask over the d^K register: True where some implied occupation is not in {0, 1}."""
    return ~is_physical(local_configurations(params.levels, params.n_links), params)


__all__ = ["build_hamiltonian", "register_hamiltonian", "local_terms", "physical_terms",
           "hopping_pairs", "mass_diagonal", "electric_diagonal", "term_entries", "term_diagonal",
           "embed_term", "embed_local", "ModelTerm", "LocalTerm", "PhysicalTerm",
           "register_gauss_violation", "codes_of", "TERM_KINDS"]
