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
from typing import Any, Callable

import numpy as np

from circuits.circuit import ParametrizedCircuit
from circuits.hardware import HardwareProfile, hardware_key
from circuits.native import NotDecomposable
from circuits.accounting import schedule
from circuits.native_export import NativeCircuit, native_circuit
from circuits.noise import noisy_density_matrix
from lgt.variational.families import ModelAnsatz, get_family
from lgt.variational.native_cost import NativeCounts, TermCost, summed_cost


#: Where a price comes from: the native circuit that export writes, the summed term
#: exponentials (durations added), or a circuit's own gates as they stand.
COST_SOURCES = ("exported", "terms", "circuit")
#: how text output names each source
COST_WORDS = {"exported": "exported native circuit", "terms": "summed term exponentials",
              "circuit": "circuit's own gates", "exported+terms": "exported native circuits (deep ones: summed terms)"}
#: Largest native circuit (gates) priced from its exported form; larger ones are priced from
#: their terms (building and scheduling the native circuit costs about 15 µs per gate).
MAX_EXPORT_PRICED_GATES = 200_000


@dataclass(frozen=True)
class CircuitCost(NativeCounts):
    """Native gate counts, predicted fidelity and duration (µs) of one circuit, and ``source``
    (one of :data:`COST_SOURCES`)."""

    counts: dict[str, int]
    fidelity: float
    duration_us: float
    source: str = "terms"


