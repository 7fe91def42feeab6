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
from typing import Callable

import numpy as np

from circuits.circuit import ParametrizedCircuit
from circuits.hardware import HardwareProfile, hardware_key
from circuits.noise import noisy_density_matrix
from lgt.variational.families import ModelAnsatz, get_family
from lgt.variational.native_cost import NativeCounts, TermCost, summed_cost


@dataclass(frozen=True)
class CircuitCost(NativeCounts):
    """Native gate counts, predicted fidelity and duration (µs) of one circuit."""

    counts: dict[str, int]
    fidelity: float
    duration_us: float


class Costing:
    """What a layer family needs to price its circuits: the hardware profile and the native cost
    of each model term exponential (computed on first use by ``term_costs()``, e.g.
    :func:`lgt.variational.native_cost.model_term_costs`, or given as a dict)."""

    def __init__(self, profile: HardwareProfile,
                 term_costs: dict[str, TermCost] | Callable[[], dict[str, TermCost]]) -> None:
        self.profile = profile
        self._terms = term_costs

    def terms(self) -> dict[str, TermCost]:
        """Native cost of every term exponential, keyed ``"hopping3"``, ``"mass0"``, …"""
        if callable(self._terms):
            self._terms = self._terms()
        return self._terms

    def of_circuit(self, circuit: ParametrizedCircuit) -> CircuitCost:
        """Cost of a circuit of native gates as it stands (counts, product of fidelities, ASAP duration)."""
        counts = Counter(hardware_key(op.gate) for op in circuit.ops)
        return CircuitCost(dict(counts), self.profile.predicted_fidelity(circuit), self.profile.duration_us(circuit))

    def of_terms(self, labels: list[str], repeats: int) -> CircuitCost:
        """Cost of ``repeats`` repetitions of the term exponentials ``labels`` (durations added:
        a conservative schedule)."""
        terms = self.terms()
        layer = summed_cost([terms[label] for label in labels], "layer")
        counts = {k: v * repeats for k, v in layer.counts.items()}
        return CircuitCost(counts, layer.fidelity ** repeats, layer.duration_us * repeats)


def ansatz_cost(ansatz: ModelAnsatz, profile: HardwareProfile,
                term_costs: dict[str, TermCost] | Costing) -> CircuitCost:
    """Native cost of the whole D-layer circuit (the same at every time step), as its family
    prices it (:meth:`~lgt.variational.families.base.LayerFamily.native_cost`)."""
    costing = term_costs if isinstance(term_costs, Costing) else Costing(profile, term_costs)
    return get_family(ansatz.family).native_cost(ansatz, costing)


def density_matrix_check(ansatz: ModelAnsatz, params: np.ndarray, psi0_register: np.ndarray,
                         profile: HardwareProfile) -> tuple[float, float]:
    """(predicted product of gate fidelities, simulated ⟨ψ_ideal|ρ_noisy|ψ_ideal⟩) for a register ansatz."""
    if ansatz.space != "register":
        raise ValueError("the density-matrix check needs a register ansatz")
    ideal = ansatz.circuit.apply(params, psi0_register)
    rho = noisy_density_matrix(ansatz.circuit, params, psi0_register, lambda op: profile.spec(op.gate).fidelity)
    simulated = float(np.vdot(ideal, rho @ ideal).real)
    return profile.predicted_fidelity(ansatz.circuit), simulated
