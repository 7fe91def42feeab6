"""Hardware profile: per-gate durations and fidelities, read from TOML.

File layout (all times in microseconds)::

    [hardware]
    name = "..."
    [hardware.gates.rotation]   # keys: rotation, phase, ms, phase2, generator
    duration_us = 15.0
    fidelity = 0.998
    source = "where the number comes from"

Gate keys: :class:`~circuits.gates.TwoLevelRotation` -> ``rotation``; single-qudit
:class:`~circuits.gates.DiagonalGate` -> ``phase``; :class:`~circuits.gates.MSGate` ->
``ms``; two-qudit diagonal -> ``phase2``; anything else -> ``generator<k>`` if present,
else ``generator``.  Predicted circuit fidelity = product of the gate fidelities;
duration = makespan of the ASAP schedule with these durations.
"""
from __future__ import annotations

import math
import sys
from dataclasses import dataclass
from importlib import resources
from pathlib import Path

from .accounting import schedule
from .circuit import ParametrizedCircuit
from .gates import DiagonalGate, Gate, MSGate, TwoLevelRotation

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

__all__ = ["GateSpec", "HardwareProfile", "hardware_key", "load_profile"]


@dataclass(frozen=True)
class GateSpec:
    """Duration (microseconds), fidelity and the source of both."""

    duration_us: float
    fidelity: float
    source: str = ""


def hardware_key(gate: Gate) -> str:
    """Profile key of a gate (see module docstring)."""
    if isinstance(gate, TwoLevelRotation):
        return "rotation"
    if isinstance(gate, MSGate):
        return "ms"
    if isinstance(gate, DiagonalGate) and gate.locality in (1, 2):
        return "phase" if gate.locality == 1 else "phase2"
    return f"generator{gate.locality}"


@dataclass(frozen=True)
class HardwareProfile:
    """Named set of :class:`GateSpec` by key."""

    name: str
    gates: dict[str, GateSpec]

    def spec(self, gate: Gate) -> GateSpec:
        """Spec of a gate (``generator<k>`` falls back to ``generator``)."""
        key = hardware_key(gate)
        if key in self.gates:
            return self.gates[key]
        if key.startswith("generator") and "generator" in self.gates:
            return self.gates["generator"]
        raise KeyError(f"hardware profile {self.name!r} has no entry for {key!r}")

    def predicted_fidelity(self, circuit: ParametrizedCircuit) -> float:
        """Product of the fidelities of all gates."""
        return math.prod(self.spec(op.gate).fidelity for op in circuit.ops)

    def duration_us(self, circuit: ParametrizedCircuit) -> float:
        """Wall time of the ASAP schedule, microseconds."""
        return schedule(circuit, lambda op: self.spec(op.gate).duration_us).makespan

    @classmethod
    def from_dict(cls, data: dict) -> "HardwareProfile":
        """Build from a parsed TOML document (``[hardware]`` table)."""
        if "hardware" not in data:
            raise ValueError("hardware profile needs a [hardware] table")
        hw = data["hardware"]
        gates = {}
        for key, val in hw.get("gates", {}).items():
            try:
                spec = GateSpec(float(val["duration_us"]), float(val["fidelity"]), str(val.get("source", "")))
            except KeyError as err:
                raise ValueError(f"[hardware.gates.{key}] lacks {err}") from None
            if not (0.0 <= spec.fidelity <= 1.0 and spec.duration_us >= 0.0):
                raise ValueError(f"[hardware.gates.{key}]: need 0 <= fidelity <= 1, duration >= 0")
            gates[key] = spec
        return cls(str(hw.get("name", "unnamed")), gates)


def load_profile(path: str | Path | None = None) -> HardwareProfile:
    """Read a profile from TOML; ``None`` loads ``circuits/data/default_hardware.toml``."""
    if path is None:
        text = resources.files("circuits").joinpath("data/default_hardware.toml").read_text()
    else:
        text = Path(path).read_text()
    return HardwareProfile.from_dict(tomllib.loads(text))
