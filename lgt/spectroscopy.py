"""Spectroscopy: meson masses, static potential, string tension and breaking distance (DESIGN §3).

Static-charge placement rule (kept fixed so the staggered potential does not zigzag): for a
distance r (odd, 1 ≤ r ≤ N − 1) the +1 charge sits on the even site
i = 2·⌊(N/2 − 1 − (r − 1)/2) / 2⌋ and the −1 charge on the odd site j = i + r. The pair is
centred on the chain to within one site, the +1 is always on the even sublattice and the −1 on
the odd one, and the flux between them is L = ε + 1. Even r would need both charges on one
sublattice and is refused.

V(r) = E₀(pair at distance r) − E₀(no pair), lattice energy units. The string tension is the
slope of a least-squares line through the points before the string breaks; breaking is detected
where the discrete slope first drops to half of the initial slope or less (a rule of thumb, common
practice with no specific source), and the breaking distance is where that line meets the mean
plateau value after it. The line's crossing of 2 × (lightest meson mass) is also reported.
"""

from __future__ import annotations

from typing import Any, Mapping, Sequence

import numpy as np

from lgt.basis import PhysicalBasis
from lgt.config import as_int, check_keys
from lgt.errors import ConfigError
from lgt.hamiltonian import build_hamiltonian
from lgt.model import ModelParams
from lgt.spectrum import gaps, lowest_levels

POTENTIAL_KEYS = ("distances", "masses", "method", "bond_dimension")  # method = "mps": lgt.mps.dmrg
#: Fraction of the initial slope below which the potential counts as saturated.
SATURATION_SLOPE = 0.5


def static_pair_sites(sites: int, distance: int, key: str = "potential.distances") -> tuple[int, int]:
    """(even site of the +1 charge, odd site of the −1 charge) for ``distance`` (placement rule above)."""
    r = as_int(distance, key, minimum=1)
    if r % 2 == 0:
        raise ConfigError(key, r, "distances must be odd so that the +1 charge stays on an even site "
                                  "and the −1 charge on an odd site for every r")
    if r > sites - 1:
        raise ConfigError(key, r, f"does not fit on a chain of {sites} sites (largest is {sites - 1})")
    i = 2 * ((sites // 2 - 1 - (r - 1) // 2) // 2)
    i = max(i, 0)
    return i, i + r


def ground_energy(params: ModelParams) -> float:
    """Lowest eigenvalue of H in the physical subspace (lattice energy units)."""
    return float(lowest_levels(build_hamiltonian(PhysicalBasis(params)), 1)[0])


def meson_masses(params: ModelParams, count: int = 3) -> np.ndarray:
    """The ``count`` lowest gaps E_k − E₀ of the model (its meson masses; lattice energy units)."""
    return gaps(lowest_levels(build_hamiltonian(PhysicalBasis(params)), count + 1))


def fit_string(distances: Sequence[int], potential: Sequence[float]) -> dict[str, Any]:
    """String tension from the linear part of V(r) and the breaking distance.

    Returns
    -------
    dict with ``string_tension`` (slope, lattice energy per site), ``intercept``,
    ``fit_distances`` (points used), ``plateau`` (mean V after breaking, or None) and
    ``breaking_distance`` (line ∩ plateau, or None when no saturation is seen).
    """
    r = np.asarray(distances, dtype=float)
    V = np.asarray(potential, dtype=float)
    if r.size < 2:
        return {"string_tension": None, "intercept": None, "fit_distances": r.tolist(),
                "plateau": None, "breaking_distance": None}
    slopes = np.diff(V) / np.diff(r)
    initial = slopes[0]
    drop = np.flatnonzero(slopes <= SATURATION_SLOPE * initial) if initial > 0 else np.array([], int)
    stop = int(drop[0]) + 1 if drop.size else r.size
    stop = max(stop, 2)
    sigma, c = np.polyfit(r[:stop], V[:stop], 1)
    plateau = breaking = None
    if drop.size and stop < r.size:
        plateau = float(V[stop:].mean())
        breaking = float((plateau - c) / sigma) if sigma > 0 else None
    return {"string_tension": float(sigma), "intercept": float(c), "fit_distances": r[:stop].tolist(),
            "plateau": plateau, "breaking_distance": breaking}


def static_potential(params: ModelParams, distances: Sequence[int], masses: int = 3,
                     method: str = "exact", bond_dimension: int = 128) -> dict[str, Any]:
    """V(r) for each distance, meson masses, string tension and breaking-distance estimates.

    ``method = "mps"``: every energy by DMRG (:mod:`lgt.mps.dmrg`, bond dimension cap).

    Raises
    ------
    ConfigError
        If the model already has static charges, or a distance is even / does not fit.
    """
    if params.static_charges:
        raise ConfigError("model.static_charges", params.to_dict()["static_charges"],
                          "must be empty: the potential places its own +1/−1 pair")
    if not isinstance(distances, (list, tuple)) or not distances:
        raise ConfigError("potential.distances", distances, "must be a non-empty list of odd distances")
    rs = sorted({as_int(r, "potential.distances", minimum=1) for r in distances})
    placements = [static_pair_sites(params.sites, r) for r in rs]
    masses = as_int(masses, "potential.masses", minimum=1)
    energy, spectrum_gaps = ground_energy, meson_masses
    if method == "mps":  # DMRG energies (lgt.mps.dmrg)
        from functools import partial

        from lgt.mps import dmrg
        energy = partial(dmrg.ground_energy, chi=bond_dimension)
        spectrum_gaps = partial(dmrg.meson_masses, chi=bond_dimension)
    e_vacuum = energy(params)
    V = [energy(params.replace(static_charges=((i, 1), (j, -1)))) - e_vacuum for i, j in placements]
    m = spectrum_gaps(params, masses)
    fit = fit_string(rs, V)
    threshold = None
    if fit["string_tension"] and fit["string_tension"] > 0 and m.size:
        threshold = float((2 * m[0] - fit["intercept"]) / fit["string_tension"])
    return {"model": params.to_dict(), "distances": rs, "charge_sites": [list(p) for p in placements],
            "potential": [float(v) for v in V], "vacuum_energy": e_vacuum,
            "meson_masses": [float(x) for x in m], **fit, "two_meson_crossing": threshold}


def resolve_potential(config: Mapping[str, Any], distances: Sequence[int] | None = None) -> dict[str, Any]:
    """Validate ``[model]`` and ``[potential]`` (``distances``, ``masses``); CLI distances win."""
    params = ModelParams.from_dict(config.get("model", {}))
    section = config.get("potential", {})
    if not isinstance(section, Mapping):
        raise ConfigError("potential", section, "must be a table")
    check_keys(section, POTENTIAL_KEYS, "potential")
    key = "--distances" if distances else "potential.distances"
    dist = list(distances) if distances else section.get("distances")
    if dist is None:
        raise ConfigError("potential.distances", None, "give --distances or [potential] distances")
    if not isinstance(dist, (list, tuple)) or not dist:
        raise ConfigError(key, dist, "must be a non-empty list of odd distances")
    for r in dist:
        static_pair_sites(params.sites, r, key)
    masses = as_int(section.get("masses", 3), "potential.masses", minimum=1)
    from lgt.mps.dmrg import resolve_solver
    return {"model": params.to_dict(), "potential": {"distances": [int(r) for r in dist], "masses": masses,
                                                     **resolve_solver(section, "potential")}}


__all__ = ["static_pair_sites", "ground_energy", "meson_masses", "fit_string", "static_potential",
           "resolve_potential"]
