"""Hardware profile: the machine's native gates with duration and fidelity, read from TOML.

File layout (format version 2; durations in microseconds, fidelities in (0, 1])::

    [hardware]
    format_version = 2
    name = "..."
    [hardware.gates.rotation]        # required: two-level rotation R^{jk}(t, phi) on one qudit
    duration_us = 15.0
    fidelity = 0.998
    source = "where the numbers come from"
    [hardware.gates.phase]           # required: single-qudit diagonal phase (virtual: 0 us, 1.0)
    [hardware.gates.ms]              # optional: Molmer-Sorensen exp(-i t P(x)P) on ``levels``
    levels = [0, 1]
    [hardware.gates.light_shift]     # optional: light-shift phase exp(-i t Z^{jk}(x)Z^{jk}) on ``levels``
    [hardware.gates.controlled_rotation]   # optional: exp(-i t |c><c| (x) P^{jk}/2), any c, j, k
    [hardware.gates.diagonal2]       # optional: any two-qudit diagonal phase table
    [hardware.gates.generator]       # optional: cost of a non-native exponential (generator form only)

At least one two-qudit gate (``ms``, ``light_shift``, ``controlled_rotation``) is required.
Format version 1 files (no ``format_version``) are read too; their ``phase2`` entry means a
two-qudit diagonal phase and stands in for ``light_shift`` and ``diagonal2``. A top-level
``[noise]`` table is kept raw in :attr:`HardwareProfile.noise_table` (read by the noise models).
Bad entries raise :class:`ProfileError` naming the dotted key.

Predicted circuit fidelity = product of the gate fidelities; duration = makespan of the ASAP
schedule with these durations.
"""
from __future__ import annotations

import hashlib
import math
import sys
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Any, Mapping

from .accounting import schedule
from .circuit import ParametrizedCircuit
from .gates import Gate
from .native import ENTANGLERS, NativeGateSet

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

__all__ = ["FORMAT_VERSION", "GATE_KEYS", "GateFigures", "HardwareProfile", "ProfileError", "hardware_key",
           "load_profile", "BUILTIN_PROFILE"]

FORMAT_VERSION = 2
#: profile entries and what they are
GATE_KEYS = {
    "rotation": "two-level rotation R^{jk}(t, phi) on one qudit",
    "phase": "single-qudit diagonal phase (usually virtual: a frame update)",
    "ms": "Molmer-Sorensen exp(-i t P(x)P) on one level pair of two qudits",
    "light_shift": "light-shift phase exp(-i t Z^{jk}(x)Z^{jk}) on one level pair of two qudits",
    "controlled_rotation": "two-level rotation of one qudit conditioned on a level of another",
    "diagonal2": "any two-qudit diagonal phase table",
    "generator": "non-native exponential of a local generator (cost placeholder)",
    "phase2": "format version 1: two-qudit diagonal phase",
}
REQUIRED_KEYS = ("rotation", "phase")
TWO_QUDIT_KEYS = ("ms", "light_shift", "controlled_rotation", "phase2")
LEVEL_KEYS = ("ms", "light_shift")
GATE_FIELDS = ("duration_us", "fidelity", "source", "levels")
#: entries that stand in for a missing one (format version 1)
FALLBACK = {"light_shift": ("phase2",), "diagonal2": ("phase2",)}
BUILTIN_PROFILE = "circuits/data/default_hardware.toml"


class ProfileError(ValueError):
    """A bad hardware profile entry: ``key`` (dotted, e.g. ``hardware.gates.ms.fidelity``),
    ``value`` and ``reason``."""

    def __init__(self, key: str, value: Any, reason: str) -> None:
        self.key, self.value, self.reason = key, value, reason
        super().__init__(f"{key} = {value!r}: {reason}")


@dataclass(frozen=True)
class GateFigures:
    """Duration (microseconds), fidelity, the source of both, and the level pair (``ms``,
    ``light_shift``)."""

    duration_us: float
    fidelity: float
    source: str = ""
    levels: tuple[int, int] | None = None


def hardware_key(gate: Gate) -> str:
    """Profile entry of a gate (the gate class knows it: :attr:`circuits.gates.Gate.hardware_key`)."""
    return gate.hardware_key


