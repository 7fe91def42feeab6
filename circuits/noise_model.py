"""Noise model of a trapped-ion qudit register, parsed from the ``[noise]`` table of a
hardware profile (format version 1, documented in ``docs/lab.md``).

Per level ``i`` of every qudit (times in microseconds):

* dephasing: a rate ``dephasing_per_us`` γ_i of the level's own (independent) phase noise, and a
  magnetic sensitivity ``sensitivity_MHz_per_G`` s_i; with a field noise of rms ``field_noise_G``
  σ_B and correlation time ``field_correlation_us`` τ_c (motional-narrowing limit, t ≫ τ_c:
  Kubo, J. Phys. Soc. Jpn. 9, 935 (1954); Anderson, J. Phys. Soc. Jpn. 9, 316 (1954)) the
  coherence ρ_ij decays as exp(−Γ_ij t) with
  Γ_ij = γ_i + γ_j + (2π σ_B (s_i − s_j))² τ_c  (s in MHz/G, so 2π s σ_B is in rad/µs).
  Quasi-static field noise and field noise correlated between ions are not modelled;
* decay: a lifetime ``t1_us`` and the level it decays to, ``decays_to`` (an encoded level, or
  ``"leaked"`` for a level outside the register's levels). Leakage is modelled by *tracking the
  lost population*: the channel is trace-decreasing on the encoded levels, and the trace deficit
  is the probability that some ion left them. How a leaked shot reads out is ``leaked_outcome``:
  ``"discard"`` (heralded loss, counted as discarded) or ``"random"`` (a uniformly random string).

Per gate kind (the keys of :func:`circuits.hardware.hardware_key`: ``rotation``, ``ms``,
``phase``, ``phase2``, ``generator``): ``depolarizing`` probability p on the levels the gate touches
(default: from the profile's process fidelity F, p = (1 − F)/(1 − 1/D²)), ``over_rotation`` (the
angle becomes (1 + ε) t) and ``spectator_phase_rad`` (a phase on every level of the touched qudits
that the gate does not address). Idle noise runs over the ASAP schedule's gaps and durations.
State preparation: ``[noise.preparation] error`` (a uniformly random wrong level). Readout:
``[noise.readout] error`` (symmetric) or ``confusion`` (rows: true level, columns: read level).
"""

from __future__ import annotations

import math
import sys
from dataclasses import dataclass, field
from importlib import resources
from typing import Any, Mapping

import numpy as np

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

__all__ = ["FORMAT_VERSION", "GATE_KEYS", "NoiseModelError", "LevelNoise", "GateNoise", "NoiseModel",
           "LEAKED"]

#: Version of the ``[noise]`` table layout this module reads.
FORMAT_VERSION = 1
#: Gate kinds a ``[noise.gates.<kind>]`` table may name.
GATE_KEYS = ("rotation", "ms", "phase", "phase2", "generator")
#: ``decays_to`` value of a level that decays outside the encoded levels.
LEAKED = "leaked"
LEAKED_OUTCOMES = ("discard", "random")
_TOP_KEYS = ("format", "name", "source", "field_noise_G", "field_correlation_us", "leaked_outcome",
             "level", "gates", "preparation", "readout")
_LEVEL_KEYS = ("sensitivity_MHz_per_G", "dephasing_per_us", "t1_us", "decays_to", "source")
_GATE_KEYS_ALLOWED = ("depolarizing", "over_rotation", "spectator_phase_rad", "source")


class NoiseModelError(ValueError):
    """A ``[noise]`` entry is malformed; ``key`` is the dotted key, ``value`` the value given."""

    def __init__(self, key: str, value: Any, reason: str) -> None:
        self.key, self.value, self.reason = key, value, reason
        text = repr(value)
        super().__init__(f"{key} = {text[:100]}: {reason}")


