"""Noisy and post-selected circuit fidelities for depth sizing under the register noise model."""

from __future__ import annotations

import numpy as np

from circuits.blas_threads import single_threaded_blas
from circuits.circuit import ParametrizedCircuit
from circuits.density import MAX_DENSITY_DIM, simulate_density
from circuits.noise_program import noisy_program
from circuits.trajectories import run_states
from lgt.lab.noise import LabNoise

__all__ = ["noisy_fidelities"]


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
    program = noisy_program(circuit, params, profile_noise.model, profile_noise.spec())
    phi = circuit.apply(params, psi0) if target is None else np.asarray(target, dtype=np.complex128)
    mask = np.asarray(physical_mask, dtype=bool)
    phi_p = phi * mask
    if phi.size <= MAX_DENSITY_DIM:
        rho = simulate_density(program, psi0).rho
        fid = float(np.vdot(phi, rho @ phi).real)
        kept = float(np.diagonal(rho).real[mask].sum())
        ps = float(np.vdot(phi_p, rho @ phi_p).real)
    else:
        with single_threaded_blas():
            states = run_states(program, psi0, trajectories, np.random.default_rng(seed))
        fid = float(np.mean(np.abs(states @ phi.conj()) ** 2))
        kept = float(np.mean((np.abs(states) ** 2)[:, mask].sum(axis=1)))
        ps = float(np.mean(np.abs(states @ phi_p.conj()) ** 2))
    return fid, (ps / kept if kept > 0 else 0.0), 1.0 - kept