@dataclass(frozen=True)
class HardwareProfile:
    """Named set of :class:`GateFigures` by key, plus where it was read from.

    ``path`` is the file (``builtin:...`` for the shipped default), ``sha256`` the hash of its
    text, ``noise_table`` the raw ``[noise]`` table (not validated here).
    """

    name: str
    gates: dict[str, GateFigures]
    path: str = ""
    sha256: str = ""
    noise_table: dict = field(default_factory=dict)

    @property
    def builtin(self) -> bool:
        """Whether this is the shipped illustrative default."""
        return self.path.startswith("builtin:")

    def identity(self) -> dict[str, str]:
        """``{"name", "path", "sha256"}``: which profile produced an output."""
        return {"name": self.name, "path": self.path, "sha256": self.sha256}

    def source_lines(self) -> list[str]:
        """``key: source`` of every entry (print them when the numbers are the built-in defaults)."""
        return [f"{key}: {spec.source}" for key, spec in self.gates.items() if spec.source]

    def has(self, key: str) -> bool:
        """Whether the machine has this gate (directly or through a version-1 stand-in)."""
        return key in self.gates or any(k in self.gates for k in FALLBACK.get(key, ()))

    def spec_for(self, key: str) -> GateFigures:
        """Spec of a profile entry (``KeyError`` naming the missing entry)."""
        for k in (key,) + FALLBACK.get(key, ()):
            if k in self.gates:
                return self.gates[k]
        raise KeyError(f"hardware profile {self.name!r} has no entry for {key!r}")

    def spec(self, gate: Gate) -> GateFigures:
        """Spec of a gate."""
        return self.spec_for(gate.hardware_key)

    def gate_set(self, d: int | None = None, entangler: str | None = None) -> NativeGateSet:
        """The native gate set compilation may use on qudits of ``d`` levels (entanglers whose
        ``levels`` do not exist at ``d`` are left out). ``entangler`` forces one of
        :data:`circuits.native.ENTANGLERS`; default: a controlled rotation if present, else the
        higher-fidelity of light-shift and MS (light-shift on a tie). Raises :class:`ProfileError`
        if no two-qudit gate fits."""
        def fits(e: str) -> bool:
            lv = self.spec_for(e).levels
            return d is None or lv is None or max(lv) < d

        have = [e for e in ENTANGLERS if self.has(e) and fits(e)]
        if not have:
            raise ProfileError("hardware.gates", sorted(self.gates),
                               f"no two-qudit gate acts on levels that qudits of d = {d} have")
        if entangler is None:
            if "controlled_rotation" in have:
                entangler = "controlled_rotation"
            else:
                entangler = max(have, key=lambda e: (self.spec_for(e).fidelity, e == "light_shift"))
        elif entangler not in have:
            raise ProfileError("hardware.gates", sorted(self.gates), f"has no usable {entangler!r} gate")
        levels = self.spec_for(entangler).levels or (0, 1)
        ms = self.spec_for("ms").levels if "ms" in have else None
        light = self.spec_for("light_shift").levels or (0, 1) if "light_shift" in have else None
        return NativeGateSet(entangler, tuple(levels), diagonal2=self.has("diagonal2"), ms=ms,
                             light_shift=light, controlled_rotation="controlled_rotation" in have)

    def predicted_fidelity(self, circuit: ParametrizedCircuit) -> float:
        """Product of the fidelities of all gates."""
        return math.prod(self.spec(op.gate).fidelity for op in circuit.ops)

    def duration_us(self, circuit: ParametrizedCircuit) -> float:
        """Wall time of the ASAP schedule, microseconds."""
        return schedule(circuit, lambda op: self.spec(op.gate).duration_us).makespan

    @classmethod
    def from_dict(cls, data: Mapping[str, Any], path: str = "", sha256: str = "") -> "HardwareProfile":
        """Validate a parsed TOML document; raises :class:`ProfileError` naming the key."""
        for top in data:
            if top not in ("hardware", "noise"):
                raise ProfileError(top, data[top], "unknown table (expected [hardware] and optionally [noise])")
        hw = data.get("hardware")
        if not isinstance(hw, Mapping):
            raise ProfileError("hardware", hw, "a [hardware] table is required")
        for key in hw:
            if key not in ("name", "format_version", "gates"):
                raise ProfileError(f"hardware.{key}", hw[key], "unknown key (expected name, format_version, gates)")
        version = hw.get("format_version", 1)
        if version not in (1, FORMAT_VERSION):
            raise ProfileError("hardware.format_version", version, f"unsupported (this program reads 1 and {FORMAT_VERSION})")
        name = hw.get("name", "unnamed")
        if not isinstance(name, str):
            raise ProfileError("hardware.name", name, "must be a string")
        table = hw.get("gates")
        if not isinstance(table, Mapping):
            raise ProfileError("hardware.gates", table, "a [hardware.gates] table is required")
        gates = {key: _gate_spec(f"hardware.gates.{key}", key, val) for key, val in table.items()}
        for key in REQUIRED_KEYS:
            if key not in gates:
                raise ProfileError(f"hardware.gates.{key}", None, "missing entry (required)")
        if not any(k in gates for k in TWO_QUDIT_KEYS):
            raise ProfileError("hardware.gates", sorted(gates), "needs a two-qudit gate: one of ms, light_shift, "
                                                                "controlled_rotation")
        noise = data.get("noise", {})
        if not isinstance(noise, Mapping):
            raise ProfileError("noise", noise, "must be a table")
        return cls(name, gates, path, sha256, dict(noise))


