"""Physical subspace of the link register, built from Gauss's law (docs/conventions.md §2).

Every physical state is a configuration of the K = N − 1 link fields whose implied occupations
are all 0 or 1 (the rule lives in :mod:`lgt.gauss`). Configurations are grown link by link with
numpy (never by looping over the d^K register), keeping only prefixes that can still be completed
(transfer-matrix counts), so the rows come out in row-major order and need no sort.
Register convention: link n ↔ qudit n, level j = L_n + S, row-major code Σ_n j_n d^{K−1−n}
(qudit 0 most significant). Lookups rank level rows with the transfer matrix
(:class:`lgt.gauss.Ranking`), so they work for any d^K; register codes (int64) exist only when
d^K fits.
"""

from __future__ import annotations

from functools import cached_property

import numpy as np

from lgt import gauss
from lgt.errors import ConfigError, ResourceError
from lgt.gauss import occupations_from_levels, staggering  # noqa: F401  (re-exported for old imports)
from lgt.model import ModelParams

#: Largest register code representable in int64.
_MAX_CODE = np.iinfo(np.int64).max


def register_fits_int64(d: int, K: int) -> bool:
    """True when every register code Σ j_n d^{K−1−n} < d^K fits an int64."""
    return d ** K - 1 <= _MAX_CODE


def enumerate_levels(params: ModelParams) -> np.ndarray:
    """All physical link configurations as level indices, shape (dim, K), int8, row-major order.

    Raises
    ------
    ConfigError
        If Gauss's law admits no configuration (e.g. ε or static charges incompatible with
        the window).
    """
    K, d = params.n_links, params.levels
    counts = gauss.completion_counts(params)
    current = np.array([params.boundary_level], dtype=np.int64)
    parents, chosen = [], []
    for n in range(K):
        # which of the two successors (n_n = 0, 1) of each level can still be completed
        levels = np.arange(d) if n else current
        succ = gauss.successors(params, n, levels)                       # (len(levels), 2)
        inside = (succ >= 0) & (succ < d)
        completable = np.array([c > 0 for c in counts[n]], dtype=bool)
        alive = inside & completable[np.clip(succ, 0, d - 1)]
        key = current if n else np.zeros(1, dtype=np.int64)
        n_children = alive.sum(axis=1).astype(np.int8)[key]
        # children of prefix i stay contiguous and ordered by level: row-major order is kept
        src = np.repeat(np.arange(current.size, dtype=np.int32), n_children)
        first = np.cumsum(n_children, dtype=np.int64) - n_children
        pos = np.arange(src.size, dtype=np.int64) - first[src]
        skip0 = (~alive[:, 0])[key]                                      # only the n_n = 1 child
        occupation = pos + skip0[src]
        start = succ[:, 0][key]
        current = start[src] + occupation
        parents.append(src)
        chosen.append(current.astype(np.int8))
    if current.size == 0:
        raise ConfigError("model", params.to_dict(),
                          "Gauss's law admits no physical state (check boundary_field, "
                          "static_charges and levels)")
    table = np.empty((current.size, K), dtype=np.int8)
    ptr = np.arange(current.size)
    for n in range(K - 1, -1, -1):
        table[:, n] = chosen[n][ptr]
        ptr = parents[n][ptr]
    return table


def codes_of(levels: np.ndarray, d: int) -> np.ndarray:
    """Row-major register codes Σ_n j_n d^{K−1−n} of level arrays of shape (M, K).

    Raises
    ------
    ResourceError
        When d^K does not fit int64 codes (use level rows and :class:`PhysicalBasis` lookups).
    """
    K = levels.shape[1]
    if not register_fits_int64(d, K):
        raise ResourceError(f"register d^K = {d}^{K} does not fit int64 codes")
    weights = d ** np.arange(K - 1, -1, -1, dtype=np.int64)
    return levels.astype(np.int64) @ weights


def levels_of_codes(codes: np.ndarray, d: int, K: int) -> np.ndarray:
    """Level rows (M, K) of row-major register codes (inverse of :func:`codes_of`; object-dtype
    codes beyond int64 are accepted)."""
    codes = np.asarray(codes)
    codes = codes.copy() if codes.dtype == object else codes.astype(np.int64)
    out = np.empty(codes.shape + (K,), dtype=np.int64)
    for n in range(K - 1, -1, -1):
        out[..., n] = codes % d
        codes = codes // d
    return out


