"""Fitting circuit parameters with adjoint gradients (L-BFGS-B).

* :func:`fit_to_target` maximises the fidelity
  ``F = |<target|C(theta)|psi0>|^2 / (||target||^2 ||psi0||^2)``; for step-by-step
  dynamics the caller passes ``target = exp(-i H dt) C(theta_old) psi0``.  Batches
  ``(B, dim)`` are allowed: the overlap is then summed over the batch (a trace).
* :func:`compile_unitary` finds the least number of native brickwork layers that
  reproduce a ``k``-qudit unitary to process fidelity ``|Tr(U^dag V)|^2 / D^2``, by
  fitting the circuit on the batch of all ``D = d**k`` basis states at once.
"""
from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
from scipy.optimize import minimize

from fluxline_threads import single_threaded_blas
from .circuit import ParametrizedCircuit
from .layers import NativeLayerSpec, native_brickwork

__all__ = ["FitResult", "fit_to_target", "CompileResult", "compile_unitary"]


@dataclass
class FitResult:
    """Outcome of a fit: parameters, fidelity reached, optimiser counters, seconds."""

    params: np.ndarray
    fidelity: float
    iterations: int
    nfev: int
    wall_time: float
    success: bool = True
    message: str = ""


def fit_to_target(
    circuit: ParametrizedCircuit,
    psi0: np.ndarray,
    target: np.ndarray,
    params0: np.ndarray | None = None,
    tol: float = 1e-10,
    maxiter: int = 500,
    stop_infidelity: float | None = None,
) -> FitResult:
    """Maximise ``|<target|C(theta)|psi0>|^2`` (normalised) from ``params0`` (default 0).

    ``tol`` is passed to L-BFGS-B as ``ftol`` and ``gtol`` on the infidelity ``1 - F``;
    with ``stop_infidelity`` the optimiser also stops as soon as ``1 - F <= stop_infidelity``
    (checked before the first iteration too, so an already good start costs one evaluation).
    """
    norm = float(np.vdot(target, target).real * np.vdot(psi0, psi0).real)
    if norm <= 0:
        raise ValueError("target and psi0 must be non-zero")
    p0 = np.zeros(circuit.n_params) if params0 is None else np.asarray(params0, dtype=float).copy()

    def loss(p: np.ndarray) -> tuple[float, np.ndarray]:
        fid, grad = circuit.fidelity_and_gradient(p, psi0, target)
        return 1.0 - fid / norm, -grad / norm

    start = time.perf_counter()
    if p0.size == 0 or stop_infidelity is not None:
        val, _ = loss(p0)
        if p0.size == 0 or val <= stop_infidelity:
            return FitResult(p0, 1.0 - val, 0, 1, time.perf_counter() - start)

    def reached(intermediate_result) -> None:
        if stop_infidelity is not None and intermediate_result.fun <= stop_infidelity:
            raise StopIteration

    with single_threaded_blas():  # the optimiser's small dense updates (see fluxline_threads)
        res = minimize(
            loss, p0, jac=True, method="L-BFGS-B", callback=reached,
            options={"maxiter": maxiter, "ftol": tol, "gtol": tol},
        )
    return FitResult(
        np.asarray(res.x),
        float(1.0 - res.fun),
        int(res.nit),
        int(res.nfev),
        time.perf_counter() - start,
        bool(res.success),
        str(res.message),
    )


@dataclass
class CompileResult:
    """Least-depth native compilation of a unitary.

    ``history`` holds ``(n_layers, best process fidelity)`` for every depth tried;
    ``counts`` the gate counts by kind of the returned circuit.
    """

    n_layers: int
    fidelity: float
    params: np.ndarray
    circuit: ParametrizedCircuit
    counts: dict[str, int]
    history: list[tuple[int, float]] = field(default_factory=list)


def compile_unitary(
    target: np.ndarray,
    n_qudits: int,
    d: int,
    spec: NativeLayerSpec | None = None,
    fidelity: float = 0.999,
    max_layers: int = 8,
    restarts: int = 4,
    maxiter: int = 2000,
    seed: int | None = None,
    factory: Callable[[int], ParametrizedCircuit] | None = None,
) -> CompileResult:
    """Fewest layers reaching process fidelity ``|Tr(U^dag V)|^2 / D^2 >= fidelity``.

    ``factory(n_layers)`` builds the candidate circuit (default: :func:`native_brickwork`
    with ``spec``).  Each depth is fitted from ``restarts`` random starts (uniform in
    ``[-pi, pi]``); the fit runs on the batch of all basis states, so one adjoint pass
    gives the gradient of the trace.  Raises ``RuntimeError`` if ``max_layers`` is not enough.
    """
    from .accounting import gate_counts

    dim = d**n_qudits
    u = np.asarray(target, dtype=np.complex128)
    if u.shape != (dim, dim):
        raise ValueError(f"target shape {u.shape} does not match {n_qudits} qudits of d={d}")
    build = factory or (lambda n: native_brickwork(n_qudits, d, n, spec))
    rng = np.random.default_rng(seed)
    basis = np.eye(dim, dtype=np.complex128)
    images = np.ascontiguousarray(u.T)  # row b = U e_b
    history: list[tuple[int, float]] = []
    for n_layers in range(1, max_layers + 1):
        circuit = build(n_layers)
        best: FitResult | None = None
        for _ in range(restarts):
            p0 = rng.uniform(-np.pi, np.pi, size=circuit.n_params)
            res = fit_to_target(circuit, basis, images, p0, tol=1e-12, maxiter=maxiter)
            if best is None or res.fidelity > best.fidelity:
                best = res
            if best.fidelity >= fidelity:
                break
        assert best is not None
        history.append((n_layers, best.fidelity))
        if best.fidelity >= fidelity:
            return CompileResult(n_layers, best.fidelity, best.params, circuit, gate_counts(circuit), history)
    raise RuntimeError(f"no circuit with <= {max_layers} layers reached fidelity {fidelity}: {history}")
