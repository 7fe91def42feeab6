"""The ``[variational]`` configuration section, validated before any work."""

from __future__ import annotations

from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from circuits.layers import NativeLayerSpec
from lgt.config import as_choice, as_float, as_int, check_keys
from lgt.errors import ConfigError
from lgt.variational.ansatz import ANGLE_MODES, family_names
from lgt.variational.stepper import MODES

CRITERIA = ("fidelity", "observables")
ENTANGLERS = ("diagonal", "ms")
VARIATIONAL_KEYS = ("family", "layers", "angles", "dt", "t_final", "tolerance", "step_tolerance",
                    "maxiter", "restarts", "mode", "max_layers", "criterion", "observable_tolerance",
                    "entangler", "entangler_levels", "trotter_orders", "trotter_max_steps",
                    "compile", "compile_fidelity", "shots_error", "seed", "hardware_profile",
                    "compare_families", "fast_fit")


@dataclass(frozen=True)
class VariationalSettings:
    """Resolved ``[variational]`` settings (times in lattice units).

    ``compare_families``: ``fluxline size`` also sizes every other registered layer family that
    can run the model, so that all appear in native gates.

    ``fast_fit``: the fast step fits of :func:`lgt.variational.stepper.fit_trajectory` (stall
    stop, restarts only at stationary points) and the tighter depth abort of
    :func:`lgt.variational.sizing.size_depth`; ``false`` runs the plain fits (for comparisons).

    ``step_tolerance`` defaults to tolerance / n_steps²: by the triangle inequality for the
    Bures angle, n steps of infidelity ε each keep 1 − F(T) ≤ n² ε even when the errors add
    coherently, so the total stays within ``tolerance``. (If they add incoherently,
    1 − F(T) ≈ n ε, and this default is conservative.)
    """

    family: str = "symmetric"
    layers: int = 4
    angles: str = "term"
    dt: float = 0.1
    t_final: float = 1.0
    tolerance: float = 0.01
    step_tolerance: float = 0.0
    maxiter: int = 500
    restarts: int = 1
    mode: str = "dynamics"
    max_layers: int = 8
    criterion: str = "fidelity"
    observable_tolerance: float = 0.05
    entangler: str = "diagonal"
    entangler_levels: tuple[int, int] = (1, 2)
    trotter_orders: tuple[int, ...] = (1, 2)
    trotter_max_steps: int = 256
    compile: bool = True
    compile_fidelity: float = 0.999
    shots_error: float = 0.01
    seed: int = 0
    hardware_profile: str | None = None
    compare_families: bool = True
    fast_fit: bool = True

    @property
    def n_steps(self) -> int:
        """Number of fitted steps, T / dt."""
        return int(round(self.t_final / self.dt))

    def native_spec(self) -> NativeLayerSpec:
        """Native brickwork layer of the hardware family: R^{j,j+1} (x and y) on every qudit, then
        the configured entangler (a diagonal light-shift-type phase Z⊗Z on the field levels, or
        a Mølmer–Sørensen-type gate on ``entangler_levels``)."""
        if self.entangler == "ms":
            return NativeLayerSpec(entangler="ms", ms_levels=tuple(self.entangler_levels))
        return NativeLayerSpec(entangler="diagonal")

    def to_dict(self) -> dict[str, Any]:
        out = asdict(self)
        out["entangler_levels"] = list(self.entangler_levels)
        out["trotter_orders"] = list(self.trotter_orders)
        if out["hardware_profile"] is None:
            del out["hardware_profile"]
        return out


