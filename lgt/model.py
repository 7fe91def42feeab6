"""Model parameters of the lattice Schwinger model (docs/conventions.md §1), validated on construction.

Lattice units throughout: energies in the units of the Hamiltonian couplings,
times in inverse units of the same.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field, replace
from typing import Any, Mapping

import numpy as np

from lgt.config import as_choice, as_float, as_int, check_keys
from lgt.errors import ConfigError

LINK_TYPES = ("truncated", "quantum-link")
MODEL_KEYS = ("sites", "hopping", "mass", "coupling", "theta", "link", "levels",
              "static_charges", "boundary_field")


@dataclass(frozen=True)
class ModelParams:
    """Parameters of H = w Σ(φ†U φ + h.c.) + m Σ(-1)^n φ†φ + J Σ (L + θ/2π)².

    Attributes
    ----------
    sites : int
        Number of staggered sites N (even, ≥ 2); the register has K = N − 1 link qudits.
    hopping, mass, coupling : float
        w, m, J in lattice units.
    theta : float
        Background angle θ (radians).
    link : {"truncated", "quantum-link"}
        Link model; truncated needs odd ``levels``.
    levels : int
        Qudit dimension d; fields L ∈ {−S..S}, S = (d − 1)/2.
    static_charges : tuple of (site, charge)
        Static integer charges q_n (sorted by site, no duplicates, non-zero).
    boundary_field : float or None
        Boundary field ε = L_{−1} = L_{N−1}; ``None`` picks 0 (odd d) or −½ (even d).
    """

    sites: int
    hopping: float = 1.0
    mass: float = 0.0
    coupling: float = 1.0
    theta: float = 0.0
    link: str = "truncated"
    levels: int = 3
    static_charges: tuple[tuple[int, int], ...] = field(default_factory=tuple)
    boundary_field: float | None = None

    def __post_init__(self) -> None:
        p = "model."
        object.__setattr__(self, "sites", as_int(self.sites, p + "sites", minimum=2))
        if self.sites % 2:
            raise ConfigError(p + "sites", self.sites, "must be even (staggered fermions)")
        for name in ("hopping", "mass", "coupling", "theta"):
            object.__setattr__(self, name, as_float(getattr(self, name), p + name))
        as_choice(self.link, p + "link", LINK_TYPES)
        object.__setattr__(self, "levels", as_int(self.levels, p + "levels", minimum=2))
        if self.link == "truncated" and self.levels % 2 == 0:
            raise ConfigError(p + "levels", self.levels,
                              "truncated links need an odd number of levels (integer window); "
                              "use link = \"quantum-link\" for even d")
        object.__setattr__(self, "static_charges", self._checked_charges(self.static_charges))
        object.__setattr__(self, "boundary_field", self._checked_boundary(self.boundary_field))

    def _checked_charges(self, charges: Any) -> tuple[tuple[int, int], ...]:
        key = "model.static_charges"
        if charges is None:
            return ()
        if not isinstance(charges, (list, tuple)):
            raise ConfigError(key, charges, "must be a list of [site, charge] pairs")
        out: dict[int, int] = {}
        for pair in charges:
            if not isinstance(pair, (list, tuple)) or len(pair) != 2:
                raise ConfigError(key, charges, f"entry {pair!r} is not a [site, charge] pair")
            site = as_int(pair[0], key, minimum=0)
            charge = as_int(pair[1], key)
            if site >= self.sites:
                raise ConfigError(key, charges, f"site {site} is outside 0..{self.sites - 1}")
            if site in out:
                raise ConfigError(key, charges, f"site {site} appears twice")
            if charge == 0:
                raise ConfigError(key, charges, f"charge at site {site} is zero")
            out[site] = charge
        return tuple(sorted(out.items()))

    def _checked_boundary(self, eps: Any) -> float:
        key = "model.boundary_field"
        half_integer = self.levels % 2 == 0
        if eps is None:
            return -0.5 if half_integer else 0.0
        eps = as_float(eps, key)
        offset = eps + self.spin  # must be an integer for ε to lie on the window's grid
        if abs(offset - round(offset)) > 1e-12:
            grid = "half-integers" if half_integer else "integers"
            raise ConfigError(key, eps, f"must lie on the window's grid ({grid} for d = {self.levels})")
        return float(round(2 * eps) / 2)

    # ------------------------------------------------------------------ derived quantities
    @property
    def n_links(self) -> int:
        """Number of link qudits K = N − 1."""
        return self.sites - 1

    @property
    def spin(self) -> float:
        """Window half-width S = (d − 1)/2."""
        return (self.levels - 1) / 2

    @property
    def field_values(self) -> np.ndarray:
        """Electric-field values L ∈ {−S, …, S} of the levels j = 0..d−1."""
        return np.arange(self.levels) - self.spin

    @property
    def boundary_level(self) -> int:
        """ε expressed as a (possibly out-of-window) level index j = ε + S."""
        return int(round(self.boundary_field + self.spin))

    def charge_array(self) -> np.ndarray:
        """Static charges q_n as an int array of length N."""
        q = np.zeros(self.sites, dtype=np.int64)
        for site, charge in self.static_charges:
            q[site] = charge
        return q

    def raising_amplitudes(self) -> np.ndarray:
        """⟨j+1|U|j⟩ for j = 0..d−2 (truncated: 1; quantum-link: √(S(S+1) − L(L+1)) / √(S(S+1)))."""
        L = self.field_values[:-1]
        if self.link == "truncated":
            return np.ones(self.levels - 1)
        S = self.spin
        return np.sqrt(S * (S + 1) - L * (L + 1)) / np.sqrt(S * (S + 1))

    def replace(self, **changes: Any) -> "ModelParams":
        """A copy with some fields changed (validated again)."""
        return replace(self, **changes)

    # ------------------------------------------------------------------ (de)serialisation
    @classmethod
    def from_dict(cls, section: Mapping[str, Any]) -> "ModelParams":
        """Build from a ``[model]`` TOML section (unknown keys are rejected)."""
        if not isinstance(section, Mapping):
            raise ConfigError("model", section, "must be a table")
        check_keys(section, MODEL_KEYS, "model")
        if "sites" not in section:
            raise ConfigError("model.sites", None, "is required")
        return cls(**dict(section))

    def to_dict(self) -> dict[str, Any]:
        """Resolved parameters as plain TOML/JSON-compatible values."""
        out = asdict(self)
        out["static_charges"] = [list(p) for p in self.static_charges]
        return out
