"""Fixed-angle product-formula (Trotter) circuits.

``H = sum_g A_g`` with ``A_g = sum_i term_{g,i}``; the terms inside a group are assumed
to commute (as in even/odd/diagonal splittings), so each group exponential is exact.

* order 1: ``S1(dt) = prod_g exp(-i dt A_g)`` (groups in the given order);
* order 2 (Strang, symmetric):
  ``S2(dt) = e^{-i dt/2 A_1} ... e^{-i dt A_m} ... e^{-i dt/2 A_1}``, with the terms of
  the mirrored half in reverse order.  Adjacent half steps of the same group in
  consecutive steps are fused into one full step (``fuse=True``).

The circuit has no parameters: every gate is fixed at its angle.
"""
from __future__ import annotations

from typing import Sequence

from .circuit import ParametrizedCircuit
from .gates import Gate
from .register import Space
from .terms import Term, term_gates

__all__ = ["trotter_schedule", "trotter_circuit"]


def trotter_schedule(n_groups: int, n_steps: int, order: int, fuse: bool = True) -> list[tuple[int, float, bool]]:
    """Sequence of ``(group, fraction of dt, reversed term order)`` for ``n_steps`` steps."""
    if order not in (1, 2):
        raise ValueError(f"order must be 1 or 2, got {order}")
    if order == 1 or n_groups == 1:
        step = [(g, 1.0, False) for g in range(n_groups)]
    else:
        last = n_groups - 1
        step = [(g, 0.5, False) for g in range(last)] + [(last, 1.0, False)]
        step += [(g, 0.5, True) for g in range(last - 1, -1, -1)]
    seq: list[tuple[int, float, bool]] = []
    for _ in range(n_steps):
        for item in step:
            if fuse and seq and seq[-1][0] == item[0]:
                seq[-1] = (item[0], seq[-1][1] + item[1], seq[-1][2])
            else:
                seq.append(item)
    return seq


def trotter_circuit(
    space: Space,
    groups: Sequence[Sequence[Term]],
    dt: float,
    n_steps: int,
    order: int = 2,
    fuse: bool = True,
) -> ParametrizedCircuit:
    """Product formula for ``exp(-i n_steps dt H)`` with fixed gate angles.

    ``groups`` lists the terms (or prebuilt gates) of each group; generator gates are
    built once and reused for every step.  ``op.layer`` is the position of the gate's
    group block in :func:`trotter_schedule`.
    """
    gates: list[list[Gate]] = [term_gates(g, space) for g in groups]
    circuit = ParametrizedCircuit(space)
    for pos, (g, frac, rev) in enumerate(trotter_schedule(len(gates), n_steps, order, fuse)):
        for gate in reversed(gates[g]) if rev else gates[g]:
            circuit.append(gate, None, offset=frac * dt, layer=pos)
    return circuit
