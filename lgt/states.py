"""Initial states of a quench, from the ``[initial]`` TOML section (docs/conventions.md §3).

Kinds
-----
``vacuum``  no dynamical charges: Q_n = 0, fields L_n = ε + Σ_{k≤n} q_k (all L = ε without
            static charges; the bare vacuum has odd sites filled, even sites empty).
``meson``   ``sites = [i, j]`` (or a list of such pairs): a particle on the even site and an
            antiparticle on the odd site of each pair; fields from Gauss's law, so a run of
            L = ε ± 1 stretches between them (+1 if the particle is on the left).
``string``  the flux between the model's static charges, no dynamical pairs (needs charges).
``fields``  ``fields = [L_0, …, L_{K−1}]``: an explicit field configuration.
``ground``  ground state of the model with the overrides of ``[initial.model]`` (a quench);
            only ``hopping``, ``mass``, ``coupling`` and ``theta`` may change, so the state lives
            in the same physical subspace.

The first four are single basis states of the physical subspace; all state vectors returned here
are complex128 of length ``basis.dimension`` and normalised.
"""

from __future__ import annotations

from typing import Any, Mapping

import numpy as np

from lgt.basis import PhysicalBasis
from lgt.gauss import end_field, fields_from_charges, occupations_from_levels
from lgt.config import as_choice, as_float, as_int, check_keys
from lgt.errors import ConfigError
from lgt.model import ModelParams

INITIAL_KINDS = ("vacuum", "meson", "string", "fields", "ground")
#: Model keys a quench from a ground state may override.
QUENCH_KEYS = ("hopping", "mass", "coupling", "theta")
_KIND_KEYS = {"vacuum": (), "meson": ("sites",), "string": (), "fields": ("fields",),
              "ground": ("model",)}


# ---------------------------------------------------------------------- validation
def resolve_initial(section: Mapping[str, Any] | None, params: ModelParams) -> dict[str, Any]:
    """Validate an ``[initial]`` section against ``params``; return it in canonical form.

    Canonical forms: ``{"kind": "vacuum"}``, ``{"kind": "string"}``,
    ``{"kind": "meson", "sites": [[i, j], ...]}``, ``{"kind": "fields", "fields": [...]}``,
    ``{"kind": "ground", "model": {overrides}}``. A missing section means the vacuum.

    Raises
    ------
    ConfigError
        Naming the key (``initial.kind``, ``initial.sites``, ``initial.fields``,
        ``initial.model.<key>``) for impossible requests, before any work.
    """
    section = {} if section is None else section
    if not isinstance(section, Mapping):
        raise ConfigError("initial", section, "must be a table")
    kind = as_choice(section.get("kind", "vacuum"), "initial.kind", INITIAL_KINDS)
    check_keys(section, ("kind",) + _KIND_KEYS[kind], "initial")
    out: dict[str, Any] = {"kind": kind}
    if kind == "meson":
        out["sites"] = _checked_mesons(section.get("sites"), params)
    elif kind == "fields":
        out["fields"] = _checked_fields(section.get("fields"), params)
    elif kind == "string":
        if not params.static_charges:
            raise ConfigError("initial.kind", kind,
                              "the model has no static_charges, so there is no string to stretch")
    elif kind == "ground":
        out["model"] = _checked_overrides(section.get("model", {}), params)
    if kind in ("vacuum", "meson", "string"):
        initial_fields(params, out)  # window check of the implied fields
    return out


def _checked_mesons(sites: Any, params: ModelParams) -> list[list[int]]:
    key = "initial.sites"
    if sites is None:
        raise ConfigError(key, None, "is required for kind = \"meson\" (e.g. sites = [4, 5])")
    if not isinstance(sites, (list, tuple)) or not sites:
        raise ConfigError(key, sites, "must be a pair [i, j] or a list of pairs")
    pairs = [sites] if not isinstance(sites[0], (list, tuple)) else list(sites)
    used: set[int] = set()
    static = {s for s, _ in params.static_charges}
    out = []
    for pair in pairs:
        if not isinstance(pair, (list, tuple)) or len(pair) != 2:
            raise ConfigError(key, sites, f"entry {pair!r} is not a pair of sites [i, j]")
        i, j = (as_int(s, key, minimum=0) for s in pair)
        for s in (i, j):
            if s >= params.sites:
                raise ConfigError(key, sites, f"site {s} is outside 0..{params.sites - 1}")
            if s in used:
                raise ConfigError(key, sites, f"site {s} is used by two mesons")
            if s in static:
                raise ConfigError(key, sites, f"site {s} carries a static charge")
            used.add(s)
        if (i + j) % 2 == 0:
            parity = "even" if i % 2 == 0 else "odd"
            raise ConfigError(key, sites, f"pair {[i, j]} puts both ends on {parity} sites; a meson "
                                          "needs a particle (even site) and an antiparticle (odd site)")
        out.append([i, j])
    return out


