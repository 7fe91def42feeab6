"""The ``[lab]`` configuration section (read by ``fluxline predict`` and ``fluxline analyze``)."""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import Any, Mapping

from lgt.config import as_choice, as_float, as_int, check_keys
from lgt.errors import ConfigError

METHODS = ("auto", "density", "trajectories")
NOISE_SOURCES = ("profile", "none")
LAB_KEYS = ("shots", "seed", "bootstrap", "method", "trajectory_error", "max_trajectories",
            "unfold_iterations", "noise", "zne_scales")


@dataclass(frozen=True)
class LabSettings:
    """Resolved ``[lab]`` settings.

    shots : shots per stored time (predict)
    seed : seed of shot sampling, trajectories and bootstrap
    bootstrap : bootstrap resamples behind every error bar
    method : noisy simulator ("auto": density matrix up to circuits.density.MAX_DENSITY_DIM)
    trajectory_error : target standard error of each level population from trajectories
    max_trajectories : cap on the number of trajectories per circuit
    unfold_iterations : iterations of the readout unfolding
    noise : "profile" (the hardware profile's [noise] table, else the built-in model) or "none"
    zne_scales : odd gate-folding scales for zero-noise extrapolation (predict), e.g. (1, 3);
        empty: off. Each scale costs ``shots`` more shots per step.
    """

    shots: int = 1000
    seed: int = 0
    bootstrap: int = 200
    method: str = "auto"
    trajectory_error: float = 0.005
    max_trajectories: int = 20000
    unfold_iterations: int = 100
    noise: str = "profile"
    zne_scales: tuple[int, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        out = asdict(self)
        out["zne_scales"] = list(self.zne_scales)
        return out


def resolve_lab(section: Any) -> LabSettings:
    """Validate a ``[lab]`` table (missing keys take their defaults)."""
    section = {} if section is None else section
    if not isinstance(section, Mapping):
        raise ConfigError("lab", section, "must be a table")
    check_keys(section, LAB_KEYS, "lab")
    d = LabSettings()
    p = "lab."
    te = as_float(section.get("trajectory_error", d.trajectory_error), p + "trajectory_error", positive=True)
    if te >= 1:
        raise ConfigError(p + "trajectory_error", te, "is a probability error and must be below 1")
    scales = section.get("zne_scales", [])
    if (not isinstance(scales, list) or any(isinstance(x, bool) or not isinstance(x, int) or x < 1 or x % 2 == 0
                                            for x in scales)
            or (scales and (scales[0] != 1 or len(scales) < 2 or sorted(set(scales)) != scales))):
        raise ConfigError(p + "zne_scales", scales, "must be [] or increasing odd integers starting at 1, e.g. [1, 3]")
    return LabSettings(
        shots=as_int(section.get("shots", d.shots), p + "shots", minimum=1),
        seed=as_int(section.get("seed", d.seed), p + "seed", minimum=0),
        bootstrap=as_int(section.get("bootstrap", d.bootstrap), p + "bootstrap", minimum=10),
        method=as_choice(section.get("method", d.method), p + "method", METHODS),
        trajectory_error=te,
        max_trajectories=as_int(section.get("max_trajectories", d.max_trajectories), p + "max_trajectories", minimum=64),
        unfold_iterations=as_int(section.get("unfold_iterations", d.unfold_iterations), p + "unfold_iterations",
                                 minimum=1),
        noise=as_choice(section.get("noise", d.noise), p + "noise", NOISE_SOURCES),
        zne_scales=tuple(scales),
    )
