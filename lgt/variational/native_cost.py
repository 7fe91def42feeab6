"""Native-gate cost of the model's term exponentials, by variational compilation.

Diagonal terms are native: an electric term is a single-qudit phase, a mass term a
single-qudit phase (boundary sites) or a two-qudit diagonal (light-shift type) phase.
Hopping exponentials exp(−iθ h) act on two or three link qudits and are not native: each
distinct one is compiled once into native brickwork layers (the hardware family's own layer)
to process fidelity ≥ ``fidelity``, at a generic angle θ w = π/4 (a template whose layer count
serves every angle; small angles can need fewer layers). Results are cached on disk
(``$FLUXLINE_CACHE_DIR``, default ``~/.cache/fluxline``), keyed by the generator, angle,
native layer and fidelity, since one compilation takes seconds to minutes.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import tempfile
from importlib import resources
from collections import Counter
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import scipy.linalg as sla

from circuits.fitting import compile_unitary
from circuits.gates import local_gate
from circuits.hardware import HardwareProfile, hardware_key
from circuits.layers import NativeLayerSpec, native_brickwork
from lgt.hamiltonian import local_terms
from lgt.model import ModelParams
from lgt.variational.ansatz import ordered_terms

#: Generic angle (θ·w) at which hopping exponentials are compiled.
TEMPLATE_ANGLE = math.pi / 4


class NativeCounts:
    """Gate totals of a ``counts`` mapping keyed by hardware kind."""

    counts: dict[str, int]

    @property
    def two_qudit(self) -> int:
        return int(self.counts.get("ms", 0) + self.counts.get("phase2", 0))

    @property
    def single_qudit(self) -> int:
        return int(self.counts.get("rotation", 0) + self.counts.get("phase", 0))

    @property
    def other(self) -> int:
        """Gates that are not native (generic ``generator`` exponentials)."""
        return int(sum(v for k, v in self.counts.items() if k.startswith("generator")))


@dataclass(frozen=True)
class TermCost(NativeCounts):
    """Native cost of one term exponential.

    ``counts`` by hardware key (``rotation``, ``ms``, ``phase``, ``phase2``); ``fidelity`` the
    product of the profile's gate fidelities; ``duration_us`` its scheduled duration;
    ``layers`` the compiled native layers (0 for native diagonal terms); ``compile_fidelity``
    the process fidelity reached.
    """

    label: str
    counts: dict[str, int]
    fidelity: float
    duration_us: float
    layers: int = 0
    compile_fidelity: float = 1.0


def cache_dir() -> Path:
    """Folder of the compilation cache."""
    return Path(os.environ.get("FLUXLINE_CACHE_DIR", Path.home() / ".cache" / "fluxline"))


def _cache_file() -> Path:
    return cache_dir() / "compiled_blocks.json"


def _read_json(path) -> dict:
    try:
        return json.loads(path.read_text())
    except (OSError, ValueError):
        return {}


def _load_cache() -> dict:
    """Shipped compilations (``lgt/data/compiled_blocks.json``) overlaid by the user's cache."""
    shipped = _read_json(resources.files("lgt").joinpath("data/compiled_blocks.json"))
    shipped.update(_read_json(_cache_file()))
    return shipped


def _store(key: str, entry: dict) -> None:
    """Add one entry to the user's cache atomically (write a temporary file, then rename)."""
    cache = _read_json(_cache_file())
    cache[key] = entry
    folder = cache_dir()
    folder.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=folder, suffix=".tmp")
    with os.fdopen(fd, "w") as fh:
        json.dump(cache, fh)
    os.replace(tmp, _cache_file())


def _key(generator: np.ndarray, angle: float, d: int, spec: NativeLayerSpec, fidelity: float) -> str:
    h = hashlib.sha256()
    h.update(np.round(np.asarray(generator, dtype=float), 12).tobytes())
    h.update(repr((round(angle, 12), d, generator.shape, spec, fidelity)).encode())
    return h.hexdigest()[:32]


def compile_exponential(generator: np.ndarray, angle: float, n_qudits: int, d: int, spec: NativeLayerSpec,
                        fidelity: float = 0.999, seed: int = 0, max_layers: int = 12) -> tuple[int, np.ndarray, float]:
    """(layers, parameters, process fidelity) of native brickwork reproducing exp(−i angle G)."""
    key = _key(generator, angle, d, spec, fidelity)
    entry = _load_cache().get(key)
    if entry is None:
        target = sla.expm(-1j * angle * np.asarray(generator, dtype=complex))
        res = compile_unitary(target, n_qudits, d, spec, fidelity=fidelity, max_layers=max_layers,
                              restarts=4, seed=seed)
        entry = {"layers": res.n_layers, "params": res.params.tolist(), "fidelity": res.fidelity}
        _store(key, entry)
    return int(entry["layers"]), np.asarray(entry["params"]), float(entry["fidelity"])


def uncompiled_hoppings(params: ModelParams, spec: NativeLayerSpec, fidelity: float = 0.999) -> list[int]:
    """Links whose hopping exponential is in neither the shipped nor the user's cache (so
    :func:`model_term_costs` with ``compile=True`` would compile them now)."""
    cache = _load_cache()
    return [t.index for t in local_terms(params) if t.kind == "hopping"
            and _key(t.matrix / abs(params.hopping), TEMPLATE_ANGLE, params.levels, spec, fidelity) not in cache]


def _native_term_cost(label: str, gate, profile: HardwareProfile) -> TermCost:
    spec = profile.spec(gate)
    return TermCost(label, {hardware_key(gate): 1}, spec.fidelity, spec.duration_us)


def model_term_costs(params: ModelParams, spec: NativeLayerSpec, profile: HardwareProfile,
                     fidelity: float = 0.999, compile: bool = True, seed: int = 0) -> dict[str, TermCost]:
    """Native cost of every term exponential of the model, keyed ``"hopping3"``, ``"mass0"``, …

    With ``compile=False`` hopping exponentials are costed as one generic ``generator``
    gate of the profile (no compilation).
    """
    d = params.levels
    local = {(t.kind, t.index): t for t in local_terms(params)}
    costs: dict[str, TermCost] = {}
    for kind, index, _ in ordered_terms(params):
        term = local[(kind, index)]
        label = f"{kind}{index}"
        gate = local_gate(tuple(range(len(term.qudits))), term.matrix, d)
        if kind != "hopping":
            costs[label] = _native_term_cost(label, gate, profile)
            continue
        if not compile:
            costs[label] = _native_term_cost(label, gate, profile)
            continue
        k = len(term.qudits)
        layers, angles, reached = compile_exponential(term.matrix / abs(params.hopping), TEMPLATE_ANGLE, k, d,
                                                      spec, fidelity, seed)
        circuit = native_brickwork(k, d, layers, spec)
        counts = Counter(hardware_key(op.gate) for op in circuit.ops)
        costs[label] = TermCost(label, dict(counts), profile.predicted_fidelity(circuit),
                                profile.duration_us(circuit), layers, reached)
    return costs


def summed_cost(costs: list[TermCost], label: str) -> TermCost:
    """Cost of running ``costs`` one after another (durations add: a conservative schedule)."""
    counts: Counter[str] = Counter()
    for c in costs:
        counts.update(c.counts)
    return TermCost(label, dict(counts), math.prod(c.fidelity for c in costs),
                    sum(c.duration_us for c in costs), sum(c.layers for c in costs))
