"""Exact density-matrix simulation of a :class:`~circuits.noise_program.NoisyProgram`.

ρ is kept as a tensor of shape (d,)*2K (row axes 0..K−1, column axes K..2K−1); every unitary
and Kraus map is a contraction on the axes of the qudits it touches, never a d^K × d^K
superoperator. Memory: 16 d^{2K} bytes plus about two copies in temporaries, so the limit
:data:`MAX_DENSITY_DIM` = 3125 (d^K: 7 qutrits = 2187, 5 ququints = 3125, 11 qubits = 2048) keeps a
run under about 0.5 GB.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from fluxline_threads import single_threaded_blas
from .gates import DiagonalGate
from .noise_program import DecoherenceEvent, DepolarizeEvent, GateEvent, NoisyProgram, PrepareEvent
from .register import apply_diagonal, apply_local

__all__ = ["MAX_DENSITY_DIM", "DensityResult", "simulate_density"]

#: Largest register dimension d^K simulated with density matrices.
MAX_DENSITY_DIM = 3125


@dataclass
class DensityResult:
    """Final ρ (d^K × d^K, trace 1 − ``lost``) and the population that left the encoded levels."""

    rho: np.ndarray
    lost: float

    def probabilities(self) -> np.ndarray:
        """Probabilities of the register's level strings (row-major), summing to 1 − ``lost``."""
        return np.clip(np.diagonal(self.rho).real, 0.0, None)


def _front(r: np.ndarray, axes: list[int]) -> np.ndarray:
    return np.moveaxis(r, axes, list(range(len(axes))))


def _contract(u: np.ndarray, x: np.ndarray) -> np.ndarray:
    """u applied to the middle axis of x (L, d, R): batched GEMMs (one GEMM when R = 1)."""
    if x.shape[2] == 1:
        return (x[:, :, 0] @ u.T)[:, :, None]
    return np.matmul(u, x)


def _gate(r: np.ndarray, ev: GateEvent, K: int) -> np.ndarray:
    qs = list(ev.gate.qudits)
    cols = [q + K for q in qs]
    view = r[None]
    if isinstance(ev.gate, DiagonalGate):
        phase = np.exp(-1j * ev.angle * ev.gate.h)
        apply_diagonal(view, phase, qs)
        apply_diagonal(view, phase.conj(), cols)
        return r
    u = ev.gate.unitary(ev.angle)
    if len(qs) == 1:  # one qudit: two small contractions on reshaped views, no axis moves
        d, q = u.shape[0], qs[0]
        x = _contract(u, r.reshape(d ** q, d, -1))
        return _contract(u.conj(), x.reshape(d ** (q + K), d, -1)).reshape(r.shape)
    view = apply_local(view, u, qs)
    return apply_local(view, u.conj(), cols)[0]


def _decohere(r: np.ndarray, ev: DecoherenceEvent, prog: NoisyProgram) -> np.ndarray:
    q, K, d, t = ev.qudit, prog.n_qudits, prog.d, ev.duration_us
    axes = [q, q + K]
    f = _front(r, axes)  # view: writes go to r
    keep = np.exp(-prog.decay_rate * t)
    jumps = [(i, int(prog.decay_target[i])) for i in range(d) if prog.decay_rate[i] > 0 and prog.decay_target[i] >= 0]
    gained = [(tgt, (1 - keep[i]) * f[i, i].copy()) for i, tgt in jumps]
    amp = np.sqrt(keep)
    factor = prog.dephasing_factors(t) * np.outer(amp, amp)
    f *= factor.reshape((d, d) + (1,) * (f.ndim - 2))
    for tgt, block in gained:
        f[tgt, tgt] += block
    return r


def _depolarize(r: np.ndarray, ev: DepolarizeEvent, K: int) -> np.ndarray:
    qs = list(ev.qudits)
    k, d = len(qs), r.shape[0]
    m = ev.masks[0]
    for extra in ev.masks[1:]:
        m = np.multiply.outer(m, extra)
    m = m.astype(float)
    f = _front(r, qs + [q + K for q in qs])  # view: in-place updates reach r
    letters = "abcdefg"[:k]
    reduced = np.einsum(f"{letters}{letters}...,{letters}->...", f, m)
    off = (1.0 - m).ravel()
    factor = ((1 - ev.p) + ev.p * np.outer(off, off)).reshape((d,) * (2 * k) + (1,) * (f.ndim - 2 * k))
    f *= factor
    idx = np.flatnonzero(m)
    share = (ev.p / idx.size) * reduced
    for a in idx:  # the touched states of the gate's qudits (at most d^k)
        multi = np.unravel_index(a, (d,) * k)
        f[tuple(multi) + tuple(multi)] += share
    return r


def _prepare(r: np.ndarray, ev: PrepareEvent, K: int, d: int) -> np.ndarray:
    axes = (ev.qudit, ev.qudit + K)
    out = (1 - ev.p) * r
    for s in range(1, d):
        out += (ev.p / (d - 1)) * np.roll(r, (s, s), axis=axes)
    return out


def simulate_density(program: NoisyProgram, psi0: np.ndarray) -> DensityResult:
    """Run ``program`` from the pure state ``psi0`` (length d^K)."""
    K, d = program.n_qudits, program.d
    dim = d ** K
    if dim > MAX_DENSITY_DIM:
        raise ValueError(f"density matrix of {d}^{K} = {dim} states exceeds MAX_DENSITY_DIM = {MAX_DENSITY_DIM}; "
                         "use trajectories")
    with single_threaded_blas():  # many small products: threads only add overhead
        return _run(program, psi0)


def _run(program: NoisyProgram, psi0: np.ndarray) -> DensityResult:
    K, d = program.n_qudits, program.d
    dim = d ** K
    psi0 = np.asarray(psi0, dtype=np.complex128)
    r = np.outer(psi0, psi0.conj()).reshape((d,) * (2 * K))
    for ev in program.events:
        if isinstance(ev, GateEvent):
            r = _gate(r, ev, K)
        elif isinstance(ev, DecoherenceEvent):
            r = _decohere(r, ev, program)
        elif isinstance(ev, DepolarizeEvent):
            r = _depolarize(r, ev, K)
        else:
            r = _prepare(r, ev, K, d)
    rho = r.reshape(dim, dim)
    return DensityResult(rho, max(0.0, 1.0 - float(np.trace(rho).real)))