class PhysicalBasis:
    """The Gauss-law basis of one model.

    Attributes
    ----------
    params : ModelParams
    level_table : (dim, K) int8 array
        Level j_n = L_n + S of every link, rows in row-major (register-code) order.
    codes : (dim,) array
        Register index of every basis state (ascending), computed on first use: int64 when d^K
        fits, exact Python ints (object dtype) beyond.
    ranking : lgt.gauss.Ranking
        Transfer-matrix ranks: basis index of any physical level row.
    """

    def __init__(self, params: ModelParams) -> None:
        self.params = params
        self.level_table = enumerate_levels(params)
        self.ranking = gauss.Ranking.of(params)

    @property
    def levels(self) -> np.ndarray:
        """Deprecated alias of :attr:`level_table` (``levels`` is d in ModelParams); silent, so code
        that turns warnings into errors keeps running until the callers are renamed."""
        return self.level_table

    @cached_property
    def codes(self) -> np.ndarray:
        """Register code of every state: int64 when d^K fits, else exact Python ints (object array,
        slower; lookups and cuts do not need it — see :meth:`index_of_levels`, :meth:`cut_codes`)."""
        d, K = self.params.levels, self.params.n_links
        if register_fits_int64(d, K):
            return codes_of(self.level_table, d)
        weights = np.array([d ** (K - 1 - n) for n in range(K)], dtype=object)
        return self.level_table.astype(object) @ weights

    def with_couplings(self, params: ModelParams) -> "PhysicalBasis":
        """The same basis (shared arrays) for a model that differs only in w, m, J, θ or link type.

        The Gauss-law basis depends on sites, levels, static charges and ε alone, so parameter
        scans need not enumerate it again.
        """
        same = ("sites", "levels", "static_charges", "boundary_field")
        for name in same:
            if getattr(params, name) != getattr(self.params, name):
                raise ValueError(f"{name} differs ({getattr(params, name)!r} vs {getattr(self.params, name)!r}); "
                                 "build a new PhysicalBasis")
        clone = object.__new__(PhysicalBasis)
        clone.__dict__.update(self.__dict__)
        clone.params = params
        return clone

    # ------------------------------------------------------------------ sizes
    @property
    def dimension(self) -> int:
        """Number of physical states."""
        return int(self.level_table.shape[0])

    @property
    def register_dimension(self) -> int:
        """d^K, the size of the full link register (a Python int; may exceed int64)."""
        return int(self.params.levels) ** self.params.n_links

    # ------------------------------------------------------------------ per-state data
    def fields(self) -> np.ndarray:
        """Electric fields L_n of every state, shape (dim, K), float."""
        return self.level_table - self.params.spin

    def occupations(self) -> np.ndarray:
        """Fermion occupations n_n ∈ {0, 1} implied by Gauss's law, shape (dim, N), int8."""
        return occupations_from_levels(self.level_table, self.params)

    def charges(self) -> np.ndarray:
        """Staggered dynamical charges Q_n = n_n − (1 − (−1)^n)/2, shape (dim, N)."""
        return self.occupations() - staggering(self.params.sites)[None, :].astype(np.int8)

    # ------------------------------------------------------------------ lookup
    def index_of_levels(self, levels: np.ndarray) -> np.ndarray:
        """Basis index of level rows (M, K); −1 where the row is not physical."""
        levels = np.atleast_2d(np.asarray(levels, dtype=np.int64))
        ok = gauss.is_physical(levels, self.params)
        idx = self.ranking.rank(np.where(ok[:, None], levels, self.level_table[0]))
        return np.where(ok, idx, -1)

    def index_after_change(self, rows: np.ndarray, links: tuple[int, ...], new_levels: np.ndarray,
                           levels_t: np.ndarray | None = None) -> np.ndarray:
        """Basis index of states ``rows`` with the levels of contiguous ``links`` replaced by
        ``new_levels`` (shape (len(rows), len(links))); −1 where the result is not physical.

        Only the rank terms of the changed links and their right neighbour are recomputed, so the
        cost is O(len(links)) per state whatever K. ``levels_t``: the transposed level table, when
        the caller has one (faster gathers).
        """
        K = self.params.n_links
        first, last = links[0], links[-1]
        cols = self.level_table.T if levels_t is None else levels_t
        old = {n: cols[n][rows].astype(np.intp) for n in range(max(first - 1, 0), min(last + 2, K))}
        new_levels = np.asarray(new_levels, dtype=np.intp).reshape(len(rows), len(links))
        delta, ok = self.rank_change(links, old, new_levels)
        return np.where(ok, np.asarray(rows, dtype=np.int64) + delta, -1)

    def rank_change(self, links: tuple[int, ...], old: dict[int, np.ndarray],
                    new_levels: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(index change, still physical) when the levels of contiguous ``links`` go from ``old``
        (columns of links first−1..last+1 that exist) to ``new_levels`` (M, len(links)).

        Gauss's law fixes the basis index as a sum of per-link rank terms, so only the terms of
        the changed links and of their right neighbour move.
        """
        K, d = self.params.n_links, self.params.levels
        first, last = links[0], links[-1]
        ok = np.all((new_levels >= 0) & (new_levels < d), axis=1)
        new_levels = np.clip(new_levels, 0, d - 1)
        new = dict(old)
        new.update({n: new_levels[:, n - first] for n in range(first, last + 1)})
        delta = np.zeros(len(new_levels), dtype=np.int64)
        for n in range(first, min(last + 1, K - 1) + 1):
            delta += self.ranking.contributions(n, new.get(n - 1, -1), new[n])
            delta -= self.ranking.contributions(n, old.get(n - 1, -1), old[n])
        for site in range(first, last + 2):
            occ = gauss.site_occupation(self.params, site, new.get(site - 1), new.get(site))
            ok &= (occ == 0) | (occ == 1)
        return delta, ok

    def index_of_codes(self, codes: np.ndarray) -> np.ndarray:
        """Basis index of each register code; −1 where the code is not physical."""
        codes = np.asarray(codes)
        if codes.dtype != object:
            codes = codes.astype(np.int64)
        K, d = self.params.n_links, self.params.levels
        inside = (codes >= 0) & (codes < self.register_dimension)
        idx = self.index_of_levels(levels_of_codes(np.where(inside, codes, 0).ravel(), d, K))
        return np.where(inside, idx.reshape(codes.shape), -1)

    def index_of_fields(self, fields: np.ndarray) -> np.ndarray:
        """Basis index of field configurations (shape (..., K)); −1 where not physical."""
        fields = np.atleast_2d(np.asarray(fields, dtype=float))
        levels = np.rint(fields + self.params.spin).astype(np.int64)
        on_grid = np.all(np.abs(fields + self.params.spin - levels) < 1e-9, axis=1)
        return np.where(on_grid, self.index_of_levels(levels), -1)

    def cut_codes(self, cut: int) -> tuple[np.ndarray, np.ndarray]:
        """Row-major codes of links 0..cut−1 and of links cut..K−1 of every state (two int64 arrays).

        Equal to ``divmod(codes, d^(K−cut))`` but needs only d^cut and d^(K−cut) to fit int64, so
        register cuts work where the whole register code does not.
        """
        d = self.params.levels
        return codes_of(self.level_table[:, :cut], d), codes_of(self.level_table[:, cut:], d)

    # ------------------------------------------------------------------ register maps
    def to_register(self, vector: np.ndarray) -> np.ndarray:
        """Embed a physical-subspace vector (or a (dim, m) block) into the d^K register."""
        vector = np.asarray(vector)
        if vector.shape[0] != self.dimension:
            raise ValueError(f"vector has length {vector.shape[0]}, basis has {self.dimension}")
        out = np.zeros((self.register_dimension,) + vector.shape[1:], dtype=np.result_type(vector, complex))
        out[self.codes] = vector
        return out

    def from_register(self, vector: np.ndarray) -> tuple[np.ndarray, float]:
        """Project a register vector on the physical subspace.

        Returns
        -------
        physical : ndarray
            Components on the physical basis (not renormalised).
        leaked : float
            Weight outside the physical subspace, ‖ψ‖² − ‖Pψ‖².
        """
        vector = np.asarray(vector)
        if vector.shape[0] != self.register_dimension:
            raise ValueError(f"vector has length {vector.shape[0]}, register has {self.register_dimension}")
        physical = vector[self.codes]
        total = float(np.vdot(vector, vector).real)
        kept = float(np.vdot(physical, physical).real)
        return physical, max(total - kept, 0.0)


__all__ = ["PhysicalBasis", "enumerate_levels", "codes_of", "levels_of_codes", "register_fits_int64",
           "occupations_from_levels", "staggering"]
