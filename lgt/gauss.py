"""Gauss's law of the lattice Schwinger model — the one place that encodes it (docs/conventions.md §2).

With level j_n = L_n + S on link n (n = 0..K−1) and the boundary j_{−1} = j_{N−1} = ε + S, Gauss's
law L_n − L_{n−1} = Q_n + q_n with Q_n = n_n − (1 − (−1)^n)/2 reads, site by site,

    j_n = j_{n−1} + n_n + s_n,    s_n = q_n − (1 − (−1)^n)/2    (the *site step*, :func:`site_steps`),

so the occupation implied by the two links around site n is n_n = j_n − j_{n−1} − s_n
(:func:`site_occupation`), and a link configuration is physical iff every implied n_n is 0 or 1.
Everything else here follows from that one rule: occupations of level arrays (exact or mean),
fields from charges, the physical-state count and the ranking of physical configurations in
row-major order (a transfer-matrix pass over the links, never over states).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from lgt.model import ModelParams


def staggering(sites: int) -> np.ndarray:
    """(1 − (−1)^n)/2 for n = 0..sites−1: 1 on odd sites, 0 on even sites (int64)."""
    return np.arange(sites) % 2


def site_steps(params: ModelParams) -> np.ndarray:
    """Site steps s_n = q_n − (1 − (−1)^n)/2 (int64, length N): j_n = j_{n−1} + n_n + s_n."""
    return params.charge_array() - staggering(params.sites)


def _implied(left, right, step):
    """Gauss's law at one site: n = j_right − j_left − s (the rule every function here applies)."""
    return right - left - step


def site_occupation(params: ModelParams, site, left, right):
    """n_site implied by the levels of links site−1 (``left``) and site (``right``); ``None`` stands
    for the boundary level ε + S. Broadcasts over arrays (``site`` too)."""
    eps = params.boundary_level
    return _implied(eps if left is None else left, eps if right is None else right,
                    site_steps(params)[site])


def successors(params: ModelParams, link: int, left) -> np.ndarray:
    """The two levels j_link allowed after level(s) ``left`` of link link−1 (``None``: boundary),
    those with implied n_link = 0 and 1 — the inverse of :func:`site_occupation`. Shape (..., 2);
    they may lie outside the window."""
    left = np.asarray(params.boundary_level if left is None else left)
    return left[..., None] + site_steps(params)[link] + np.arange(2)


def implied_occupations(levels: np.ndarray, params: ModelParams, norm: float = 1) -> np.ndarray:
    """Occupations implied by (mean) levels of shape (..., K); shape (..., N).

    Linear in the levels: with ``norm`` = ‖ψ‖² and ``levels`` = ⟨j_n⟩ (unnormalised expectation
    values) the result is ⟨n_n⟩; with integer levels and ``norm = 1`` it is n_n exactly.
    """
    levels = np.asarray(levels)
    edge = np.full(levels.shape[:-1] + (1,), params.boundary_level * norm, dtype=np.result_type(levels, norm))
    padded = np.concatenate([edge, levels.astype(edge.dtype, copy=False), edge], axis=-1)
    return _implied(padded[..., :-1], padded[..., 1:], (norm * site_steps(params)).astype(padded.dtype))


def occupations_from_levels(levels: np.ndarray, params: ModelParams) -> np.ndarray:
    """n_n of integer level arrays of shape (..., K); shape (..., N), int8.

    Values outside {0, 1} flag register configurations that violate Gauss's law.
    """
    levels = np.asarray(levels).astype(np.int16, copy=False)
    return implied_occupations(levels, params).astype(np.int8)


def occupations_from_mean_levels(mean_levels: np.ndarray, params: ModelParams,
                                 norm: float = 1.0) -> np.ndarray:
    """⟨n_n⟩ from ⟨j_n⟩ (shape (..., K)) through the linear Gauss law; ``norm`` = ‖ψ‖²; shape (..., N)."""
    return implied_occupations(np.asarray(mean_levels, dtype=float), params, float(norm))


def fields_from_occupations(occupations: np.ndarray, params: ModelParams) -> np.ndarray:
    """Fields L_n = ε + Σ_{k≤n} (n_k + s_k), n = 0..K−1, of occupations (..., N); the inverse of
    :func:`occupations_from_levels` (in fields). Float, shape (..., K)."""
    occupations = np.asarray(occupations, dtype=np.int64)
    running = np.cumsum(occupations + site_steps(params), axis=-1)[..., : params.n_links]
    return params.boundary_field + running.astype(float)


def fields_from_charges(params: ModelParams, dynamical: np.ndarray | None = None) -> np.ndarray:
    """Fields L_n = ε + Σ_{k≤n} (Q_k + q_k), n = 0..K−1, for dynamical charges Q (..., N); default Q = 0."""
    Q = np.zeros(params.sites, dtype=np.int64) if dynamical is None else np.asarray(dynamical, dtype=np.int64)
    return fields_from_occupations(Q + staggering(params.sites), params)


def end_field(params: ModelParams, dynamical: np.ndarray | None = None) -> float:
    """L_{N−1} = ε + Σ_k (Q_k + q_k) implied by charges Q (default 0); Gauss's law needs it to be ε."""
    Q = np.zeros(params.sites, dtype=np.int64) if dynamical is None else np.asarray(dynamical, dtype=np.int64)
    return float(params.boundary_field + (Q + params.charge_array()).sum())


