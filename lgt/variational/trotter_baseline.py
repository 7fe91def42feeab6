"""Trotter baseline: first- and second-order product formulas with even/odd/diagonal splitting.

Groups (each made of mutually commuting terms, so each group exponential is exact):
diagonal (mass + electric), hopping on even links, hopping on odd links. The circuits run in
the physical subspace; the least number of steps meeting the tolerance over [0, T] is found
by doubling and bisection, and its native gate count follows from the compiled cost of each
distinct hopping exponential (see :mod:`lgt.variational.native_cost`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from circuits.register import Space
from circuits.trotter import trotter_circuit
from lgt.basis import PhysicalBasis
from lgt.hamiltonian import build_hamiltonian, physical_terms
from lgt.propagation import ExactPropagator
from lgt.variational.ansatz import ordered_terms


def trotter_groups(basis: PhysicalBasis) -> list[list]:
    """Sparse term matrices grouped as [diagonal, hopping-even, hopping-odd] (empty groups dropped)."""
    by_key = {(t.kind, t.index): t.matrix for t in physical_terms(basis)}
    groups: dict[str, list] = {"diagonal": [], "hop-even": [], "hop-odd": []}
    for kind, index, group in ordered_terms(basis.params):
        groups[group].append(by_key[(kind, index)])
    return [g for g in groups.values() if g]


def trotter_max_infidelity(basis: PhysicalBasis, psi0: np.ndarray, t_final: float, n_steps: int,
                           order: int, groups: list[list] | None = None,
                           propagator: ExactPropagator | None = None) -> tuple[float, np.ndarray]:
    """max_k (1 − |⟨ψ_exact(t_k)|ψ_Trotter(t_k)⟩|²) over t_k = k T/n, and the infidelity per step.

    ``groups`` and ``propagator`` (the exact reference for this basis) are built when not given;
    pass them to reuse one H across calls (as :func:`least_trotter_steps` does).
    """
    groups = trotter_groups(basis) if groups is None else groups
    own = propagator is None
    propagator = ExactPropagator(build_hamiltonian(basis)) if own else propagator
    dt = t_final / n_steps
    step = trotter_circuit(Space.subspace(basis.dimension), groups, dt, 1, order)
    approx = np.asarray(psi0, dtype=np.complex128).copy()
    infid = np.zeros(n_steps + 1)
    try:
        for k, exact in propagator.states(psi0, np.arange(n_steps + 1) * dt):
            if k > 0:
                approx = step.apply(None, approx)
                infid[k] = 1.0 - abs(np.vdot(exact, approx)) ** 2
    finally:
        if own:
            propagator.close()
    return float(infid.max()), infid


@dataclass
class TrotterResult:
    """Least Trotter steps for one order; ``max_infidelity`` at that step count."""

    order: int
    steps: int | None
    max_infidelity: float
    history: list[tuple[int, float]]


def least_trotter_steps(basis: PhysicalBasis, psi0: np.ndarray, t_final: float, tolerance: float,
                        order: int, max_steps: int = 512,
                        measure: Callable[[int], float] | None = None) -> TrotterResult:
    """Fewest steps n whose trajectory keeps 1 − F ≤ ``tolerance`` at every step time in [0, T]
    (or, with ``measure``, keeps ``measure(n)`` ≤ ``tolerance``: another error of n steps)."""
    groups = trotter_groups(basis)
    propagator = ExactPropagator(build_hamiltonian(basis))  # H built once for every bisection call
    history: list[tuple[int, float]] = []

    def error(n: int) -> float:
        e = (measure(n) if measure is not None
             else trotter_max_infidelity(basis, psi0, t_final, n, order, groups, propagator)[0])
        history.append((n, e))
        return e

    with propagator:
        n = 1
        while error(n) > tolerance:
            if n >= max_steps:
                return TrotterResult(order, None, history[-1][1], history)
            n = min(2 * n, max_steps)
        lo, hi = n // 2, n  # error(lo) > tolerance (or lo = 0), error(hi) ≤ tolerance
        while hi - lo > 1:
            mid = (lo + hi) // 2
            if error(mid) <= tolerance:
                hi = mid
            else:
                lo = mid
    best = dict(history)[hi]
    return TrotterResult(order, hi, best, sorted(history))
