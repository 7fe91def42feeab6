"""The register noise model of a configuration: the ``[noise]`` table of its hardware profile."""

from __future__ import annotations

from typing import Any, Callable

from circuits.hardware import HardwareProfile, load_profile
from circuits.noise_model import GATE_KEYS, NoiseModel, NoiseModelError
from lgt.errors import ConfigError

__all__ = ["LabNoise", "lab_noise"]


class LabNoise:
    """The profile (durations, fidelities), its noise model, and where the model came from."""

    def __init__(self, profile: HardwareProfile, model: NoiseModel, origin: str) -> None:
        self.profile, self.model, self.origin = profile, model, origin

    def spec(self) -> Callable[[Any], tuple[float, float]]:
        """``gate -> (duration_us, process fidelity)`` from the profile (named error if missing)."""
        def spec(gate: Any) -> tuple[float, float]:
            try:
                s = self.profile.spec(gate)
            except KeyError as exc:
                raise ConfigError("variational.hardware_profile", self.profile.name, str(exc.args[0])) from None
            return s.duration_us, s.fidelity
        return spec

    def describe(self) -> dict[str, Any]:
        return {"profile": self.profile.name, "noise_model": self.model.describe(), "origin": self.origin}


def _noise_table(profile: HardwareProfile) -> dict | None:
    """The profile's raw ``[noise]`` table (kept by the profile loader), or None when it has none."""
    return profile.noise_table or None


def lab_noise(profile_path: str | None, source: str = "profile") -> LabNoise:
    """Profile and noise model for a run; ``source = "none"`` gives the noiseless model.

    A profile without a ``[noise]`` table (and the built-in profile) uses the built-in
    illustrative model (:meth:`NoiseModel.default`). Errors name the profile's key.
    """
    key = "variational.hardware_profile"
    try:
        profile = load_profile(profile_path)
    except (ValueError, OSError) as exc:
        raise ConfigError(key, profile_path, str(exc)) from None
    if source == "none":
        return LabNoise(profile, NoiseModel.noiseless(), "noiseless ([lab] noise = \"none\")")
    table = _noise_table(profile)
    if table is None:
        return LabNoise(profile, NoiseModel.default(),
                        "built-in illustrative model (recalled from memory; replace with your device's [noise] table)")
    try:
        keys = tuple(dict.fromkeys(GATE_KEYS + tuple(profile.gates)))
        model = NoiseModel.from_table(table, keys)
    except NoiseModelError as exc:
        raise ConfigError(f"{profile_path}: {exc.key}", exc.value, exc.reason) from None
    return LabNoise(profile, model, f"[noise] of {profile_path}")