def resolve_variational(config: Mapping[str, Any], levels: int) -> VariationalSettings:
    """Validate ``config["variational"]`` (``t_final`` falls back to ``[evolution] t_final``)."""
    section = config.get("variational", {})
    if not isinstance(section, Mapping):
        raise ConfigError("variational", section, "must be a table")
    check_keys(section, VARIATIONAL_KEYS, "variational")
    p = "variational."
    d = VariationalSettings()
    kw: dict[str, Any] = {}
    kw["family"] = as_choice(section.get("family", d.family), p + "family", family_names())
    kw["layers"] = as_int(section.get("layers", d.layers), p + "layers", minimum=1)
    kw["angles"] = as_choice(section.get("angles", d.angles), p + "angles", ANGLE_MODES)
    kw["dt"] = as_float(section.get("dt", d.dt), p + "dt", positive=True)
    evolution = config.get("evolution", {})
    t_final = section.get("t_final", evolution.get("t_final") if isinstance(evolution, Mapping) else None)
    if t_final is None:
        raise ConfigError(p + "t_final", None, "is required (or give [evolution] t_final)")
    kw["t_final"] = as_float(t_final, p + "t_final", positive=True)
    steps = kw["t_final"] / kw["dt"]
    if abs(steps - round(steps)) > 1e-9 * max(1.0, steps):
        raise ConfigError(p + "dt", kw["dt"], f"must divide t_final = {kw['t_final']} into whole steps")
    n_steps = int(round(steps))
    kw["tolerance"] = as_float(section.get("tolerance", d.tolerance), p + "tolerance", positive=True)
    if kw["tolerance"] >= 1:
        raise ConfigError(p + "tolerance", kw["tolerance"], "is an infidelity and must be below 1")
    default_step = kw["tolerance"] / n_steps ** 2
    kw["step_tolerance"] = as_float(section.get("step_tolerance", default_step), p + "step_tolerance", positive=True)
    kw["maxiter"] = as_int(section.get("maxiter", d.maxiter), p + "maxiter", minimum=1)
    kw["restarts"] = as_int(section.get("restarts", d.restarts), p + "restarts", minimum=0)
    kw["mode"] = as_choice(section.get("mode", d.mode), p + "mode", MODES)
    kw["max_layers"] = as_int(section.get("max_layers", d.max_layers), p + "max_layers", minimum=1)
    kw["criterion"] = as_choice(section.get("criterion", d.criterion), p + "criterion", CRITERIA)
    kw["observable_tolerance"] = as_float(section.get("observable_tolerance", d.observable_tolerance),
                                          p + "observable_tolerance", positive=True)
    kw["entangler"] = as_choice(section.get("entangler", d.entangler), p + "entangler", ENTANGLERS)
    lv = section.get("entangler_levels", list(d.entangler_levels))
    if (not isinstance(lv, (list, tuple)) or len(lv) != 2
            or not all(isinstance(x, int) and not isinstance(x, bool) and 0 <= x < levels for x in lv)
            or lv[0] == lv[1]):
        raise ConfigError(p + "entangler_levels", lv, f"must be two different levels in 0..{levels - 1}")
    kw["entangler_levels"] = tuple(sorted(lv))
    orders = section.get("trotter_orders", list(d.trotter_orders))
    if not isinstance(orders, (list, tuple)) or not orders or any(o not in (1, 2) for o in orders):
        raise ConfigError(p + "trotter_orders", orders, "must be a non-empty list of 1 and/or 2")
    kw["trotter_orders"] = tuple(sorted(set(orders)))
    kw["trotter_max_steps"] = as_int(section.get("trotter_max_steps", d.trotter_max_steps),
                                     p + "trotter_max_steps", minimum=1)
    for name in ("compile", "compare_families", "fast_fit"):
        flag = section.get(name, getattr(d, name))
        if not isinstance(flag, bool):
            raise ConfigError(p + name, flag, "must be true or false")
        kw[name] = flag
    cf = as_float(section.get("compile_fidelity", d.compile_fidelity), p + "compile_fidelity", positive=True)
    if cf >= 1:
        raise ConfigError(p + "compile_fidelity", cf, "must be below 1")
    kw["compile_fidelity"] = cf
    kw["shots_error"] = as_float(section.get("shots_error", d.shots_error), p + "shots_error", positive=True)
    kw["seed"] = as_int(section.get("seed", d.seed), p + "seed", minimum=0)
    prof = section.get("hardware_profile")
    if prof is not None:
        if not isinstance(prof, str) or not Path(prof).is_file():
            raise ConfigError(p + "hardware_profile", prof, "must name an existing TOML file")
    kw["hardware_profile"] = prof
    if not np.isfinite(kw["step_tolerance"]):
        raise ConfigError(p + "step_tolerance", kw["step_tolerance"], "must be finite")
    return VariationalSettings(**kw)