@dataclass(frozen=True)
class LevelNoise:
    """Noise of one level: dephasing rate (1/µs), magnetic sensitivity (MHz/G), lifetime (µs)
    and decay target (a level index, or ``None`` for a level outside the encoded ones)."""

    sensitivity_MHz_per_G: float = 0.0
    dephasing_per_us: float = 0.0
    t1_us: float = math.inf
    decays_to: int | None = None


@dataclass(frozen=True)
class GateNoise:
    """Errors of one gate kind (``depolarizing=None``: from the profile's fidelity)."""

    depolarizing: float | None = None
    over_rotation: float = 0.0
    spectator_phase_rad: float = 0.0


@dataclass(frozen=True)
class NoiseModel:
    """A register noise model; see the module docstring for the meaning of each field."""

    levels: tuple[LevelNoise, ...] = ()
    gates: Mapping[str, GateNoise] = field(default_factory=dict)
    field_noise_G: float = 0.0
    field_correlation_us: float = 0.0
    preparation_error: float = 0.0
    readout_error: float = 0.0
    readout_confusion: tuple[tuple[float, ...], ...] | None = None
    leaked_outcome: str = "discard"
    name: str = "unnamed"
    source: str = ""
    #: an ideal model ignores the profile's gate fidelities too (no noise at all)
    ideal: bool = False

    # ------------------------------------------------------------------ constructors
    @classmethod
    def noiseless(cls) -> "NoiseModel":
        """No noise of any kind (gate fidelities of the profile are ignored)."""
        return cls(name="noiseless", ideal=True)

    @classmethod
    def default(cls) -> "NoiseModel":
        """The built-in illustrative model (``circuits/data/default_noise.toml``; numbers recalled
        from memory, replace them with your device's figures)."""
        text = resources.files("circuits").joinpath("data/default_noise.toml").read_text()
        return cls.from_table(tomllib.loads(text)["noise"])

    @classmethod
    def from_table(cls, table: Mapping[str, Any], gate_keys: tuple[str, ...] = GATE_KEYS) -> "NoiseModel":
        """Parse and validate a ``[noise]`` table; raises :class:`NoiseModelError`.

        ``gate_keys``: the gate kinds ``[noise.gates.<kind>]`` may name (pass the profile's
        ``[hardware.gates]`` keys too when the profile has kinds of its own)."""
        if not isinstance(table, Mapping):
            raise NoiseModelError("noise", table, "must be a table")
        _known(table, _TOP_KEYS, "noise")
        fmt = table.get("format")
        if fmt != FORMAT_VERSION:
            raise NoiseModelError("noise.format", fmt, f"must be {FORMAT_VERSION} (the layout version this program reads)")
        levels_in = table.get("level", [])
        if not isinstance(levels_in, list):
            raise NoiseModelError("noise.level", levels_in, "must be an array of tables ([[noise.level]])")
        levels = tuple(_level(entry, i) for i, entry in enumerate(levels_in))
        gates_in = table.get("gates", {})
        if not isinstance(gates_in, Mapping):
            raise NoiseModelError("noise.gates", gates_in, "must be a table")
        gates = {}
        for key, entry in gates_in.items():
            if key not in gate_keys:
                raise NoiseModelError(f"noise.gates.{key}", entry, f"unknown gate kind; known: {', '.join(gate_keys)}")
            gates[key] = _gate(entry, f"noise.gates.{key}")
        prep = _sub(table, "preparation", ("error", "source"))
        readout = _sub(table, "readout", ("error", "confusion", "source"))
        if "error" in readout and "confusion" in readout:
            raise NoiseModelError("noise.readout", dict(readout), "give either error or confusion, not both")
        confusion = None
        if "confusion" in readout:
            confusion = _confusion(readout["confusion"], "noise.readout.confusion")
        outcome = table.get("leaked_outcome", "discard")
        if outcome not in LEAKED_OUTCOMES:
            raise NoiseModelError("noise.leaked_outcome", outcome, f"must be one of {', '.join(LEAKED_OUTCOMES)}")
        return cls(
            levels=levels, gates=gates,
            field_noise_G=_number(table, "field_noise_G", "noise", 0.0),
            field_correlation_us=_number(table, "field_correlation_us", "noise", 0.0),
            preparation_error=_probability(prep.get("error", 0.0), "noise.preparation.error"),
            readout_error=_probability(readout.get("error", 0.0), "noise.readout.error"),
            readout_confusion=confusion, leaked_outcome=outcome,
            name=str(table.get("name", "unnamed")), source=str(table.get("source", "")),
        )

    # ------------------------------------------------------------------ per-register views
    def level_noise(self, d: int) -> tuple[LevelNoise, ...]:
        """Noise of the first ``d`` levels (levels the table does not list are noiseless);
        decay targets at or beyond ``d`` count as leaked."""
        out = []
        for i in range(d):
            lv = self.levels[i] if i < len(self.levels) else LevelNoise()
            if lv.decays_to is not None and lv.decays_to >= d:
                lv = LevelNoise(lv.sensitivity_MHz_per_G, lv.dephasing_per_us, lv.t1_us, None)
            out.append(lv)
        return tuple(out)

    def dephasing_covariance(self, d: int) -> np.ndarray:
        """C (d × d, rad²/µs): level phases are Wiener processes with covariance C t, so that
        ρ_ij decays as exp(−½ (C_ii + C_jj − 2 C_ij) t) = exp(−Γ_ij t)."""
        lv = self.level_noise(d)
        gamma = np.array([x.dephasing_per_us for x in lv])
        s = np.array([x.sensitivity_MHz_per_G for x in lv])
        field_rate = (2 * math.pi * self.field_noise_G) ** 2 * self.field_correlation_us
        return np.diag(2 * gamma) + 2 * field_rate * np.outer(s, s)

    def dephasing_rates(self, d: int) -> np.ndarray:
        """Γ_ij (1/µs): the decay rate of the coherence between levels i and j (zero diagonal)."""
        c = self.dephasing_covariance(d)
        diag = np.diag(c)
        return 0.5 * (diag[:, None] + diag[None, :] - 2 * c)

    def decay_rates(self, d: int) -> tuple[np.ndarray, np.ndarray]:
        """(rates 1/T₁ per level in 1/µs, target level per level with −1 = leaked)."""
        lv = self.level_noise(d)
        rates = np.array([0.0 if math.isinf(x.t1_us) else 1.0 / x.t1_us for x in lv])
        target = np.array([-1 if x.decays_to is None else x.decays_to for x in lv], dtype=np.int64)
        return rates, target

    def confusion(self, d: int) -> np.ndarray:
        """Readout response A[read, true] (d × d, columns sum to one)."""
        if self.readout_confusion is not None:
            m = np.asarray(self.readout_confusion, dtype=float)
            if m.shape != (d, d):
                raise NoiseModelError("noise.readout.confusion", self.readout_confusion,
                                      f"is {m.shape[0]} x {m.shape[1]}, the register has {d} levels")
            return m.T.copy()
        e = self.readout_error
        return (1 - e) * np.eye(d) + e / (d - 1) * (1 - np.eye(d))

    def gate_noise(self, key: str) -> GateNoise:
        """Errors of a gate kind (``generator<k>`` falls back to ``generator``)."""
        if key in self.gates:
            return self.gates[key]
        if key.startswith("generator") and "generator" in self.gates:
            return self.gates["generator"]
        return GateNoise(depolarizing=0.0) if self.ideal else GateNoise()

    def describe(self) -> dict[str, Any]:
        """JSON-ready summary (name, source, readout, preparation)."""
        return {"name": self.name, "source": self.source, "ideal": self.ideal,
                "preparation_error": self.preparation_error, "readout_error": self.readout_error,
                "readout_confusion": None if self.readout_confusion is None else [list(r) for r in self.readout_confusion],
                "leaked_outcome": self.leaked_outcome}


