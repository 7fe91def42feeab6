"""A fitted trajectory against the exact reference: fidelity, observable errors, leakage."""

from __future__ import annotations

import numpy as np

from lgt.observables import Observer
from lgt.results import max_deviation
from lgt.variational.stepper import VariationalTrajectory

#: Observables compared between variational and exact states (register measurements are
#: post-selected on the physical subspace, i.e. the physical part is renormalised).
COMPARED = ("electric_field", "occupation", "particle_density", "entanglement_entropy", "loschmidt_echo")


def observable_series(observer: Observer, states: np.ndarray) -> dict[str, np.ndarray]:
    """Each compared observable at every row of ``states`` (rows renormalised), shape (T, ...)."""
    rows = []
    for psi in states:
        norm = np.linalg.norm(psi)
        rows.append(observer.measure(psi / norm if norm > 0 else psi))
    return {name: np.array([r[name] for r in rows]) for name in observer.which}


def compare_to_exact(observer: Observer, trajectory: VariationalTrajectory) -> dict[str, dict]:
    """Per observable: variational and exact series, |error| per time, max and RMS error."""
    var = observable_series(observer, trajectory.states)
    ex = observable_series(observer, trajectory.exact_states)
    out = {}
    for name in observer.which:
        err = np.abs(var[name] - ex[name])
        per_time = max_deviation(var[name], ex[name])
        out[name] = {"variational": var[name], "exact": ex[name], "error": per_time,
                     "max_error": float(per_time.max()), "rms_error": float(np.sqrt(np.mean(err ** 2)))}
    return out


def make_observer(trajectory: VariationalTrajectory, basis) -> Observer:
    """An :class:`Observer` for the compared observables with ψ₀ as echo reference."""
    return Observer(basis, reference=trajectory.exact_states[0], which=COMPARED)
