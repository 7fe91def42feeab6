"""Gate-error budget: predicted circuit fidelity as the product of gate fidelities.

The prediction F_noise = Π_g F_g treats every gate error as independent and fatal; checked
against a density-matrix simulation with depolarizing noise after each gate
(:func:`circuits.noise.noisy_density_matrix`). For depolarizing errors the simulated state
fidelity lies between the prediction and the prediction with each error weighted by
(1 − 1/D_g) (an error on D_g levels returns the state with probability up to 1/D_g), so the
product is a slightly pessimistic estimate to first order in the gate errors.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass

import numpy as np

from circuits.hardware import HardwareProfile, hardware_key
from circuits.noise import noisy_density_matrix
from lgt.variational.ansatz import ModelAnsatz
from lgt.variational.native_cost import NativeCounts, TermCost, summed_cost


@dataclass(frozen=True)
class CircuitCost(NativeCounts):
    """Native gate counts, predicted fidelity and duration (µs) of one circuit."""

    counts: dict[str, int]
    fidelity: float
    duration_us: float


def ansatz_cost(ansatz: ModelAnsatz, profile: HardwareProfile, term_costs: dict[str, TermCost]) -> CircuitCost:
    """Native cost of the whole D-layer circuit (the same at every time step).

    Hardware layers are native already; symmetric layers cost the sum of their terms'
    compiled exponentials (durations added: a conservative schedule).
    """
    if ansatz.family == "hardware":
        c = ansatz.circuit
        counts = Counter(hardware_key(op.gate) for op in c.ops)
        return CircuitCost(dict(counts), profile.predicted_fidelity(c), profile.duration_us(c))
    layer = summed_cost([term_costs[label] for label in ansatz.labels], "layer")
    counts = {k: v * ansatz.layers for k, v in layer.counts.items()}
    return CircuitCost(counts, layer.fidelity ** ansatz.layers, layer.duration_us * ansatz.layers)


def density_matrix_check(ansatz: ModelAnsatz, params: np.ndarray, psi0_register: np.ndarray,
                         profile: HardwareProfile) -> tuple[float, float]:
    """(predicted product of gate fidelities, simulated ⟨ψ_ideal|ρ_noisy|ψ_ideal⟩) for a register ansatz."""
    if ansatz.space != "register":
        raise ValueError("the density-matrix check needs a register ansatz")
    ideal = ansatz.circuit.apply(params, psi0_register)
    rho = noisy_density_matrix(ansatz.circuit, params, psi0_register, lambda op: profile.spec(op.gate).fidelity)
    simulated = float(np.vdot(ideal, rho @ ideal).real)
    return profile.predicted_fidelity(ansatz.circuit), simulated
