"""Checks every task makes on ``[model]`` before any work: numeric ranges, and the size guard.

:class:`~lgt.model.ModelParams` checks the model's structure; this module adds the ranges that
keep every later number finite (documented in the README) and refuses a run whose physical
subspace is empty or would not fit in memory, from the estimate of :mod:`lgt.resources`.
"""

from __future__ import annotations

from typing import Any, Iterable, Mapping

from lgt.config import MAX_MAGNITUDE, as_float, as_int, check_keys, table
from lgt.errors import ConfigError, ResourceError
from lgt.model import ModelParams
from lgt.resources import available_memory, count_physical_states, estimate_memory

#: Largest number of sites N a config may give (the exact tasks stop far earlier, at the
#: memory guard; the bound keeps state counting instant).
MAX_SITES = 1000
#: Largest qudit dimension d.
MAX_LEVELS = 64
#: Largest |q| of a static charge.
MAX_CHARGE = 1000


def check_model_ranges(section: Mapping[str, Any]) -> None:
    """Range checks of a raw ``[model]`` table (ConfigError naming the key); types and structure
    are checked by :class:`ModelParams`."""
    p = "model."
    if "sites" in section:
        as_int(section["sites"], p + "sites", minimum=2, maximum=MAX_SITES)
    if "levels" in section:
        as_int(section["levels"], p + "levels", minimum=2, maximum=MAX_LEVELS)
    for name in ("hopping", "mass", "coupling", "theta", "boundary_field"):
        if section.get(name) is not None:
            as_float(section[name], p + name, maximum=MAX_MAGNITUDE)
    charges = section.get("static_charges")
    if isinstance(charges, (list, tuple)):
        for pair in charges:
            if isinstance(pair, (list, tuple)) and len(pair) == 2:
                as_int(pair[0], p + "static_charges", minimum=0, maximum=MAX_SITES)
                as_int(pair[1], p + "static_charges", minimum=-MAX_CHARGE, maximum=MAX_CHARGE)


def checked_model(config: Mapping[str, Any]) -> ModelParams:
    """``ModelParams`` of ``config["model"]`` after the range checks."""
    if "model" not in config:
        raise ConfigError("model", None, "section is required")
    section = table(config, "model")
    check_model_ranges(section)
    return ModelParams.from_dict(section)


def checked_initial(config: Mapping[str, Any], params: ModelParams) -> dict[str, Any]:
    """Canonical ``[initial]`` (:func:`lgt.states.resolve_initial`), after refusing keys no kind
    reads, so a misspelt ``kind`` is named as such rather than as a key of the default kind."""
    from lgt.states import _KIND_KEYS, resolve_initial

    section = table(config, "initial")
    check_keys(section, ("kind", *dict.fromkeys(k for keys in _KIND_KEYS.values() for k in keys)), "initial")
    return resolve_initial(config.get("initial"), params)


def guard_memory(params: ModelParams, task: str, *, stored_vectors: int = 8,
                 limit_bytes: int | None = None, variants: Iterable[ModelParams] = (),
                 limit_key: str | None = None, extra_bytes: int = 0) -> tuple[int, int]:
    """(physical dimension, estimated peak bytes) of the largest of ``params`` and ``variants``.

    The estimate is :func:`lgt.resources.estimate_memory` with ``stored_vectors`` state vectors
    of the physical subspace, plus ``extra_bytes`` (e.g. register-space vectors).

    Raises
    ------
    ConfigError
        When the physical subspace is empty (keyed ``model.static_charges``).
    ResourceError
        When the estimate exceeds ``limit_bytes`` (default: the memory available now).
    """
    dims = [(count_physical_states(m), m) for m in (params, *variants)]
    dim, largest = max(dims, key=lambda x: x[0])
    empty = [m for d, m in dims if d == 0]
    if empty:
        raise ConfigError("model.static_charges", empty[0].to_dict()["static_charges"],
                          f"leaves no state obeying Gauss's law in the window of d = {params.levels} levels")
    need = estimate_memory(largest, dim, stored_vectors) + int(extra_bytes)
    limit = available_memory() if limit_bytes is None else limit_bytes
    if need > limit:
        hint = f"; set {limit_key} to override" if limit_key else ""
        raise ResourceError(f"{task}: N = {params.sites}, d = {params.levels}: physical dimension {dim:,} "
                            f"needs about {need / 2 ** 30:.1f} GiB, more than the "
                            f"{limit / 2 ** 30:.1f} GiB available{hint}")
    return dim, need
