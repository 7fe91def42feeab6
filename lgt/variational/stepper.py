"""Step-by-step variational time evolution (projected variational dynamics).

At each step of length dt the new parameters maximise |⟨ψ(θ_new)| e^{−iH dt} |ψ(θ_old)⟩|²
(Barison, Vicentini & Carleo, Quantum 5, 512 (2021)), warm-started from θ_old plus the previous
update, with L-BFGS and adjoint gradients. A compression mode instead fits each stored time
directly to the exact state (also warm-started). Step errors compound,
1 − F(T) ≈ Σ_k (step infidelity)_k, so the per-step threshold follows from the total tolerance.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np
from scipy.sparse.linalg import expm_multiply

from circuits.fitting import fit_to_target
from lgt.hamiltonian import build_hamiltonian
from lgt.propagation import evolve_states
from lgt.variational.ansatz import ModelAnsatz

MODES = ("dynamics", "compression")
#: Standard deviation (radians) of the random angles added on a restart.
JITTER = 0.05


@dataclass
class VariationalTrajectory:
    """Fitted trajectory on the time grid t_k = k dt, k = 0..n_steps.

    Attributes
    ----------
    times : (T,) lattice time units
    params : (T, P) fitted parameters (row 0 = zeros, the initial state)
    step_infidelity : (T,) 1 − F of each step's fit (0 at t = 0)
    fidelity : (T,) |⟨ψ_exact(t)|ψ_var(t)⟩|², the accumulated fidelity
    leakage : (T,) weight of ψ_var outside the physical subspace
    iterations, evaluations : (T,) optimiser counters per step
    wall_time : (T,) seconds per step
    states : (T, dim_phys) physical components of ψ_var (leaked part dropped)
    exact_states : (T, dim_phys) exact reference
    """

    times: np.ndarray
    params: np.ndarray
    step_infidelity: np.ndarray
    fidelity: np.ndarray
    leakage: np.ndarray
    iterations: np.ndarray
    evaluations: np.ndarray
    wall_time: np.ndarray
    states: np.ndarray
    exact_states: np.ndarray

    @property
    def max_infidelity(self) -> float:
        """max_t (1 − F(t)) over the window."""
        return float(np.max(1.0 - self.fidelity))


def exact_trajectory(ansatz: ModelAnsatz, psi0: np.ndarray, dt: float, n_steps: int) -> np.ndarray:
    """Exact physical-subspace states at t_k = k dt, shape (n_steps + 1, dim) (one exact
    propagator, :func:`lgt.propagation.evolve_states`)."""
    H = ansatz.hamiltonian if ansatz.space == "physical" else build_hamiltonian(ansatz.basis)
    return evolve_states(H, psi0, np.arange(n_steps + 1) * dt)


def fit_trajectory(ansatz: ModelAnsatz, psi0: np.ndarray, dt: float, n_steps: int,
                   step_tolerance: float, maxiter: int = 300, mode: str = "dynamics",
                   restarts: int = 1, seed: int = 0, progress=None,
                   abort_infidelity: float | None = None) -> VariationalTrajectory:
    """Fit the ansatz step by step from the physical initial state ``psi0``.

    Parameters
    ----------
    psi0 : normalised physical-subspace vector (the circuit starts from it at θ = 0).
    dt : step in lattice time units; ``n_steps`` steps are fitted.
    step_tolerance : a step stops as soon as its infidelity ≤ this (or at ``maxiter``).
    mode : "dynamics" (target e^{−iH dt}ψ(θ_old)) or "compression" (target exact ψ(t)).
    restarts : extra fits of a step that missed ``step_tolerance``, each from the previous
        parameters plus small random angles (escapes the saddle points of the landscape, e.g.
        the identity point of native brickwork layers); the best fit is kept.
    progress : optional callable ``progress(k)`` after each step.
    abort_infidelity : stop early once 1 − F(t_k) against the exact state exceeds this (the
        window can no longer meet that tolerance); the trajectory then ends at that step.
    """
    if mode not in MODES:
        raise ValueError(f"mode must be one of {MODES}, got {mode!r}")
    psi0 = np.asarray(psi0, dtype=np.complex128)
    exact = exact_trajectory(ansatz, psi0, dt, n_steps)
    A = (-1j * dt) * ansatz.hamiltonian.tocsr()
    v0 = ansatz.embed(psi0)
    P = ansatz.n_params
    T = n_steps + 1
    params = np.zeros((T, P))
    step_inf = np.zeros(T)
    fidelity = np.ones(T)
    leakage = np.zeros(T)
    iters = np.zeros(T, dtype=np.int64)
    nfev = np.zeros(T, dtype=np.int64)
    wall = np.zeros(T)
    states = np.empty((T, psi0.size), dtype=np.complex128)
    states[0] = psi0
    current = v0
    circuit = ansatz.circuit
    rng = np.random.default_rng(seed)
    for k in range(n_steps):
        t0 = time.perf_counter()
        target = expm_multiply(A, current) if mode == "dynamics" else ansatz.embed(exact[k + 1])
        start = params[k] + (params[k] - params[k - 1] if k > 0 else 0.0)
        guess = _better_start(circuit, v0, target, [start, params[k]])
        res = fit_to_target(circuit, v0, target, guess, tol=1e-14, maxiter=maxiter,
                            stop_infidelity=step_tolerance)
        for _ in range(restarts):
            if 1.0 - res.fidelity <= step_tolerance:
                break
            jitter = params[k] + rng.normal(scale=JITTER, size=P)
            retry = fit_to_target(circuit, v0, target, jitter, tol=1e-14, maxiter=maxiter,
                                  stop_infidelity=step_tolerance)
            retry.iterations += res.iterations
            retry.nfev += res.nfev
            if retry.fidelity > res.fidelity:
                res = retry
            else:
                res.iterations, res.nfev = retry.iterations, retry.nfev
        params[k + 1] = res.params
        current = circuit.apply(res.params, v0)
        phys, leak = ansatz.to_physical(current)
        states[k + 1] = phys
        leakage[k + 1] = leak
        fidelity[k + 1] = abs(np.vdot(exact[k + 1], phys)) ** 2
        step_inf[k + 1] = 1.0 - res.fidelity
        iters[k + 1], nfev[k + 1] = res.iterations, res.nfev
        wall[k + 1] = time.perf_counter() - t0
        if progress is not None:
            progress(k + 1)
        if abort_infidelity is not None and 1.0 - fidelity[k + 1] > abort_infidelity:
            T = k + 2
            break
    return VariationalTrajectory(np.arange(T) * dt, params[:T], step_inf[:T], fidelity[:T], leakage[:T],
                                 iters[:T], nfev[:T], wall[:T], states[:T], exact[:T])


def _better_start(circuit, v0: np.ndarray, target: np.ndarray, candidates: list[np.ndarray]) -> np.ndarray:
    """The candidate start with the higher fidelity to ``target`` (extrapolation can overshoot)."""
    norm = float(np.vdot(target, target).real)
    scores = [abs(np.vdot(target, circuit.apply(c, v0))) ** 2 / norm for c in candidates]
    return np.array(candidates[int(np.argmax(scores))], dtype=float)