class Costing:
    """What a layer family needs to price its circuits: the hardware profile and the native cost
    of each model term exponential (computed on first use by ``term_costs()``, e.g.
    :func:`lgt.variational.native_cost.model_term_costs`, or given as a dict).

    ``exported``: price circuits from the native circuit export writes
    (:meth:`of_export`; off when term exponentials are priced as generic blocks,
    ``[variational] compile = false``). Exported prices are kept per family and depth, and the
    native blocks are built once per distinct gate for the whole run.
    """

    def __init__(self, profile: HardwareProfile,
                 term_costs: dict[str, TermCost] | Callable[[], dict[str, TermCost]],
                 exported: bool = True, max_gates: int = MAX_EXPORT_PRICED_GATES) -> None:
        self.profile = profile
        self._terms = term_costs
        self.exported = exported
        self.max_gates = max_gates
        self._priced: dict[tuple, CircuitCost] = {}
        self._blocks: dict[str, Any] = {}
        self._layer_native: dict[tuple, Any] = {}
        self.sources: dict[tuple[str, int], str] = {}

    def terms(self) -> dict[str, TermCost]:
        """Native cost of every term exponential, keyed ``"hopping3"``, ``"mass0"``, …"""
        if callable(self._terms):
            self._terms = self._terms()
        return self._terms

    def of_circuit(self, circuit: ParametrizedCircuit) -> CircuitCost:
        """Cost of a circuit of native gates as it stands (counts, product of fidelities, ASAP duration)."""
        counts = Counter(hardware_key(op.gate) for op in circuit.ops)
        return CircuitCost(dict(counts), self.profile.predicted_fidelity(circuit), self.profile.duration_us(circuit),
                           "circuit")

    def of_terms(self, labels: list[str], repeats: int) -> CircuitCost:
        """Cost of ``repeats`` repetitions of the term exponentials ``labels`` (durations added:
        a conservative schedule)."""
        terms = self.terms()
        layer = summed_cost([terms[label] for label in labels], "layer")
        counts = {k: v * repeats for k, v in layer.counts.items()}
        return CircuitCost(counts, layer.fidelity ** repeats, layer.duration_us * repeats, "terms")

    def of_export(self, ansatz: ModelAnsatz, layer_circuit: Callable[[], ParametrizedCircuit],
                  fallback: Callable[[], CircuitCost]) -> CircuitCost:
        """Cost of the native circuit export writes for ``ansatz``: ``ansatz.layers`` copies of
        ``layer_circuit()`` (one layer of the register form; every layer of a family has the same
        gates) made native by :func:`circuits.native_export.native_circuit` — counts × D,
        (product of the layer's gate fidelities)^D and the ASAP makespan of the repeated native
        gates (:func:`circuits.accounting.schedule`, the rule of
        :meth:`~circuits.native_export.NativeCircuit.cost`).

        Native blocks are exact at every angle, so the structure (and the cost) does not depend
        on the angles: the layer is made native once per family, at zero angles, and each depth
        is priced once. The price is ``fallback()`` (with its own source, ``"terms"`` or
        ``"circuit"``) when exported pricing is off, when ``fallback()`` counts more than
        :attr:`max_gates` gates, or when a gate has no exact native block.
        """
        key = (ansatz.family, ansatz.layers, len(ansatz.circuit.ops))
        if key not in self._priced:
            self._priced[key] = self._price_export(ansatz, layer_circuit, fallback)
            self.sources[(ansatz.family, ansatz.layers)] = self._priced[key].source
        return self._priced[key]

    def _price_export(self, ansatz: ModelAnsatz, layer_circuit, fallback) -> CircuitCost:
        rough = fallback()
        if not self.exported or sum(rough.counts.values()) > self.max_gates:
            return rough
        layer_key = (ansatz.family, len(ansatz.circuit.ops) // max(ansatz.layers, 1))
        if layer_key not in self._layer_native:
            layer = layer_circuit()
            try:
                native = native_circuit(layer, np.zeros(layer.n_params), self.profile.gate_set(layer.space.d),
                                        self._blocks).circuit
            except NotDecomposable:
                native = None
            durations = {} if native is None else {id(op.gate): self.profile.spec(op.gate).duration_us
                                                   for op in native.ops}
            cost = None if native is None else NativeCircuit(native, 1.0).cost(self.profile)
            self._layer_native[layer_key] = (native, cost, durations)
        native, cost, durations = self._layer_native[layer_key]
        if native is None:
            return rough
        deep = ParametrizedCircuit(native.space)
        for r in range(ansatz.layers):
            for op in native.ops:
                deep.append(op.gate, None, layer=r)
        duration = schedule(deep, lambda op: durations[id(op.gate)]).makespan
        return CircuitCost({k: v * ansatz.layers for k, v in cost.counts.items()}, cost.fidelity ** ansatz.layers,
                           duration, "exported")

    def source(self, family: str) -> str:
        """Where the prices of ``family``'s depths came from: one of :data:`COST_SOURCES`, or
        several joined by ``"+"`` (e.g. ``"exported+terms"`` when deep circuits were too large)."""
        found = [v for (f, _), v in sorted(self.sources.items()) if f == family]
        return "+".join(dict.fromkeys(found)) or "terms"


def first_layer(circuit: ParametrizedCircuit) -> ParametrizedCircuit:
    """The gates of ``circuit`` tagged ``layer == 0`` (fixed at zero angle)."""
    out = ParametrizedCircuit(circuit.space)
    for op in circuit.ops:
        if op.layer == 0:
            out.append(op.gate, None, layer=0)
    return out


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


def profile_summary(profile: HardwareProfile) -> dict[str, Any]:
    """What every output of ``fit`` and ``size`` says about the profile: ``hardware_profile``
    (name, path, sha256) and, for the built-in illustrative profile, ``profile_sources`` (the
    ``source`` line of each of its numbers)."""
    out: dict[str, Any] = {"hardware_profile": profile.identity()}
    if profile.builtin:
        out["profile_sources"] = profile.source_lines()
    return out


def profile_lines(profile: HardwareProfile) -> list[str]:
    """Text form of :func:`profile_summary` (one line naming the profile, then its sources)."""
    ident = profile.identity()
    lines = [f"hardware profile: {ident['name']} ({ident['path']}, sha256 {ident['sha256'][:16]})"]
    if profile.builtin:
        lines.append("  its numbers are illustrative defaults; replace them with your device's figures:")
        lines += [f"    {line}" for line in profile.source_lines()]
    return lines
