"""Observables of physical-subspace states, computed from the basis arrays (docs/conventions.md §3).

All take a state ψ on the physical basis (complex, length ``dim``). Conventions:

* fields L_n on links n = 0..K−1; occupations n_n ∈ {0, 1} on sites n = 0..N−1 implied by
  Gauss's law, n_n = L_n − L_{n−1} − q_n + (1 − (−1)^n)/2 (linear in the fields, so ⟨n_n⟩ follows
  from ⟨L⟩ exactly);
* staggered charge Q_n = n_n − (1 − (−1)^n)/2;
* particle density ν = (1/N) Σ_n [n_n (even n), 1 − n_n (odd n)];
* Loschmidt echo |⟨ψ₀|ψ⟩|², rate −ln(echo)/N;
* entanglement of the link register cut at c (links 0..c−1 | c..K−1), natural logarithm:
  von Neumann S = −Tr ρ ln ρ and Rényi-2 S₂ = −ln Tr ρ²;
* string length ⟨Σ_n |L_n − ε|⟩ (flux units summed over links; the number of flux-carrying
  links when |L − ε| ≤ 1).

Energies are in lattice units; every other quantity is dimensionless.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, Iterable

import numpy as np
import scipy.linalg as sla
import scipy.sparse as sp
from scipy.linalg.blas import zherk

from fluxline_threads import single_threaded_blas
from lgt import gauss
from lgt.basis import PhysicalBasis, staggering
from lgt.errors import ConfigError
from lgt.kernels import occupation_bytes, occupation_products_from_histograms, state_moments

#: Every observable :class:`Observer` can record, with its unit.
OBSERVABLES: dict[str, str] = {
    "electric_field": "dimensionless",          # (K,) ⟨L_n⟩
    "electric_field_squared": "dimensionless",  # (K,) ⟨L_n²⟩
    "occupation": "dimensionless",              # (N,) ⟨n_n⟩
    "charge": "dimensionless",                  # (N,) ⟨Q_n⟩
    "particle_density": "dimensionless",        # ν
    "charge_correlation": "dimensionless",      # (N, N) ⟨Q_i Q_j⟩ − ⟨Q_i⟩⟨Q_j⟩
    "string_length": "dimensionless",           # ⟨Σ |L_n − ε|⟩
    "loschmidt_echo": "dimensionless",
    "loschmidt_rate": "dimensionless",
    "entanglement_entropy": "dimensionless",    # von Neumann, natural log
    "renyi2_entropy": "dimensionless",
    "energy": "lattice energy",
    "norm": "dimensionless",                    # ‖ψ‖²
}

#: Rows per chunk in chunked reductions over the basis (bounds temporaries).
CHUNK_ROWS = 1 << 16


def real_matvec(H: sp.spmatrix, psi: np.ndarray) -> np.ndarray:
    """H ψ for real sparse H and complex ψ without converting H to complex."""
    psi = np.ascontiguousarray(psi, dtype=np.complex128)
    out = H @ psi.view(np.float64).reshape(-1, 2)
    return np.ascontiguousarray(out).view(np.complex128).ravel()


# ---------------------------------------------------------------------- one-body observables
def level_weights(levels_t: np.ndarray, prob: np.ndarray, d: int) -> np.ndarray:
    """Probability of each level on each link, shape (K, d); ``levels_t`` is (K, dim)."""
    return np.stack([np.bincount(row, weights=prob, minlength=d) for row in levels_t])


def occupations_from_mean_levels(mean_levels: np.ndarray, basis: PhysicalBasis,
                                 norm: float = 1.0) -> np.ndarray:
    """⟨n_n⟩ from ⟨j_n⟩ through the (linear) Gauss law; shape (N,). ``norm`` = ‖ψ‖²."""
    return gauss.occupations_from_mean_levels(mean_levels, basis.params, norm)


def particle_density(occupation: np.ndarray) -> float:
    """ν = (1/N) Σ_n [n_n on even n, 1 − n_n on odd n]."""
    return float(gauss.particle_density(np.ravel(occupation)))


def occupation_products(occupations: np.ndarray, prob: np.ndarray) -> np.ndarray:
    """⟨n_i n_j⟩ (N, N), reduced in chunks of :data:`CHUNK_ROWS` basis rows."""
    N = occupations.shape[1]
    out = np.zeros((N, N))
    for start in range(0, occupations.shape[0], CHUNK_ROWS):
        occ = occupations[start:start + CHUNK_ROWS].astype(np.float64)
        out += (occ * prob[start:start + CHUNK_ROWS, None]).T @ occ
    return out


def register_leakage(basis: PhysicalBasis, register_vector: np.ndarray) -> float:
    """Fraction of the weight of a d^K register vector outside the physical subspace."""
    _, leaked = basis.from_register(register_vector)
    total = float(np.vdot(register_vector, register_vector).real)
    return leaked / total if total > 0 else 0.0


def loschmidt(reference: np.ndarray, psi: np.ndarray, sites: int) -> tuple[float, float]:
    """Echo |⟨ψ₀|ψ⟩|² and rate −ln(echo)/N (inf when the echo underflows to zero)."""
    return loschmidt_from_overlap(complex(np.vdot(reference, psi)), sites)


def loschmidt_from_overlap(overlap: complex, sites: int) -> tuple[float, float]:
    """Echo |⟨ψ₀|ψ⟩|² and rate −ln(echo)/N from the overlap ⟨ψ₀|ψ⟩."""
    echo = float(abs(overlap) ** 2)
    rate = -np.log(echo) / sites if echo > 0 else np.inf
    return echo, float(rate)


# ---------------------------------------------------------------------- entanglement
@dataclass(frozen=True)
class CutStructure:
    """Grouping of the basis for the register cut at ``cut`` (links 0..cut−1 | cut..K−1).

    Basis states are grouped by (left code, right code) into the coefficient matrix
    M[left, right] = ψ. Parts are numbered so that equal fields on the links next to the cut
    (L_{cut−1} on the left, L_cut on the right) are contiguous blocks. Gauss's law at site ``cut``
    allows only L_cut − L_{cut−1} − q_cut + (cut mod 2) ∈ {0, 1}, so M is block-bidiagonal and
    the reduced density matrix of the smaller side, ρ = Σ_g X_g X_g† over the column blocks g of
    the larger side, gets one product per block with X_g its (contiguous) non-zero row range.
    Note the cut lies on a site, not a link, so ρ is block-tridiagonal, not block-diagonal.
    """

    cut: int
    left: np.ndarray            # (dim,) left-part index of each basis state
    right: np.ndarray           # (dim,) right-part index
    shape: tuple[int, int]      # (number of left parts, number of right parts)
    transpose: bool             # True when the right side is the smaller one
    groups: tuple[tuple[slice, slice], ...]  # (rows of the kept side, columns of the other side)


def _grouped(codes: np.ndarray, cut_level: np.ndarray) -> tuple[np.ndarray, list[slice], np.ndarray]:
    """Number distinct ``codes`` so that equal ``cut_level`` values are contiguous blocks."""
    unique, first, inverse = np.unique(codes, return_index=True, return_inverse=True)
    level_of = cut_level[first]
    order = np.lexsort((unique, level_of))
    rank = np.empty_like(order)
    rank[order] = np.arange(order.size)
    values, starts = np.unique(level_of[order], return_index=True)
    stops = np.append(starts[1:], order.size)
    return rank[inverse.ravel()], [slice(int(a), int(b)) for a, b in zip(starts, stops)], values


def cut_structure(basis: PhysicalBasis, cut: int | None = None) -> CutStructure:
    """Group the basis for the register cut at ``cut`` (default K // 2), 1 ≤ cut ≤ K − 1."""
    K, d = basis.params.n_links, basis.params.levels
    cut = K // 2 if cut is None else cut
    if isinstance(cut, bool) or not isinstance(cut, (int, np.integer)) or not 1 <= cut <= K - 1:
        raise ConfigError("evolution.cut", cut, f"must be an integer in 1..{K - 1} (K = {K} links)")
    radix = np.int64(d) ** (K - cut)
    a_level, b_level = basis.levels[:, cut - 1], basis.levels[:, cut]
    left, lblocks, lvals = _grouped(basis.codes // radix, a_level)
    right, rblocks, rvals = _grouped(basis.codes % radix, b_level)
    shape = (lblocks[-1].stop, rblocks[-1].stop)
    transpose = shape[1] < shape[0]
    pair_codes = np.unique(a_level.astype(np.int64) * d + b_level)
    pa, pb = pair_codes // d, pair_codes % d
    if transpose:  # keep the right side: groups over left blocks
        kept_blocks, kept_vals, other_blocks, other_vals = rblocks, rvals, lblocks, lvals
        kept_of_pair, other_of_pair = pb, pa
    else:
        kept_blocks, kept_vals, other_blocks, other_vals = lblocks, lvals, rblocks, rvals
        kept_of_pair, other_of_pair = pa, pb
    groups = []
    for k, value in enumerate(other_vals):
        partners = np.searchsorted(kept_vals, np.unique(kept_of_pair[other_of_pair == value]))
        rows = slice(kept_blocks[partners.min()].start, kept_blocks[partners.max()].stop)
        groups.append((rows, other_blocks[k]))
    return CutStructure(int(cut), left, right, shape, bool(transpose), tuple(groups))


def reduced_density_spectrum(psi: np.ndarray, cs: CutStructure) -> np.ndarray:
    """Eigenvalues (trace-normalised) of the reduced density matrix of the smaller side of the cut.

    Equal to the squared singular values of M (the register Schmidt coefficients).
    """
    M = np.zeros(cs.shape, dtype=np.complex128)
    M[cs.left, cs.right] = psi
    if cs.transpose:
        M = M.T
    G = np.zeros((M.shape[0],) * 2, dtype=np.complex128)
    for rows, cols in cs.groups:
        # X X† by zherk: only the upper triangle is formed (half the work of X @ X.conj().T)
        G[rows, rows] += np.triu(zherk(1.0, np.asfortranarray(M[rows, cols])))
    lam = sla.eigvalsh(G, lower=False, overwrite_a=True, check_finite=False)
    lam = np.clip(lam, 0.0, None)
    return lam / lam.sum()


def entropies_from_spectrum(lam: np.ndarray) -> tuple[float, float]:
    """(von Neumann −Σ λ ln λ, Rényi-2 −ln Σ λ²), natural logarithm."""
    nz = lam[lam > 0]
    return float(-(nz * np.log(nz)).sum()) + 0.0, float(-np.log((lam ** 2).sum())) + 0.0


def entanglement_entropy(basis: PhysicalBasis, psi: np.ndarray, cut: int | None = None) -> tuple[float, float]:
    """(von Neumann, Rényi-2) entropy of the register cut at ``cut`` (default K // 2)."""
    return entropies_from_spectrum(reduced_density_spectrum(psi, cut_structure(basis, cut)))


# ---------------------------------------------------------------------- all at once
class Observer:
    """Precomputed tables for measuring many states of one basis.

    Parameters
    ----------
    basis : PhysicalBasis
    hamiltonian : sparse matrix, optional
        Real symmetric H (needed for ``energy``).
    reference : ndarray, optional
        ψ₀ for the Loschmidt echo (needed for ``loschmidt_echo`` / ``loschmidt_rate``).
    cut : int, optional
        Entanglement cut (default K // 2).
    which : iterable of str, optional
        Observables to record (default: all of :data:`OBSERVABLES` that the inputs allow).
    matvec : callable, optional
        ψ ↦ Hψ (defaults to :func:`real_matvec` with ``hamiltonian``).
    energy : callable, optional
        ψ ↦ ⟨ψ|H|ψ⟩ (e.g. :meth:`lgt.propagation.ExactPropagator.energy`, one sweep without
        storing Hψ); default ``vdot(ψ, matvec(ψ))``.

    Every one-body quantity, the echo and the histograms behind ``charge_correlation`` come from
    one sweep over ψ (:func:`lgt.kernels.state_moments`); ⟨n_i n_j⟩ is assembled from joint
    histograms of byte-sized blocks of the occupation pattern instead of N² products per state.
    """

    def __init__(self, basis: PhysicalBasis, hamiltonian: sp.spmatrix | None = None,
                 reference: np.ndarray | None = None, cut: int | None = None,
                 which: Iterable[str] | None = None,
                 matvec: Callable[[np.ndarray], np.ndarray] | None = None,
                 energy: Callable[[np.ndarray], float] | None = None) -> None:
        self.basis = basis
        p = basis.params
        if which is None:
            which = [k for k in OBSERVABLES
                     if not (k == "energy" and hamiltonian is None and matvec is None)
                     and not (k.startswith("loschmidt") and reference is None)]
        self.which = tuple(which)
        for name in self.which:
            if name not in OBSERVABLES:
                raise ConfigError("evolution.observables", name,
                                  f"unknown observable; known: {', '.join(OBSERVABLES)}")
        if "energy" in self.which and hamiltonian is None and matvec is None:
            raise ValueError("energy needs the Hamiltonian")
        self.reference = reference
        self.matvec = matvec or (lambda v: real_matvec(hamiltonian, v))
        self.energy = energy or (lambda v: float(np.vdot(v, self.matvec(v)).real))
        self.levels = np.ascontiguousarray(basis.levels)
        self.values = p.field_values
        self.cut = cut_structure(basis, cut) if {"entanglement_entropy", "renyi2_entropy"} & set(self.which) else None
        self.occ_bytes = (occupation_bytes(basis.occupations()) if "charge_correlation" in self.which
                          else None)

    def measure(self, psi: np.ndarray, entropy: bool = True) -> dict[str, float | np.ndarray]:
        """Every selected observable of ψ (ψ need not be normalised; no renormalisation).

        ``entropy=False`` skips the entanglement entropies (taken at their own stride).
        """
        with single_threaded_blas():
            return self._measure(psi, entropy)

    def _measure(self, psi: np.ndarray, entropy: bool = True) -> dict[str, float | np.ndarray]:
        p = self.basis.params
        w = self.which
        echo_wanted = "loschmidt_echo" in w or "loschmidt_rate" in w
        norm, weights, overlap, hists = state_moments(psi, self.levels, p.levels,
                                                      self.reference if echo_wanted else None,
                                                      self.occ_bytes)
        mean_levels = weights @ np.arange(p.levels)
        occ = occupations_from_mean_levels(mean_levels, self.basis, norm)
        out: dict[str, float | np.ndarray] = {}
        if "electric_field" in w:
            out["electric_field"] = weights @ self.values
        if "electric_field_squared" in w:
            out["electric_field_squared"] = weights @ self.values ** 2
        if "occupation" in w:
            out["occupation"] = occ
        if "charge" in w:
            out["charge"] = occ - staggering(p.sites)
        if "particle_density" in w:
            out["particle_density"] = particle_density(occ)
        if "charge_correlation" in w:
            nn = occupation_products_from_histograms(*hists, p.sites)
            out["charge_correlation"] = nn - np.outer(occ, occ)
        if "string_length" in w:
            out["string_length"] = float((weights @ np.abs(self.values - p.boundary_field)).sum())
        if echo_wanted:
            echo, rate = loschmidt_from_overlap(overlap, p.sites)
            if "loschmidt_echo" in w:
                out["loschmidt_echo"] = echo
            if "loschmidt_rate" in w:
                out["loschmidt_rate"] = rate
        if self.cut is not None and entropy:
            vn, r2 = entropies_from_spectrum(reduced_density_spectrum(psi, self.cut))
            if "entanglement_entropy" in w:
                out["entanglement_entropy"] = vn
            if "renyi2_entropy" in w:
                out["renyi2_entropy"] = r2
        if "energy" in w:
            out["energy"] = float(self.energy(psi))
        if "norm" in w:
            out["norm"] = norm
        return out


__all__ = ["OBSERVABLES", "Observer", "CutStructure", "cut_structure", "reduced_density_spectrum",
           "entropies_from_spectrum", "entanglement_entropy", "level_weights", "particle_density",
           "occupation_products", "occupations_from_mean_levels", "register_leakage", "loschmidt",
           "loschmidt_from_overlap",
           "real_matvec"]
