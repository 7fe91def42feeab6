"""Spectroscopy: meson masses, static potential, string tension and breaking distance (docs/conventions.md §3).

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

import time
from typing import Any, Callable, Mapping, Sequence

import numpy as np

from lgt.basis import PhysicalBasis
from lgt.config import as_int, check_keys, table
from lgt.errors import ConfigError
from lgt.hamiltonian import build_hamiltonian
from lgt.model import ModelParams
from lgt.resolved import PotentialConfig
from lgt.results import RunResult
from lgt.spectrum import gaps, lowest_levels

POTENTIAL_KEYS = ("distances", "masses", "method", "bond_dimension")  # method = "mps": lgt.mps.dmrg
#: Most meson masses (gaps) a potential run may request.
MAX_MASSES = 1000
#: Fraction of the initial slope below which the potential counts as saturated.
SATURATION_SLOPE = 0.5


def static_pair_sites(sites: int, distance: int) -> tuple[int, int]:
    """(even site of the +1 charge, odd site of the −1 charge) for ``distance`` (placement rule above).

    Raises
    ------
    ValueError
        For r < 1, even r, or r > N − 1.
    """
    r = int(distance)
    if r < 1:
        raise ValueError(f"distance {r} must be at least 1")
    if r % 2 == 0:
        raise ValueError(f"distance {r}: distances must be odd so that the +1 charge stays on an even "
                         "site and the −1 charge on an odd site for every r")
    if r > sites - 1:
        raise ValueError(f"distance {r} does not fit on a chain of {sites} sites (largest is {sites - 1})")
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
                     progress: Callable[[], None] | None = None, method: str = "exact",
                     bond_dimension: int = 128) -> dict[str, Any]:
    """V(r) for each distance, meson masses, string tension and breaking-distance estimates.

    ``progress`` is called after each of the len(distances) + 2 ground-state / spectrum solves.
    ``method = "mps"``: every energy by DMRG (:mod:`lgt.mps.dmrg`, bond dimension cap).

    Raises
    ------
    ValueError
        If the model already has static charges, no distance is given, or a distance is even /
        does not fit.
    """
    if params.static_charges:
        raise ValueError("the model must have no static charges: the potential places its own +1/−1 pair")
    if len(distances) == 0:
        raise ValueError("give at least one distance")
    rs = sorted({int(r) for r in distances})
    placements = [static_pair_sites(params.sites, r) for r in rs]
    masses = int(masses)
    energy, spectrum_gaps = ground_energy, meson_masses
    if method == "mps":  # DMRG energies (lgt.mps.dmrg)
        from functools import partial

        from lgt.mps import dmrg
        energy = partial(dmrg.ground_energy, chi=bond_dimension)
        spectrum_gaps = partial(dmrg.meson_masses, chi=bond_dimension)
    tick = progress or (lambda: None)
    e_vacuum = energy(params)
    tick()
    V = []
    for model in pair_models(params, rs):
        V.append(energy(model) - e_vacuum)
        tick()
    m = spectrum_gaps(params, masses)
    tick()
    fit = fit_string(rs, V)
    threshold = None
    if fit["string_tension"] and fit["string_tension"] > 0 and m.size:
        threshold = float((2 * m[0] - fit["intercept"]) / fit["string_tension"])
    return {"model": params.to_dict(), "distances": rs, "charge_sites": [list(p) for p in placements],
            "potential": [float(v) for v in V], "vacuum_energy": e_vacuum,
            "meson_masses": [float(x) for x in m], **fit, "two_meson_crossing": threshold}


def pair_models(params: ModelParams, distances: Sequence[int]) -> list[ModelParams]:
    """The model with the static +1/−1 pair of each distance (placement rule above)."""
    return [params.replace(static_charges=((i, 1), (j, -1)))
            for i, j in (static_pair_sites(params.sites, r) for r in distances)]


# ------------------------------------------------------------------------ the potential task
def resolve_potential(config: Mapping[str, Any], distances: Sequence[int] | None = None) -> PotentialConfig:
    """Validate ``[model]`` and ``[potential]`` (``distances``: odd r in 1..N−1; ``masses``:
    1..1000, default 3); distances given on the command line (``--distances``) win. Size guard
    over the largest pair model.

    Raises
    ------
    ConfigError
        Naming ``model.static_charges``, ``potential.distances`` (or ``--distances``) or
        ``potential.masses``.
    """
    from lgt.modelcheck import MAX_SITES, checked_model, guard_memory

    params = checked_model(config)
    section = table(config, "potential")
    check_keys(section, POTENTIAL_KEYS, "potential")
    if params.static_charges:
        raise ConfigError("model.static_charges", params.to_dict()["static_charges"],
                          "must be empty: the potential places its own +1/−1 pair")
    key = "--distances" if distances else "potential.distances"
    dist = list(distances) if distances else section.get("distances")
    if dist is None:
        raise ConfigError("potential.distances", None, "give --distances or [potential] distances")
    if not isinstance(dist, (list, tuple)) or not dist:
        raise ConfigError(key, dist, "must be a non-empty list of odd distances")
    rs = []
    for r in dist:
        r = as_int(r, key, minimum=1, maximum=MAX_SITES)
        try:
            static_pair_sites(params.sites, r)
        except ValueError as exc:
            raise ConfigError(key, r, str(exc).split(": ", 1)[-1]) from None
        rs.append(r)
    masses = as_int(section.get("masses", 3), "potential.masses", minimum=1, maximum=MAX_MASSES)
    rs = sorted(set(rs))
    from lgt.mps.dmrg import resolve_solver

    solver = resolve_solver(section, "potential")
    if not solver:  # exact diagonalization: every pair model's subspace must fit in memory
        guard_memory(params, "potential", stored_vectors=max(20, 2 * masses + 3), variants=pair_models(params, rs))
    return PotentialConfig(params, tuple(rs), masses, solver)


def validate_potential(config: Mapping[str, Any]) -> PotentialConfig:
    """The potential task's validator: :func:`resolve_potential` with the config's distances
    (a resolved :class:`PotentialConfig` is returned as is)."""
    return config if isinstance(config, PotentialConfig) else resolve_potential(config)


def run_potential(resolved: PotentialConfig, progress: bool = False) -> RunResult:
    """V(r), meson masses and string fit as a RunResult (``progress``: a bar on stderr).

    Arrays ``distances``, ``charge_sites`` (r × 2: sites of the +1 and −1 charges),
    ``potential`` (lattice energy) and ``meson_masses``; attributes ``vacuum_energy``,
    ``string_tension``, ``intercept``, ``plateau``, ``breaking_distance`` and
    ``two_meson_crossing`` (NaN where not determined).
    """
    t0 = time.perf_counter()
    bar = None
    if progress:
        import sys

        from tqdm import tqdm

        bar = tqdm(total=len(resolved.distances) + 2, desc="potential", unit="solve", file=sys.stderr)
    try:
        out = static_potential(resolved.model, list(resolved.distances), resolved.masses,
                               progress=bar.update if bar is not None else None, **resolved.solver)
    finally:
        if bar is not None:
            bar.close()
    nan = float("nan")
    attributes = {k: (nan if out[k] is None else float(out[k]))
                  for k in ("vacuum_energy", "string_tension", "intercept", "plateau",
                            "breaking_distance", "two_meson_crossing")}
    arrays = {"distances": np.asarray(out["distances"], dtype=np.int64),
              "charge_sites": np.asarray(out["charge_sites"], dtype=np.int64),
              "potential": np.asarray(out["potential"]),
              "meson_masses": np.asarray(out["meson_masses"]),
              "fit_distances": np.asarray(out["fit_distances"], dtype=float)}
    return RunResult(task="potential", parameters=resolved.to_dict(), arrays=arrays,
                     attributes=attributes, timings={"potential": time.perf_counter() - t0})


__all__ = ["static_pair_sites", "ground_energy", "meson_masses", "fit_string", "static_potential",
           "pair_models", "resolve_potential", "validate_potential", "run_potential"]
