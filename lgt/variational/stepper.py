"""Step-by-step variational time evolution (projected variational dynamics).

At each step of length dt the new parameters maximise |⟨ψ(θ_new)| e^{−iH dt} |ψ(θ_old)⟩|²
(Barison, Vicentini & Carleo, Quantum 5, 512 (2021)), warm-started from θ_old plus the previous
update, with L-BFGS and adjoint gradients. A compression mode instead fits each stored time
directly to the exact state (also warm-started). Step errors compound,
1 − F(T) ≈ Σ_k (step infidelity)_k, so the per-step threshold follows from the total tolerance.
"""

from __future__ import annotations

import time
from math import comb
from dataclasses import dataclass, fields
from typing import Callable

import numpy as np

from scipy.optimize import minimize

from fluxline_threads import single_threaded_blas
from circuits.fitting import FitResult, fit_to_target
from lgt.hamiltonian import build_hamiltonian
from lgt.propagation import ExactPropagator, evolve_states
from lgt.variational.ansatz import ModelAnsatz

MODES = ("dynamics", "compression")
#: Standard deviation (radians) of the random angles added on a restart.
JITTER = 0.05
#: Fast path: a step's fit stops once its infidelity fell by less than STALL_GAIN (relative)
#: over the last STALL_WINDOW iterations (it has settled on the depth's floor; measured on
#: 6-site hardware layers: see docs/variational.md).
STALL_WINDOW = 50
STALL_GAIN = 0.01


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


#: Highest order of the polynomial extrapolations of the angles offered as a step's start
#: (1: θ_k + (θ_k − θ_{k−1}); 2 adds the quadratic 3θ_k − 3θ_{k−1} + θ_{k−2}).
EXTRAPOLATION_ORDER = 1


def start_candidates(history: np.ndarray, order: int | None = None) -> list[np.ndarray]:
    """Start angles offered to the next step's fit, given the fitted angles so far (rows
    θ_0 … θ_k): the polynomial extrapolations in time through the last 2, …, ``order`` + 1
    points (Newton's backward differences on the uniform grid), then θ_k itself."""
    order = EXTRAPOLATION_ORDER if order is None else order
    k = len(history) - 1
    out = []
    for m in range(min(order, k), 0, -1):
        # the degree-m polynomial through θ_{k−m} … θ_k, evaluated at k + 1: Σ_j (−1)^j C(m+1, j+1) θ_{k−j}
        if m == 1:
            out.append(history[k] + (history[k] - history[k - 1]))
            continue
        coeffs = [(-1) ** j * comb(m + 1, j + 1) for j in range(m + 1)]
        out.append(sum(c * history[k - j] for j, c in enumerate(coeffs)))
    if k == 0:
        out.append(history[0] + 0.0)  # no history yet: the zero update (as the extrapolation before)
    out.append(history[k])
    return out


def truncated(traj: VariationalTrajectory, abort_infidelity: float | None) -> VariationalTrajectory:
    """``traj`` as :func:`fit_trajectory` with the fixed ``abort_infidelity`` would have returned
    it: ended at the first step whose 1 − F(t_k) exceeds the bound. Each step's fit depends only
    on the steps before it, so a trajectory fitted with a looser (or no) bound, cut here, is the
    one fitted with this bound (used by parallel sizing, :mod:`lgt.variational.sizing`)."""
    if abort_infidelity is None:
        return traj
    over = np.flatnonzero(1.0 - traj.fidelity[1:] > abort_infidelity)
    if over.size == 0:
        return traj
    end = int(over[0]) + 2
    return VariationalTrajectory(**{f.name: getattr(traj, f.name)[:end] for f in fields(traj)})


def exact_trajectory(ansatz: ModelAnsatz, psi0: np.ndarray, dt: float, n_steps: int) -> np.ndarray:
    """Exact physical-subspace states at t_k = k dt, shape (n_steps + 1, dim) (one exact
    propagator, :func:`lgt.propagation.evolve_states`)."""
    H = ansatz.hamiltonian if ansatz.space == "physical" else build_hamiltonian(ansatz.basis)
    return evolve_states(H, psi0, np.arange(n_steps + 1) * dt)


