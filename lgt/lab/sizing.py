"""Noisy and post-selected circuit fidelities, and the predicted observable error, for depth
sizing under the register noise model (``docs/lab.md``, "Sizing with noise")."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from fluxline_threads import single_threaded_blas
from circuits.circuit import ParametrizedCircuit
from circuits.density import MAX_DENSITY_DIM, simulate_density
from circuits.noise_program import noisy_program
from circuits.trajectories import run_states
from lgt.lab.mitigation import StringObservables
from lgt.lab.noise import LabNoise

__all__ = ["NoisyOutcome", "noisy_outcome", "noisy_fidelities", "predicted_observable_error"]


@dataclass
class NoisyOutcome:
    """One noisy circuit run: fidelities, discard rate and the true-string populations.

    probabilities : (d^K,) population of every register string (sums to 1 − lost population)
    method : "density" or "trajectories"; trajectories : their number (0 for the density matrix)
    """

    fidelity: float
    post_selected_fidelity: float
    discard_rate: float
    probabilities: np.ndarray
    method: str
    trajectories: int


def noisy_outcome(circuit: ParametrizedCircuit, profile_noise: LabNoise, psi0: np.ndarray,
                  physical_mask: np.ndarray, params: np.ndarray | None = None,
                  target: np.ndarray | None = None, trajectories: int = 256, seed: int = 0,
                  density_limit: int | None = None) -> NoisyOutcome:
    """Noisy run of a register circuit (see :func:`noisy_fidelities` for the definitions); density
    matrix up to d^K = ``density_limit`` (default MAX_DENSITY_DIM) strings, else trajectories."""
    program = noisy_program(circuit, params, profile_noise.model, profile_noise.spec())
    phi = circuit.apply(params, psi0) if target is None else np.asarray(target, dtype=np.complex128)
    mask = np.asarray(physical_mask, dtype=bool)
    phi_p = phi * mask
    if phi.size <= (MAX_DENSITY_DIM if density_limit is None else min(density_limit, MAX_DENSITY_DIM)):
        rho = simulate_density(program, psi0).rho
        fid = float(np.vdot(phi, rho @ phi).real)
        prob = np.clip(np.diagonal(rho).real, 0.0, None)
        ps = float(np.vdot(phi_p, rho @ phi_p).real)
        method, n = "density", 0
    else:
        with single_threaded_blas():
            states = run_states(program, psi0, trajectories, np.random.default_rng(seed))
        fid = float(np.mean(np.abs(states @ phi.conj()) ** 2))
        prob = np.mean(np.abs(states) ** 2, axis=0)
        ps = float(np.mean(np.abs(states @ phi_p.conj()) ** 2))
        method, n = "trajectories", trajectories
    kept = float(prob[mask].sum())
    return NoisyOutcome(fid, ps / kept if kept > 0 else 0.0, 1.0 - kept, prob, method, n)


def noisy_fidelities(circuit: ParametrizedCircuit, profile_noise: LabNoise, psi0: np.ndarray,
                     physical_mask: np.ndarray, params: np.ndarray | None = None,
                     target: np.ndarray | None = None, trajectories: int = 256,
                     seed: int = 0) -> tuple[float, float, float]:
    """(noisy fidelity, post-selected fidelity, discard rate) of a register circuit.

    noisy fidelity F = ⟨φ|ρ|φ⟩ with φ the noiseless output (or ``target``), ρ the noisy output
    (leaked population counts as lost); post-selected F_ps = ⟨φ|PρP|φ⟩ / Tr(Pρ) with P the projector
    on the register strings where ``physical_mask`` (d^K booleans) is True; discard rate 1 − Tr(Pρ).
    Density matrix up to d^K = MAX_DENSITY_DIM, else ``trajectories`` Monte-Carlo wave functions
    (statistical error about 1/√trajectories).
    """
    o = noisy_outcome(circuit, profile_noise, psi0, physical_mask, params, target, trajectories, seed)
    return o.fidelity, o.post_selected_fidelity, o.discard_rate


def _components(obs: StringObservables) -> np.ndarray:
    """Per-string values of ν and every ⟨L_n⟩, shape (1 + K, d^K)."""
    return np.vstack([obs.density[None, :], obs.field])


def predicted_observable_error(probabilities: np.ndarray, exact_probabilities: np.ndarray,
                               obs: StringObservables, shots: int) -> tuple[float, float, float]:
    """(predicted error ε, bias, shot error) of the Gauss-law mitigated ν and ⟨L_n⟩ at ``shots`` shots.

    With p the noisy true-string populations, post-selected to the physical strings and
    renormalised, each component O (ν and every L_n) has bias b_O = |Σ p O − ⟨O⟩_exact| and shot
    variance Var_p(O) / N_kept, N_kept = shots × (1 − discard); ε = max_O √(b_O² + Var_p(O)/N_kept)
    (mean squared error = bias² + variance). Readout inversion is taken as exact (infinite-shot
    limit of the unfolding; its variance inflation is not included). ε = inf when nothing is kept.
    """
    table = _components(obs)
    kept = probabilities * obs.physical
    n_kept = shots * float(kept.sum())
    if n_kept <= 0:
        return float("inf"), float("inf"), float("inf")
    p = kept / kept.sum()
    mean = table @ p
    var = np.clip(table ** 2 @ p - mean ** 2, 0.0, None)
    exact = table @ (exact_probabilities / exact_probabilities.sum())
    bias = np.abs(mean - exact)
    err = np.sqrt(bias ** 2 + var / n_kept)
    k = int(np.argmax(err))
    return float(err[k]), float(bias.max()), float(np.sqrt(var.max() / n_kept))
