"""Quantum trajectories (Monte-Carlo wave functions) of a :class:`~circuits.noise_program.NoisyProgram`.

A batch of B state vectors (canonical view (B, d, …, d)) runs through the events; each channel is
unravelled exactly (Dalibard, Castin & Mølmer, PRL 68, 580 (1992)):

* dephasing: a random phase exp(i φ_j) on level j, φ ~ N(0, C t) (Gaussian phase noise averages to
  exp(−Γ_ij t) on the coherences);
* decay: a quantum jump |target⟩⟨i| with probability p_i (1 − e^{−t/T₁ᵢ}) (p_i the population of
  level i), else the no-jump operator A₀ and renormalisation; a jump to a leaked level ends the
  trajectory as "lost";
* depolarizing on the touched levels S: with probability p, a uniformly random unitary
  W ⊕ (±1) with W a Weyl (clock-and-shift) operator of S and a random sign on the complement —
  this unitary mixture equals the channel of :mod:`circuits.noise_program`;
* preparation: with probability p a cyclic level shift X^s, s uniform in 1..d−1.

The estimate of the outcome distribution is the mean of |ψ_b|² over trajectories; the number of
trajectories grows in batches until the standard error of every single-qudit level population is
below the requested accuracy (or a cap is hit); both are reported.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from fluxline_threads import single_threaded_blas
from .gates import DiagonalGate
from .noise_program import DecoherenceEvent, DepolarizeEvent, GateEvent, NoisyProgram, PrepareEvent
from .register import apply_local

__all__ = ["TrajectoryResult", "run_batch", "run_states", "simulate_trajectories"]


@dataclass
class TrajectoryResult:
    """Mean outcome distribution over ``n_trajectories`` and its statistical error.

    ``probabilities`` (d^K) sums to 1 − ``lost``; ``standard_error`` is the largest standard error
    of a single-qudit level population; ``target_error`` the requested one.
    """

    probabilities: np.ndarray
    lost: float
    n_trajectories: int
    standard_error: float
    target_error: float
    population_error: np.ndarray  # (K, d) standard error of each level population


def _weyl(levels: np.ndarray, a: int, b: int, d: int) -> np.ndarray:
    """X^a Z^b on the levels ``levels`` of a qudit (zero elsewhere), d × d."""
    m = levels.size
    w = np.zeros((d, d), complex)
    for r in range(m):
        w[levels[(r + a) % m], levels[r]] = np.exp(2j * np.pi * b * r / m)
    return w


def _depolarize(view: np.ndarray, ev: DepolarizeEvent, rng: np.random.Generator, alive: np.ndarray) -> None:
    hit = np.flatnonzero((rng.random(view.shape[0]) < ev.p) & alive)
    if hit.size == 0:
        return
    d = view.shape[1]
    K = view.ndim - 1
    qs = list(ev.qudits)
    mask = np.ones((1,) + (1,) * K, dtype=bool)
    for q, m in zip(qs, ev.masks):
        shape = [1] * (K + 1)
        shape[q + 1] = d
        mask = mask & m.reshape(shape)
    levels = [np.flatnonzero(m) for m in ev.masks]
    for b in hit:
        mats = [_weyl(lv, int(rng.integers(lv.size)), int(rng.integers(lv.size)), d) for lv in levels]
        u = mats[0]
        for extra in mats[1:]:
            u = np.kron(u, extra)
        psi = view[b:b + 1]
        inside = apply_local(psi * mask, u, qs)
        sign = 1.0 if rng.random() < 0.5 else -1.0
        view[b:b + 1] = inside + sign * psi * ~mask


def _decohere(view: np.ndarray, ev: DecoherenceEvent, prog: NoisyProgram, rng: np.random.Generator,
              alive: np.ndarray) -> None:
    """Dephasing and decay of one qudit on the whole batch: one multiplication by a per-row,
    per-level factor (random phase × no-jump amplitude / new norm), jumps applied row by row."""
    d, q, t = prog.d, ev.qudit, ev.duration_us
    B, K = view.shape[0], view.ndim - 1
    bshape = [B] + [1] * K
    bshape[q + 1] = d
    factor = np.ones((B, d), dtype=np.complex128)
    c = prog.covariance * t
    if np.any(c):  # Gaussian level phases with covariance C t
        w, v = np.linalg.eigh(c)
        root = v * np.sqrt(np.clip(w, 0, None))
        factor = np.exp(1j * (rng.standard_normal((B, d)) @ root.T))
    rate = prog.decay_rate
    jumped = np.zeros(0, dtype=np.int64)
    if np.any(rate):
        keep = np.exp(-rate * t)
        pops = (view.real ** 2 + view.imag ** 2).sum(axis=tuple(a for a in range(1, K + 1) if a != q + 1))
        cum = np.cumsum(pops * (1 - keep)[None, :], axis=1)
        u = rng.random(B) * np.maximum(pops.sum(axis=1), 1e-300)
        level = np.where(u[:, None] < cum, np.arange(d)[None, :], d).min(axis=1)  # d = no jump
        level[~alive] = d
        nojump = level == d
        norm = np.sqrt(np.maximum(pops @ keep, 1e-300))
        factor[nojump] *= np.sqrt(keep)[None, :] / norm[nojump, None]
        jumped = np.flatnonzero(~nojump)
    view *= factor.reshape(bshape)
    for b in jumped:
        i = int(level[b])
        tgt = int(prog.decay_target[i])
        if tgt < 0:
            alive[b] = False
            view[b] = 0.0
            continue
        moved = np.moveaxis(view[b], q, 0)
        src = moved[i].copy()
        moved[...] = 0.0
        moved[tgt] = src / np.sqrt(max(pops[b, i], 1e-300))


def _prepare(view: np.ndarray, ev: PrepareEvent, rng: np.random.Generator) -> None:
    d = view.shape[1]
    hit = np.flatnonzero(rng.random(view.shape[0]) < ev.p)
    for b in hit:
        s = int(rng.integers(1, d))
        view[b] = np.roll(view[b], s, axis=ev.qudit)


def run_batch(program: NoisyProgram, psi0: np.ndarray, n: int, rng: np.random.Generator) -> np.ndarray:
    """Final outcome probabilities |ψ_b|² of ``n`` trajectories, shape (n, d^K) (zero rows: lost)."""
    return np.abs(run_states(program, psi0, n, rng)) ** 2


def run_states(program: NoisyProgram, psi0: np.ndarray, n: int, rng: np.random.Generator) -> np.ndarray:
    """Final normalised states of ``n`` trajectories, shape (n, d^K) (zero rows: lost)."""
    K, d = program.n_qudits, program.d
    view = np.repeat(np.asarray(psi0, dtype=np.complex128).reshape((1,) + (d,) * K), n, axis=0)
    alive = np.ones(n, dtype=bool)
    for ev in program.events:
        if isinstance(ev, GateEvent):
            gate = ev.gate
            if isinstance(gate, DiagonalGate):
                view = gate.apply(view, ev.angle)
            else:
                view = np.ascontiguousarray(gate.apply(view, ev.angle))
        elif isinstance(ev, DecoherenceEvent):
            _decohere(view, ev, program, rng, alive)
        elif isinstance(ev, DepolarizeEvent):
            _depolarize(view, ev, rng, alive)
        else:
            _prepare(view, ev, rng)
    return view.reshape(n, -1)


def _marginals(probs: np.ndarray, K: int, d: int) -> np.ndarray:
    """(n, K, d) single-qudit level populations of each trajectory."""
    t = probs.reshape((probs.shape[0],) + (d,) * K)
    return np.stack([t.sum(axis=tuple(a + 1 for a in range(K) if a != q)) for q in range(K)], axis=1)


def simulate_trajectories(program: NoisyProgram, psi0: np.ndarray, accuracy: float = 0.005,
                          seed: int = 0, batch: int = 64, min_trajectories: int = 64,
                          max_trajectories: int = 20000) -> TrajectoryResult:
    """Trajectories in batches until every level population has standard error ≤ ``accuracy``."""
    with single_threaded_blas():
        return _simulate(program, psi0, accuracy, seed, batch, min_trajectories, max_trajectories)


def _simulate(program: NoisyProgram, psi0: np.ndarray, accuracy: float, seed: int, batch: int,
              min_trajectories: int, max_trajectories: int) -> TrajectoryResult:
    rng = np.random.default_rng(seed)
    K, d = program.n_qudits, program.d
    total = np.zeros(d ** K)
    m1 = np.zeros((K, d))
    m2 = np.zeros((K, d))
    n = 0
    while True:
        probs = run_batch(program, psi0, batch, rng)
        total += probs.sum(axis=0)
        marg = _marginals(probs, K, d)
        m1 += marg.sum(axis=0)
        m2 += (marg ** 2).sum(axis=0)
        n += batch
        var = np.clip(m2 / n - (m1 / n) ** 2, 0, None) * n / max(n - 1, 1)
        err = np.sqrt(var / n)
        if n >= min_trajectories and (err.max() <= accuracy or n >= max_trajectories):
            break
    p = total / n
    return TrajectoryResult(p, max(0.0, 1.0 - float(p.sum())), n, float(err.max()), accuracy, err)