# ---------------------------------------------------------------------- parsing helpers
def _known(table: Mapping[str, Any], allowed: tuple[str, ...], where: str) -> None:
    for key, value in table.items():
        if key not in allowed:
            raise NoiseModelError(f"{where}.{key}", value, f"unknown key; allowed: {', '.join(allowed)}")


def _number(table: Mapping[str, Any], key: str, where: str, default: float, *, positive: bool = False) -> float:
    value = table.get(key, default)
    dotted = f"{where}.{key}"
    if isinstance(value, bool) or not isinstance(value, (int, float)) or math.isnan(float(value)) or (
            math.isinf(float(value)) and key != "t1_us"):
        raise NoiseModelError(dotted, value, "must be a finite number")
    value = float(value)
    if value < 0 or (positive and value == 0):
        raise NoiseModelError(dotted, value, "must be positive" if positive else "must not be negative")
    return value


def _probability(value: Any, key: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not 0.0 <= float(value) <= 1.0:
        raise NoiseModelError(key, value, "must be a probability in [0, 1]")
    return float(value)


def _sub(table: Mapping[str, Any], name: str, allowed: tuple[str, ...]) -> Mapping[str, Any]:
    sub = table.get(name, {})
    if not isinstance(sub, Mapping):
        raise NoiseModelError(f"noise.{name}", sub, "must be a table")
    _known(sub, allowed, f"noise.{name}")
    return sub


def _level(entry: Any, index: int) -> LevelNoise:
    where = f"noise.level[{index}]"
    if not isinstance(entry, Mapping):
        raise NoiseModelError(where, entry, "must be a table")
    _known(entry, _LEVEL_KEYS, where)
    t1 = _number(entry, "t1_us", where, math.inf, positive=True) if "t1_us" in entry else math.inf
    if math.isfinite(t1) and "decays_to" not in entry:
        raise NoiseModelError(f"{where}.decays_to", None, f"is required with t1_us (a level index or {LEAKED!r})")
    target = entry.get("decays_to")
    if target == LEAKED or target is None:
        target = None
    elif isinstance(target, bool) or not isinstance(target, int) or target < 0:
        raise NoiseModelError(f"{where}.decays_to", target, f"must be a level index >= 0 or {LEAKED!r}")
    if target is not None and target == index:
        raise NoiseModelError(f"{where}.decays_to", target, "a level cannot decay to itself")
    return LevelNoise(_real(entry.get("sensitivity_MHz_per_G", 0.0), f"{where}.sensitivity_MHz_per_G"),
                      _number(entry, "dephasing_per_us", where, 0.0), t1, target)


def _real(value: Any, key: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(float(value)):
        raise NoiseModelError(key, value, "must be a finite number")
    return float(value)


def _gate(entry: Any, where: str) -> GateNoise:
    if not isinstance(entry, Mapping):
        raise NoiseModelError(where, entry, "must be a table")
    _known(entry, _GATE_KEYS_ALLOWED, where)
    p = entry.get("depolarizing")
    if p is not None:
        p = _probability(p, f"{where}.depolarizing")
    over = _real(entry.get("over_rotation", 0.0), f"{where}.over_rotation")
    phase = _real(entry.get("spectator_phase_rad", 0.0), f"{where}.spectator_phase_rad")
    return GateNoise(p, float(over), float(phase))


def _confusion(value: Any, key: str) -> tuple[tuple[float, ...], ...]:
    try:
        m = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise NoiseModelError(key, value, "must be a square array of numbers") from None
    if m.ndim != 2 or m.shape[0] != m.shape[1] or m.shape[0] < 2:
        raise NoiseModelError(key, value, "must be a square array (rows: true level, columns: read level)")
    if np.any(m < 0) or not np.allclose(m.sum(axis=1), 1.0, atol=1e-9):
        raise NoiseModelError(key, value, "every row must be probabilities summing to 1")
    return tuple(tuple(float(x) for x in row) for row in m)
