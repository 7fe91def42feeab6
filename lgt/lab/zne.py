"""Zero-noise extrapolation by gate folding (Temme, Bravyi & Gambetta, PRL 119, 180509 (2017);
folding as in Giurgica-Tiron et al., IEEE QCE 2020, 306).

Every gate U of a circuit becomes U (U† U)^((λ−1)/2) for an odd scale λ, multiplying each gate's
noise (and duration) by λ while keeping the unitary; values measured at scales λ_i are extrapolated
to λ = 0 with the Lagrange (Richardson) coefficients c_i = Π_{j≠i} λ_j / (λ_j − λ_i); errors of
independent runs combine as (Σ c_i² σ_i²)^{1/2}.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np

from circuits.circuit import ParametrizedCircuit

__all__ = ["fold_circuit", "richardson_coefficients", "extrapolate"]


def fold_circuit(circuit: ParametrizedCircuit, scale: int, params: Sequence[float] | None = None) -> ParametrizedCircuit:
    """The circuit at ``params`` with every gate folded to U (U† U)^((scale−1)/2) (fixed gates)."""
    if scale < 1 or scale % 2 == 0:
        raise ValueError(f"fold scale must be an odd integer >= 1, got {scale}")
    out = ParametrizedCircuit(circuit.space)
    for op, t in zip(circuit.ops, circuit.angles(params)):
        out.append(op.gate, None, offset=float(t), layer=op.layer)
        for _ in range((scale - 1) // 2):
            out.append(op.gate, None, offset=-float(t), layer=op.layer)
            out.append(op.gate, None, offset=float(t), layer=op.layer)
    return out


def richardson_coefficients(scales: Sequence[float]) -> np.ndarray:
    """c_i with Σ c_i f(λ_i) = f(0) for every polynomial f of degree < len(scales)."""
    lam = np.asarray(scales, dtype=float)
    return np.array([np.prod([lam[j] / (lam[j] - lam[i]) for j in range(lam.size) if j != i])
                     for i in range(lam.size)])


def extrapolate(scales: Sequence[float], values: np.ndarray, errors: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(zero-noise value, its error) from values and errors of shape (S, ...) at the S scales."""
    c = richardson_coefficients(scales)
    values, errors = np.asarray(values, dtype=float), np.asarray(errors, dtype=float)
    return np.tensordot(c, values, axes=1), np.sqrt(np.tensordot(c ** 2, errors ** 2, axes=1))
