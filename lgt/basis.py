"""Physical subspace of the link register, built from Gauss's law (DESIGN §2).

Every physical state is a configuration of the K = N − 1 link fields whose implied
occupations n_n = L_n − L_{n−1} − q_n + (1 − (−1)^n)/2 are all 0 or 1, with
L_{−1} = L_{N−1} = ε. Configurations are grown site by site with numpy (never by looping
over the d^K register), pruning those that leave the window or can no longer return to ε.
Register convention: link n ↔ qudit n, level j = L_n + S, row-major code
Σ_n j_n d^{K−1−n} (qudit 0 most significant).
"""

from __future__ import annotations

import numpy as np

from lgt.errors import ConfigError, ResourceError
from lgt.model import ModelParams

#: Largest register code representable in int64.
_MAX_CODE = np.iinfo(np.int64).max


def staggering(sites: int) -> np.ndarray:
    """(1 − (−1)^n)/2: 1 on odd sites, 0 on even sites."""
    return np.arange(sites) % 2


def enumerate_levels(params: ModelParams) -> np.ndarray:
    """All physical link configurations as level indices, shape (dim, K), sorted by code.

    Raises
    ------
    ConfigError
        If Gauss's law admits no configuration (e.g. ε or static charges incompatible with
        the window).
    """
    N, K, d = params.sites, params.n_links, params.levels
    q = params.charge_array()
    odd = staggering(N)
    step = q - odd  # j_n = j_{n-1} + n_n + step_n
    # reachable change of the level from site n+1 to the end: [min, max]
    suffix_min = np.concatenate([np.cumsum(step[::-1])[::-1][1:], [0]])
    suffix_max = suffix_min + np.arange(N - 1, -1, -1)
    eps = params.boundary_level
    current = np.array([eps], dtype=np.int64)
    history = np.zeros((1, 0), dtype=np.int8)
    for n in range(K):
        nxt = np.concatenate([current + step[n], current + step[n] + 1])
        src = np.concatenate([np.arange(current.size), np.arange(current.size)])
        ok = (nxt >= 0) & (nxt < d)
        ok &= (nxt + suffix_min[n] <= eps) & (eps <= nxt + suffix_max[n])
        nxt, src = nxt[ok], src[ok]
        history = np.concatenate([history[src], nxt[:, None].astype(np.int8)], axis=1)
        current = nxt
    # last site: j_{N-1} = j_{N-2} + n + step must equal ε with n ∈ {0, 1}
    last = eps - current - step[N - 1]
    keep = (last == 0) | (last == 1)
    history = history[keep]
    if history.shape[0] == 0:
        raise ConfigError("model", params.to_dict(),
                          "Gauss's law admits no physical state (check boundary_field, "
                          "static_charges and levels)")
    codes = codes_of(history, d)
    order = np.argsort(codes, kind="stable")
    return np.ascontiguousarray(history[order])


def codes_of(levels: np.ndarray, d: int) -> np.ndarray:
    """Row-major register codes Σ_n j_n d^{K−1−n} of level arrays of shape (M, K)."""
    K = levels.shape[1]
    if K * np.log(d) >= np.log(_MAX_CODE):
        raise ResourceError(f"register d^K = {d}^{K} does not fit int64 codes")
    weights = d ** np.arange(K - 1, -1, -1, dtype=np.int64)
    return levels.astype(np.int64) @ weights


class PhysicalBasis:
    """The Gauss-law basis of one model.

    Attributes
    ----------
    params : ModelParams
    levels : (dim, K) int8 array
        Level j_n = L_n + S of every link, rows sorted by register code.
    codes : (dim,) int64 array
        Register index of every basis state (ascending).
    """

    def __init__(self, params: ModelParams) -> None:
        self.params = params
        self.levels = enumerate_levels(params)
        self.codes = codes_of(self.levels, params.levels)

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
        clone.params, clone.levels, clone.codes = params, self.levels, self.codes
        return clone

    # ------------------------------------------------------------------ sizes
    @property
    def dimension(self) -> int:
        """Number of physical states."""
        return int(self.codes.size)

    @property
    def register_dimension(self) -> int:
        """d^K, the size of the full link register."""
        return int(self.params.levels) ** self.params.n_links

    # ------------------------------------------------------------------ per-state data
    def fields(self) -> np.ndarray:
        """Electric fields L_n of every state, shape (dim, K), float."""
        return self.levels - self.params.spin

    def occupations(self) -> np.ndarray:
        """Fermion occupations n_n ∈ {0, 1} implied by Gauss's law, shape (dim, N), int8."""
        return occupations_from_levels(self.levels, self.params)

    def charges(self) -> np.ndarray:
        """Staggered dynamical charges Q_n = n_n − (1 − (−1)^n)/2, shape (dim, N)."""
        return self.occupations() - staggering(self.params.sites)[None, :].astype(np.int8)

    # ------------------------------------------------------------------ lookup
    def index_of_codes(self, codes: np.ndarray) -> np.ndarray:
        """Basis index of each register code; −1 where the code is not physical."""
        codes = np.asarray(codes, dtype=np.int64)
        pos = np.searchsorted(self.codes, codes)
        pos = np.clip(pos, 0, self.dimension - 1)
        return np.where(self.codes[pos] == codes, pos, -1)

    def index_of_fields(self, fields: np.ndarray) -> np.ndarray:
        """Basis index of field configurations (shape (..., K)); −1 where not physical."""
        fields = np.atleast_2d(np.asarray(fields, dtype=float))
        levels = np.rint(fields + self.params.spin).astype(np.int64)
        inside = np.all((levels >= 0) & (levels < self.params.levels), axis=1)
        on_grid = np.all(np.abs(fields + self.params.spin - levels) < 1e-9, axis=1)
        idx = self.index_of_codes(codes_of(np.clip(levels, 0, self.params.levels - 1),
                                           self.params.levels))
        return np.where(inside & on_grid, idx, -1)

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


def occupations_from_levels(levels: np.ndarray, params: ModelParams) -> np.ndarray:
    """n_n = j_n − j_{n−1} − q_n + (1 − (−1)^n)/2 with j_{−1} = j_{N−1} = ε + S; shape (M, N).

    Values outside {0, 1} flag register states that violate Gauss's law.
    """
    eps = params.boundary_level
    M = levels.shape[0]
    padded = np.empty((M, params.sites + 1), dtype=np.int16)
    padded[:, 0] = eps
    padded[:, -1] = eps
    padded[:, 1:-1] = levels
    occ = np.diff(padded, axis=1) - params.charge_array()[None, :] + staggering(params.sites)[None, :]
    return occ.astype(np.int8)