def _checked_fields(fields: Any, params: ModelParams) -> list[float]:
    key = "initial.fields"
    K = params.n_links
    if not isinstance(fields, (list, tuple)) or len(fields) != K:
        raise ConfigError(key, fields, f"must be a list of K = {K} link fields")
    values = np.array([as_float(f, key) for f in fields])
    levels = values + params.spin
    if np.any(np.abs(levels - np.rint(levels)) > 1e-9):
        raise ConfigError(key, fields, f"fields must lie on the window grid {list(params.field_values)}")
    levels = np.rint(levels).astype(np.int64)
    bad = np.flatnonzero((levels < 0) | (levels >= params.levels))
    if bad.size:
        raise ConfigError(key, fields, f"field on link {bad[0]} is outside the window "
                                       f"[{-params.spin}, {params.spin}]")
    occ = occupations_from_levels(levels[None, :], params)[0]
    wrong = np.flatnonzero((occ != 0) & (occ != 1))
    if wrong.size:
        n = int(wrong[0])
        raise ConfigError(key, fields, f"breaks Gauss's law at site {n}: it implies occupation "
                                       f"{int(occ[n])} (L_n − L_(n−1) − q_n must give 0 or 1)")
    return [float(v) for v in values]


def _checked_overrides(section: Any, params: ModelParams) -> dict[str, float]:
    if not isinstance(section, Mapping):
        raise ConfigError("initial.model", section, "must be a table of model overrides")
    for key, value in section.items():
        if key not in QUENCH_KEYS:
            raise ConfigError(f"initial.model.{key}", value,
                              f"cannot be changed in a quench (same physical subspace needed); "
                              f"allowed overrides are {', '.join(QUENCH_KEYS)}")
    return {k: as_float(v, f"initial.model.{k}") for k, v in section.items()}


# ---------------------------------------------------------------------- construction
def bare_fields(params: ModelParams, dynamical: np.ndarray | None = None) -> np.ndarray:
    """Fields L_n = ε + Σ_{k≤n} (Q_k + q_k), n = 0..K−1, for dynamical charges ``dynamical`` (length N)."""
    return fields_from_charges(params, dynamical)


def initial_fields(params: ModelParams, resolved: Mapping[str, Any]) -> np.ndarray:
    """The K link fields of a product-state kind (vacuum, string, meson, fields).

    Raises
    ------
    ConfigError
        If the implied fields leave the window or the total charge is not zero.
    """
    kind = resolved["kind"]
    if kind == "fields":
        return np.asarray(resolved["fields"], dtype=float)
    if kind == "ground":
        raise ValueError("the ground kind is not a field configuration")
    Q = np.zeros(params.sites, dtype=np.int64)
    for i, j in resolved.get("sites", []):
        for s in (i, j):
            Q[s] = 1 if s % 2 == 0 else -1  # particle on even, antiparticle on odd
    key = "initial.sites" if kind == "meson" else "initial.kind"
    if end_field(params, Q) != params.boundary_field:
        raise ConfigError("model.static_charges", params.to_dict()["static_charges"],
                          f"the field would end at {end_field(params, Q):+g} instead of ε = "
                          f"{params.boundary_field:+g}: the charges of this {kind} pattern do not cancel "
                          "the static charges (total charge must be zero)")
    fields = bare_fields(params, Q)
    levels = fields + params.spin
    bad = np.flatnonzero((levels < 0) | (levels > params.levels - 1))
    if bad.size:
        raise ConfigError(key, resolved.get("sites", kind),
                          f"implies field {fields[bad[0]]:+g} on link {bad[0]}, outside the window "
                          f"[{-params.spin}, {params.spin}]")
    return fields


def basis_state(basis: PhysicalBasis, fields: np.ndarray) -> np.ndarray:
    """Normalised complex vector of the basis state with the given K fields."""
    idx = int(basis.index_of_fields(np.asarray(fields, dtype=float))[0])
    if idx < 0:
        raise ConfigError("initial.fields", [float(f) for f in fields],
                          "is not a state of the physical subspace")
    psi = np.zeros(basis.dimension, dtype=np.complex128)
    psi[idx] = 1.0
    return psi


def quench_params(params: ModelParams, resolved: Mapping[str, Any]) -> ModelParams:
    """The pre-quench model of a ``ground`` initial state."""
    return params.replace(**resolved.get("model", {}))


def ground_state(basis: PhysicalBasis, params: ModelParams | None = None) -> tuple[float, np.ndarray]:
    """Ground energy and normalised complex128 ground vector of ``params`` (default: the basis model).

    ``params`` must share the physical subspace of ``basis`` (same sites, levels, link, charges, ε).
    """
    from lgt.hamiltonian import build_hamiltonian
    from lgt.spectrum import lowest_eigenpairs

    if params is not None and params != basis.params:
        basis = basis.with_couplings(params)
    energies, vectors = lowest_eigenpairs(build_hamiltonian(basis), 1)
    psi = vectors[:, 0].astype(np.complex128)
    return float(energies[0]), psi / np.linalg.norm(psi)


def prepare_initial_state(basis: PhysicalBasis, resolved: Mapping[str, Any]) -> np.ndarray:
    """Normalised complex128 initial vector on the physical subspace of ``basis``."""
    if resolved["kind"] == "ground":
        return ground_state(basis, quench_params(basis.params, resolved))[1]
    return basis_state(basis, initial_fields(basis.params, resolved))


__all__ = ["INITIAL_KINDS", "QUENCH_KEYS", "resolve_initial", "initial_fields", "bare_fields",
           "basis_state", "ground_state", "quench_params", "prepare_initial_state"]
