"""Measurement budget: shots needed to resolve an observable to a standard error.

For an observable O diagonal in the field basis (fields, occupations, particle density), each
projective measurement of the register yields one sample; the mean of n samples has standard
error sqrt(Var O / n), so n = Var(O) / σ² shots give standard error σ (central limit theorem).
"""

from __future__ import annotations

import numpy as np

from lgt.basis import PhysicalBasis
from lgt.gauss import particle_density


def diagonal_observable_tables(basis: PhysicalBasis) -> dict[str, np.ndarray]:
    """Per-basis-state values of the diagonal observables, each shape (dim, n_components)."""
    occ = basis.occupations().astype(float)
    particles = particle_density(occ)[:, None]
    return {"electric_field": basis.fields(), "occupation": occ, "particle_density": particles}


def shots_needed(basis: PhysicalBasis, states: np.ndarray, standard_error: float) -> dict[str, int]:
    """Largest shot count over the given states (rows) and components for each observable."""
    prob = np.abs(np.atleast_2d(states)) ** 2
    prob /= prob.sum(axis=1, keepdims=True)
    out = {}
    for name, table in diagonal_observable_tables(basis).items():
        mean = prob @ table
        var = prob @ table ** 2 - mean ** 2
        out[name] = int(np.ceil(max(float(var.max()), 0.0) / standard_error ** 2))
    return out
