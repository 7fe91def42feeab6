"""The ``[variational]`` configuration section, validated before any work."""

from __future__ import annotations

from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any, Mapping

from circuits.layers import NativeLayerSpec
from lgt.config import as_bool, as_choice, as_float, as_fraction, as_int, check_keys, config_folder, table
from lgt.errors import ConfigError
from lgt.variational.ansatz import ANGLE_MODES, family_names
from lgt.variational.stepper import MODES

CRITERIA = ("fidelity", "observables")
ENTANGLERS = ("diagonal", "ms")
VARIATIONAL_KEYS = ("family", "layers", "angles", "dt", "t_final", "tolerance", "step_tolerance",
                    "maxiter", "restarts", "mode", "max_layers", "criterion", "observable_tolerance",
                    "entangler", "entangler_levels", "trotter_orders", "trotter_max_steps",
                    "compile", "compile_fidelity", "shots_error", "seed", "hardware_profile",
                    "compare_families", "fast_fit", "noise_sizing", "workers")
#: Bounds of our choosing that keep every run finite (documented in the README):
#: depth D, fitted steps T/dt, optimizer iterations, restarts and Trotter steps.
MAX_LAYERS = 200
MAX_STEPS = 10_000
MAX_ITERATIONS = 1_000_000
MAX_RESTARTS = 100
#: Most worker processes ``size`` starts (a bound of our choosing).
MAX_WORKERS = 256
MAX_TROTTER_STEPS = 1_000_000
#: Smallest shot-count standard error (1/ε² shots; 1e-6 is already 1e12 shots).
MIN_SHOTS_ERROR = 1e-6