def fit_trajectory(ansatz: ModelAnsatz, psi0: np.ndarray, dt: float, n_steps: int,
                   step_tolerance: float, maxiter: int = 300, mode: str = "dynamics",
                   restarts: int = 1, seed: int = 0, progress=None,
                   abort_infidelity: float | Callable[[], float | None] | None = None, fast: bool = True,
                   warm: np.ndarray | None = None) -> VariationalTrajectory:
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
        window can no longer meet that tolerance); the trajectory then ends at that step. A
        callable is asked after every step (a bound that may tighten while the fit runs, e.g.
        from depths fitted in parallel; :func:`truncated` cuts such a trajectory at a fixed
        bound afterwards).
    fast : the fast path: stall stop and restarts only when stuck (see :data:`STALL_WINDOW`,
        :func:`_fit_step_fast`); ``False`` is the plain path (every step to its threshold or
        ``maxiter``, every missed step restarted).
    warm : optional (T, P) start angles per step (e.g. a shallower depth's fit padded with
        identity layers); used at a step when it starts closer than the extrapolation.
    """
    if mode not in MODES:
        raise ValueError(f"mode must be one of {MODES}, got {mode!r}")
    psi0 = np.asarray(psi0, dtype=np.complex128)
    exact = exact_trajectory(ansatz, psi0, dt, n_steps)
    # the one exact propagator (lgt.propagation) gives each step's target e^{−iH dt} ψ(θ_old);
    # expm_multiply suits a single short step
    stepper = ExactPropagator(ansatz.hamiltonian, method="expm_multiply") if mode == "dynamics" else None
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
        target = stepper.step(current, dt) if stepper is not None else ansatz.embed(exact[k + 1])
        candidates = start_candidates(params[:k + 1])
        if warm is not None and k + 1 < len(warm):
            candidates.append(warm[k + 1])
        guess = _better_start(circuit, v0, target, candidates)
        if fast:
            res = _fit_step_fast(circuit, v0, target, guess, step_tolerance, maxiter, restarts, rng)
        else:
            res = _fit_step_plain(circuit, v0, target, guess, params[k], step_tolerance, maxiter, restarts, rng)
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
        bound = abort_infidelity() if callable(abort_infidelity) else abort_infidelity
        if bound is not None and 1.0 - fidelity[k + 1] > bound:
            T = k + 2
            break
    if stepper is not None:
        stepper.close()
    return VariationalTrajectory(np.arange(T) * dt, params[:T], step_inf[:T], fidelity[:T], leakage[:T],
                                 iters[:T], nfev[:T], wall[:T], states[:T], exact[:T])


def _fit_step_plain(circuit, v0, target, guess, previous, step_tolerance, maxiter, restarts, rng) -> FitResult:
    """The plain step fit: L-BFGS to the threshold or ``maxiter``, then ``restarts`` fits from the
    previous angles plus random angles while the threshold is missed; the best fit is kept."""
    res = fit_to_target(circuit, v0, target, guess, tol=1e-14, maxiter=maxiter, stop_infidelity=step_tolerance)
    for _ in range(restarts):
        if 1.0 - res.fidelity <= step_tolerance:
            break
        jitter = previous + rng.normal(scale=JITTER, size=previous.size)
        res = _better_fit(res, fit_to_target(circuit, v0, target, jitter, tol=1e-14, maxiter=maxiter,
                                             stop_infidelity=step_tolerance))
    return res


def _fit_step_fast(circuit, v0, target, guess, step_tolerance, maxiter, restarts, rng) -> FitResult:
    """The fast step fit: L-BFGS with the stall stop; restarts from jittered angles only while
    the optimiser converged to a stationary point above the threshold (a saddle such as the
    identity point of native layers), never after a stall or ``maxiter`` (a floor of the depth)."""
    res = _lbfgs_stall(circuit, v0, target, guess, step_tolerance, maxiter)
    for _ in range(restarts):
        if 1.0 - res.fidelity <= step_tolerance or not res.success:
            break
        jitter = res.params + rng.normal(scale=JITTER, size=guess.size)
        res = _better_fit(res, _lbfgs_stall(circuit, v0, target, jitter, step_tolerance, maxiter))
    return res


def _better_fit(res: FitResult, retry: FitResult) -> FitResult:
    """The better of two fits of one step, counting the work of both."""
    retry.iterations += res.iterations
    retry.nfev += res.nfev
    if retry.fidelity > res.fidelity:
        return retry
    res.iterations, res.nfev = retry.iterations, retry.nfev
    return res


def _lbfgs_stall(circuit, v0, target, start, stop_infidelity, maxiter) -> FitResult:
    """L-BFGS-B fit of |<target|C(θ)|v0>|² from ``start`` that stops at ``stop_infidelity``, at
    ``maxiter`` or on a stall (see :data:`STALL_WINDOW`); ``success`` is True only when the
    optimiser itself converged (a stationary point)."""
    norm = float(np.vdot(target, target).real * np.vdot(v0, v0).real)
    t0 = time.perf_counter()

    def loss(p: np.ndarray) -> tuple[float, np.ndarray]:
        fid, grad = circuit.fidelity_and_gradient(p, v0, target)
        return 1.0 - fid / norm, -grad / norm

    first, _ = loss(start)
    if first <= stop_infidelity or start.size == 0:
        return FitResult(start.copy(), 1.0 - first, 0, 1, time.perf_counter() - t0, False, "start")
    history = [first]
    stopped: list[str] = []

    def watch(intermediate_result) -> None:
        value = intermediate_result.fun
        history.append(value)
        if value <= stop_infidelity:
            stopped.append("threshold")
        elif len(history) > STALL_WINDOW and history[-1 - STALL_WINDOW] - value < STALL_GAIN * value:
            stopped.append("stall")
        if stopped:
            raise StopIteration

    with single_threaded_blas():
        out = minimize(loss, start, jac=True, method="L-BFGS-B", callback=watch,
                       options={"maxiter": maxiter, "ftol": 1e-14, "gtol": 1e-14})
    converged = bool(out.success) and not stopped and out.nit < maxiter
    return FitResult(np.asarray(out.x), float(1.0 - out.fun), int(out.nit), int(out.nfev),
                     time.perf_counter() - t0, converged, stopped[0] if stopped else str(out.message))


def _better_start(circuit, v0: np.ndarray, target: np.ndarray, candidates: list[np.ndarray]) -> np.ndarray:
    """The candidate start with the higher fidelity to ``target`` (extrapolation can overshoot)."""
    norm = float(np.vdot(target, target).real)
    scores = [abs(np.vdot(target, circuit.apply(c, v0))) ** 2 / norm for c in candidates]
    return np.array(candidates[int(np.argmax(scores))], dtype=float)