def particle_density(occupations: np.ndarray) -> float | np.ndarray:
    """ν = (1/N) Σ_n [n_n on even n, 1 − n_n on odd n] over the last axis (float for one state)."""
    occupations = np.asarray(occupations, dtype=float)
    odd = staggering(occupations.shape[-1]).astype(bool)
    nu = np.where(odd, 1.0 - occupations, occupations).mean(axis=-1)
    return float(nu) if nu.ndim == 0 else nu


def is_physical(levels: np.ndarray, params: ModelParams) -> np.ndarray:
    """True for level rows (..., K) inside the window whose implied occupations are all 0 or 1."""
    levels = np.asarray(levels)
    inside = np.all((levels >= 0) & (levels < params.levels), axis=-1)
    occ = occupations_from_levels(np.clip(levels, -1, params.levels), params)
    return inside & np.all((occ == 0) | (occ == 1), axis=-1)


# ---------------------------------------------------------------------- transfer matrix
def completion_counts(params: ModelParams) -> list[np.ndarray]:
    """c[n][j]: number of physical completions of links n+1..K−1 given j_n = j (exact Python ints).

    Backward transfer-matrix pass: c[K−1][j] = 1 iff the last site's implied occupation is 0 or 1,
    c[n][j] = Σ_{o ∈ {0,1}} c[n+1][j + o + s_{n+1}] over in-window levels.
    """
    d, K = params.levels, params.n_links
    last = site_occupation(params, params.sites - 1, np.arange(d), None)
    counts = [np.zeros(d, dtype=object) for _ in range(K)]
    counts[K - 1][:] = np.isin(last, (0, 1)).astype(int)
    for n in range(K - 2, -1, -1):
        succ = successors(params, n + 1, np.arange(d))          # (d, 2)
        inside = (succ >= 0) & (succ < d)
        counts[n][:] = np.where(inside, counts[n + 1][np.clip(succ, 0, d - 1)], 0).sum(axis=1)
    return counts


def first_levels(params: ModelParams) -> np.ndarray:
    """Levels j_0 allowed next to the boundary (implied n_0 ∈ {0, 1}), in the window."""
    j = successors(params, 0, None)
    return j[(j >= 0) & (j < params.levels)]


def count_physical_states(params: ModelParams) -> int:
    """Dimension of the physical subspace by the transfer matrix (no enumeration)."""
    c0 = completion_counts(params)[0]
    return int(sum(c0[j] for j in first_levels(params)))


@dataclass(frozen=True)
class Ranking:
    """Row-major rank of physical configurations: index = Σ_n table[n][j_{n−1}, j_n].

    ``table[n][a, b]`` (int64, shape (d + 1, d)) counts the physical configurations whose first
    n levels equal the given prefix and whose level on link n is below b; row ``d`` stands for
    the boundary (used at n = 0). Because the physical basis is sorted row-major, the rank is the
    basis index — so lookups need no register codes and work for any d^K.
    """

    tables: np.ndarray   # (K, d + 1, d) int64
    dimension: int

    @classmethod
    def of(cls, params: ModelParams) -> "Ranking":
        d, K = params.levels, params.n_links
        counts = completion_counts(params)
        total = count_physical_states(params)
        if total >= 2 ** 62:
            raise OverflowError(f"{total} physical states cannot be indexed")
        tables = np.zeros((K, d + 1, d), dtype=np.int64)
        for n in range(K):
            c = np.array([min(int(x), 2 ** 62) for x in counts[n]], dtype=np.int64)
            for a in ([d] if n == 0 else range(d)):   # row d: the boundary before link 0
                succ = successors(params, n, None if a == d else a)
                succ = succ[(succ >= 0) & (succ < d)]
                allowed = np.zeros(d, dtype=np.int64)
                allowed[succ] = c[succ]
                tables[n, a] = np.concatenate([[0], np.cumsum(allowed)[:-1]])
        return cls(tables, int(total))

    def contributions(self, links: np.ndarray | int, left: np.ndarray | int, right: np.ndarray) -> np.ndarray:
        """table[n][left, right] for link(s) n; ``left`` = −1 means the boundary."""
        d = self.tables.shape[2]
        a = np.where(np.asarray(left) < 0, d, left)
        if np.ndim(links) == 0:  # one link: a flat gather
            return self.tables[links].ravel()[a * d + right]
        return self.tables[links, a, right]

    def rank(self, levels: np.ndarray, chunk: int = 1 << 16) -> np.ndarray:
        """Row-major rank of physical level rows (M, K); meaningless for unphysical rows."""
        levels = np.asarray(levels)
        K = levels.shape[1]
        out = np.empty(levels.shape[0], dtype=np.int64)
        links = np.arange(K)
        for start in range(0, levels.shape[0], chunk):
            rows = levels[start:start + chunk].astype(np.intp)
            left = np.concatenate([np.full((rows.shape[0], 1), -1, dtype=np.intp), rows[:, :-1]], axis=1)
            out[start:start + chunk] = self.contributions(links[None, :], left, rows).sum(axis=1)
        return out


__all__ = ["staggering", "site_steps", "site_occupation", "implied_occupations", "occupations_from_levels",
           "occupations_from_mean_levels", "fields_from_occupations", "fields_from_charges", "end_field",
           "particle_density", "is_physical", "successors", "completion_counts", "first_levels",
           "count_physical_states", "Ranking"]
