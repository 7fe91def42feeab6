"""Circuits of native gates only: any register circuit, angles resolved, with its compile fidelity.

:func:`native_circuit` replaces every gate the machine cannot run (dense generator exponentials,
two-qudit diagonals, MS gates on other levels, ...) by its exact one-parameter block from
:mod:`circuits.native`, evaluated at the gate's resolved angle. Blocks are built once per distinct
gate (kept in a dict the caller may share across calls and fill ahead of time). The result knows
its own cost (:meth:`NativeCircuit.cost`): counts, predicted fidelity and duration come from the
native gates themselves.
"""
from __future__ import annotations

import hashlib
import math
from collections import Counter
from dataclasses import dataclass
from typing import Any, MutableMapping, Sequence

import numpy as np

from .circuit import ParametrizedCircuit
from .export import to_dict
from .gates import Gate, gate_from_export
from .native import NativeGateSet, block_fidelity, gate_block, is_native

__all__ = ["NativeCircuit", "NativeCost", "NativeCounts", "native_circuit", "native_document", "block_key", "TWO_QUDIT_KEYS"]

#: hardware keys of two-qudit gates
TWO_QUDIT_KEYS = ("ms", "light_shift", "controlled_rotation", "diagonal2")


class NativeCounts:
    """Gate totals of a ``counts`` mapping keyed by hardware key."""

    counts: dict[str, int]

    @property
    def two_qudit(self) -> int:
        return int(sum(v for k, v in self.counts.items() if k in TWO_QUDIT_KEYS))

    @property
    def single_qudit(self) -> int:
        return int(self.counts.get("rotation", 0) + self.counts.get("phase", 0))

    @property
    def other(self) -> int:
        """Gates that are not native (generic ``generator`` exponentials)."""
        return int(sum(v for k, v in self.counts.items() if k.startswith("generator")))


@dataclass(frozen=True)
class NativeCost(NativeCounts):
    """Gate counts by hardware key, predicted fidelity (product of gate fidelities) and ASAP
    duration in microseconds of a native circuit."""

    counts: dict[str, int]
    fidelity: float
    duration_us: float


@dataclass
class NativeCircuit:
    """A circuit of fixed native gates and the least process fidelity of the blocks it used."""

    circuit: ParametrizedCircuit
    compile_fidelity: float

    def cost(self, profile) -> NativeCost:
        """Counts, predicted fidelity and duration with a :class:`~circuits.hardware.HardwareProfile`."""
        counts = Counter(op.gate.hardware_key for op in self.circuit.ops)
        return NativeCost(dict(counts), profile.predicted_fidelity(self.circuit), profile.duration_us(self.circuit))


def block_key(gate: Gate, gs: NativeGateSet) -> str:
    """Explicit key of a gate's block: d, locality, a SHA-256 of its generator and the gate set."""
    digest = hashlib.sha256(np.round(np.asarray(gate.generator(), dtype=np.complex128), 12).tobytes()).hexdigest()
    return f"d={gate.d};k={gate.locality};generator_sha256={digest};{gs.identity()}"


def _placed(gate: Gate, qudits: Sequence[int]) -> Gate:
    entry = gate.export()
    entry["qudits"] = [int(qudits[q]) for q in entry["qudits"]]
    return gate_from_export(entry, gate.d)


def native_circuit(circuit: ParametrizedCircuit, params: Sequence[float] | None, gs: NativeGateSet,
                   blocks: MutableMapping[str, tuple[ParametrizedCircuit, float]] | None = None) -> NativeCircuit:
    """``circuit`` at ``params`` as fixed native gates (register mode only).

    ``blocks`` maps :func:`block_key` to ``(block, process fidelity)`` and is filled as blocks
    are built. Raises :class:`circuits.native.NotDecomposable` for a gate with no exact block.
    """
    if not circuit.space.register:
        raise ValueError("native circuits need a register space")
    blocks = {} if blocks is None else blocks
    out = ParametrizedCircuit(circuit.space)
    worst = 1.0
    placed: dict[int, list[Gate]] = {}  # per gate object: its block's gates on its qudits
    keys: dict[int, str] = {}
    for op, t in zip(circuit.ops, circuit.angles(params)):
        gate = op.gate
        if is_native(gate, gs):
            out.append(gate, None, offset=float(t), layer=op.layer)
            continue
        if id(gate) not in keys:
            keys[id(gate)] = key = block_key(gate, gs)
            if key not in blocks:
                block = gate_block(gate, gs)
                blocks[key] = (block, block_fidelity(block, gate.generator()))
            placed[id(gate)] = [_placed(bop.gate, gate.qudits) for bop in blocks[key][0].ops]
        block, fid = blocks[keys[id(gate)]]
        worst = min(worst, fid)
        for g, bt in zip(placed[id(gate)], block.angles(np.array([t]))):
            out.append(g, None, offset=float(bt), layer=op.layer)
    return NativeCircuit(out, worst)


def native_document(native: NativeCircuit, profile) -> dict[str, Any]:
    """JSON document (``circuits.export`` schema) with ``duration_us`` on every gate,
    ``compile_fidelity``, ``hardware_profile`` (name, path, sha256) and the circuit's ``cost``."""
    doc = to_dict(native.circuit, None, duration=lambda g: profile.spec(g).duration_us)
    cost = native.cost(profile)
    doc["compile_fidelity"] = native.compile_fidelity
    doc["hardware_profile"] = profile.identity()
    doc["cost"] = {"counts": cost.counts, "two_qudit_gates": cost.two_qudit, "single_qudit_gates": cost.single_qudit,
                   "predicted_fidelity": cost.fidelity, "duration_us": cost.duration_us}
    if not math.isfinite(cost.fidelity):
        raise ValueError("predicted fidelity is not finite")
    return doc