def _gate_spec(where: str, key: str, val: Any) -> GateFigures:
    if key not in GATE_KEYS:
        raise ProfileError(where, val, f"unknown gate (known: {', '.join(k for k in GATE_KEYS if k != 'phase2')})")
    if not isinstance(val, Mapping):
        raise ProfileError(where, val, "must be a table")
    for f in val:
        if f not in GATE_FIELDS or (f == "levels" and key not in LEVEL_KEYS):
            raise ProfileError(f"{where}.{f}", val[f], "unknown field")
    numbers = {}
    for f in ("duration_us", "fidelity"):
        if f not in val:
            raise ProfileError(f"{where}.{f}", None, "missing entry")
        x = val[f]
        if isinstance(x, bool) or not isinstance(x, (int, float)) or not math.isfinite(x):
            raise ProfileError(f"{where}.{f}", x, "must be a finite number")
        numbers[f] = float(x)
    if numbers["duration_us"] < 0:
        raise ProfileError(f"{where}.duration_us", val["duration_us"], "must be >= 0 (microseconds)")
    if not 0 < numbers["fidelity"] <= 1:
        raise ProfileError(f"{where}.fidelity", val["fidelity"], "must lie in (0, 1]")
    source = val.get("source", "")
    if not isinstance(source, str):
        raise ProfileError(f"{where}.source", source, "must be a string")
    levels = None
    if key in LEVEL_KEYS:
        lv = val.get("levels", [0, 1])
        if (not isinstance(lv, list) or len(lv) != 2 or not all(isinstance(x, int) and not isinstance(x, bool)
                                                               and x >= 0 for x in lv) or lv[0] == lv[1]):
            raise ProfileError(f"{where}.levels", lv, "must be two different levels [j, k] >= 0")
        levels = (min(lv), max(lv))
    return GateFigures(numbers["duration_us"], numbers["fidelity"], source, levels)


def load_profile(path: str | Path | None = None, relative_to: str | Path | None = None) -> HardwareProfile:
    """Read and validate a profile; ``None`` loads the shipped illustrative default.

    A relative ``path`` is resolved against ``relative_to`` (e.g. the config file's folder).
    Raises :class:`ProfileError` (bad content, unreadable file: key ``hardware_profile``).
    """
    if path is None:
        text = resources.files("circuits").joinpath("data/default_hardware.toml").read_text()
        where = f"builtin:{BUILTIN_PROFILE}"
    else:
        p = Path(path)
        if not p.is_absolute() and relative_to is not None:
            p = Path(relative_to) / p
        try:
            text = p.read_text()
        except (OSError, UnicodeDecodeError) as err:
            raise ProfileError("hardware_profile", str(path), f"cannot read ({err.__class__.__name__})") from None
        where = str(p.resolve())
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise ProfileError("hardware_profile", str(path), f"not valid TOML ({err})") from None
    return HardwareProfile.from_dict(data, where, hashlib.sha256(text.encode()).hexdigest())
