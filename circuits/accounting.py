"""Gate counts and ASAP scheduling.

Kinds: ``single`` and ``two`` (native one-/two-qudit gates, diagonal phases included)
and ``generator`` (exponentials of local generators, reported with their locality
as ``generator[k]``; subspace-mode gates have locality 0 and act on everything).
"""
from __future__ import annotations

from collections import Counter
from dataclasses import dataclass
from typing import Callable

import numpy as np

from .circuit import Op, ParametrizedCircuit

__all__ = ["gate_counts", "counts_per_layer", "Schedule", "schedule", "depth"]


def _count(ops: list[Op]) -> dict[str, int]:
    c: Counter[str] = Counter()
    for op in ops:
        c[op.gate.kind] += 1
        if op.gate.kind == "generator":
            c[f"generator[{op.gate.locality}]"] += 1
    c["total"] = len(ops)
    return dict(c)


def gate_counts(circuit: ParametrizedCircuit) -> dict[str, int]:
    """Number of gates by kind, plus ``generator[k]`` by locality and ``total``."""
    return _count(circuit.ops)


def counts_per_layer(circuit: ParametrizedCircuit) -> dict[int, dict[str, int]]:
    """:func:`gate_counts` for each layer tag (``op.layer``)."""
    layers = sorted({op.layer for op in circuit.ops})
    return {ly: _count([op for op in circuit.ops if op.layer == ly]) for ly in layers}


@dataclass
class Schedule:
    """ASAP start and finish time of each gate; ``makespan`` = end of the last gate."""

    start: np.ndarray
    finish: np.ndarray

    @property
    def makespan(self) -> float:
        return float(self.finish.max(initial=0.0))


def schedule(circuit: ParametrizedCircuit, duration: Callable[[Op], float] | None = None) -> Schedule:
    """Greedy as-soon-as-possible schedule: a gate starts when all its qudits are free.

    ``duration(op)`` defaults to 1 (so the makespan is the circuit depth).  Gates with
    no qudits (subspace mode) occupy the whole register.
    """
    n = max(circuit.space.n_qudits, 1)
    free = np.zeros(n)
    start = np.zeros(len(circuit.ops))
    finish = np.zeros(len(circuit.ops))
    for i, op in enumerate(circuit.ops):
        qs = list(op.gate.qudits) or list(range(n))
        start[i] = free[qs].max()
        finish[i] = start[i] + (1.0 if duration is None else float(duration(op)))
        free[qs] = finish[i]
    return Schedule(start, finish)


def depth(circuit: ParametrizedCircuit) -> int:
    """Circuit depth: number of time slots of the ASAP schedule with unit durations."""
    return int(round(schedule(circuit).makespan))