@dataclass(frozen=True)
class VariationalSettings:
    """Resolved ``[variational]`` settings (times in lattice units).

    ``compare_families``: ``fluxline size`` also sizes every other registered layer family that
    can run the model, so that all appear in native gates.

    ``fast_fit``: the fast step fits of :func:`lgt.variational.stepper.fit_trajectory` (stall
    stop, restarts only at stationary points) and the tighter depth abort of
    :func:`lgt.variational.sizing.size_depth`; ``false`` runs the plain fits (for comparisons).

    ``workers``: processes ``fluxline size`` fits depths and families on (0, the default: min(2,
    usable cores) for fit spaces of at least
    :data:`lgt.variational.parallel.PARALLEL_MIN_DIMENSION` amplitudes, else 1; 1: in this
    process). The results are those of the serial search (:mod:`lgt.variational.parallel`).

    ``noise_sizing``: ``fluxline size`` also simulates every depth's native circuit under the
    profile's noise model (:func:`lgt.variational.sizing.noise_columns`; only for registers up to
    :data:`lgt.variational.sizing.NOISE_SIZING_MAX_STRINGS` strings).

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
    noise_sizing: bool = True
    workers: int = 0

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
    """Validate ``config["variational"]`` (``t_final`` falls back to ``[evolution] t_final``).

    A relative ``hardware_profile`` is resolved against the config file's folder
    (:func:`lgt.config.config_folder`) and stored as an absolute path; the profile itself is
    checked by :func:`load_checked_profile`.
    """
    section = table(config, "variational")
    check_keys(section, VARIATIONAL_KEYS, "variational")
    p = "variational."
    d = VariationalSettings()
    kw: dict[str, Any] = {}
    kw["family"] = as_choice(section.get("family", d.family), p + "family", family_names())
    kw["layers"] = as_int(section.get("layers", d.layers), p + "layers", minimum=1, maximum=MAX_LAYERS)
    kw["angles"] = as_choice(section.get("angles", d.angles), p + "angles", ANGLE_MODES)
    kw["dt"] = as_float(section.get("dt", d.dt), p + "dt", positive=True)
    evolution = config.get("evolution", {})
    t_final = section.get("t_final", evolution.get("t_final") if isinstance(evolution, Mapping) else None)
    if t_final is None:
        raise ConfigError(p + "t_final", None, "is required (or give [evolution] t_final)")
    kw["t_final"] = as_float(t_final, p + "t_final", positive=True)
    steps = kw["t_final"] / kw["dt"]
    if steps > MAX_STEPS + 0.5:
        raise ConfigError(p + "dt", kw["dt"], f"gives {steps:.3g} fitted steps over t_final = "
                                              f"{kw['t_final']}; at most {MAX_STEPS:,}")
    if abs(steps - round(steps)) > 1e-9 * max(1.0, steps) or round(steps) < 1:
        raise ConfigError(p + "dt", kw["dt"], f"must divide t_final = {kw['t_final']} into whole steps")
    n_steps = int(round(steps))
    kw["tolerance"] = as_float(section.get("tolerance", d.tolerance), p + "tolerance", positive=True)
    if kw["tolerance"] >= 1:
        raise ConfigError(p + "tolerance", kw["tolerance"], "is an infidelity and must be below 1")
    default_step = kw["tolerance"] / n_steps ** 2
    kw["step_tolerance"] = as_fraction(section.get("step_tolerance", default_step), p + "step_tolerance")
    kw["maxiter"] = as_int(section.get("maxiter", d.maxiter), p + "maxiter", minimum=1, maximum=MAX_ITERATIONS)
    kw["restarts"] = as_int(section.get("restarts", d.restarts), p + "restarts", minimum=0, maximum=MAX_RESTARTS)
    kw["mode"] = as_choice(section.get("mode", d.mode), p + "mode", MODES)
    kw["max_layers"] = as_int(section.get("max_layers", d.max_layers), p + "max_layers", minimum=1,
                              maximum=MAX_LAYERS)
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
    if (not isinstance(orders, (list, tuple)) or not orders
            or any(isinstance(o, bool) or o not in (1, 2) for o in orders)):
        raise ConfigError(p + "trotter_orders", orders, "must be a non-empty list of 1 and/or 2")
    kw["trotter_orders"] = tuple(sorted({int(o) for o in orders}))
    kw["trotter_max_steps"] = as_int(section.get("trotter_max_steps", d.trotter_max_steps),
                                     p + "trotter_max_steps", minimum=1, maximum=MAX_TROTTER_STEPS)
    for name in ("compile", "compare_families", "fast_fit", "noise_sizing"):
        kw[name] = as_bool(section.get(name, getattr(d, name)), p + name)
    kw["compile_fidelity"] = as_fraction(section.get("compile_fidelity", d.compile_fidelity),
                                         p + "compile_fidelity")
    kw["shots_error"] = as_fraction(section.get("shots_error", d.shots_error), p + "shots_error", closed=True)
    if kw["shots_error"] < MIN_SHOTS_ERROR:
        raise ConfigError(p + "shots_error", kw["shots_error"], f"must be at least {MIN_SHOTS_ERROR:g}")
    kw["workers"] = as_int(section.get("workers", d.workers), p + "workers", minimum=0, maximum=MAX_WORKERS)
    kw["seed"] = as_int(section.get("seed", d.seed), p + "seed", minimum=0, maximum=2 ** 32 - 1)
    prof = section.get("hardware_profile")
    if prof is not None:
        if not isinstance(prof, str) or not prof:
            raise ConfigError(p + "hardware_profile", prof, "must be the path of a TOML file")
        path = Path(prof).expanduser()
        if not path.is_absolute():
            path = config_folder(config) / path
        if not path.is_file():
            raise ConfigError(p + "hardware_profile", prof,
                              f"no such file ({path}; a relative path is taken from the config file's folder)")
        prof = str(path.resolve())
    kw["hardware_profile"] = prof
    return VariationalSettings(**kw)


def load_checked_profile(settings: VariationalSettings):
    """The hardware profile of ``settings`` (the built-in illustrative one when none is named).

    Raises
    ------
    ConfigError
        Keyed ``variational.hardware_profile`` (``→ <profile key>`` when the profile's loader
        names one) for an unreadable or invalid profile.
    """
    from circuits.hardware import load_profile

    try:
        return load_profile(settings.hardware_profile)
    except OSError as exc:
        raise ConfigError("variational.hardware_profile", settings.hardware_profile,
                          f"cannot be read ({exc.strerror or exc})") from None
    except ValueError as exc:  # circuits.hardware.ProfileError carries key / value / reason
        key = getattr(exc, "key", None)
        name = f"variational.hardware_profile → {key}" if key else "variational.hardware_profile"
        value = getattr(exc, "value", settings.hardware_profile)
        raise ConfigError(name, value, getattr(exc, "reason", None) or str(exc)) from None
