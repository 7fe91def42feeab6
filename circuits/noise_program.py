"""A circuit with its noise: the ordered list of unitary and noise events both noisy simulators
(:mod:`circuits.density`, :mod:`circuits.trajectories`) run, and the single-qudit Kraus maps of
each channel (for tests and as the definition the simulators implement).

Timing: gates start at their ASAP-schedule times (hardware-profile durations, µs); every qudit
decoheres (dephasing and decay, :class:`DecoherenceEvent`) over each idle gap and over each gate it
takes part in; decoherence during a gate is applied after the gate (common practice, no source), merged with the
qudit's following idle gap into one event (they commute with the gates on other qudits).
After the last gate every qudit decoheres up to the end of the schedule, where it is read out.

Channels (d levels per qudit, time t in µs):

* dephasing: ρ_ij → ρ_ij exp(−Γ_ij t) (Γ from :meth:`NoiseModel.dephasing_rates`);
* decay: Kraus A₀ = Σ_i e^{−t/2T₁ᵢ} |i⟩⟨i|, A_i = (1 − e^{−t/T₁ᵢ})^{1/2} |target_i⟩⟨i|; decays to a
  leaked level drop their Kraus operator (trace loss = leaked population). Exact for decays into
  stable levels; a cascade (target decaying too) is first order in t/T₁ per interval;
* depolarizing on the touched levels S (D_S = |S| states of the gate's qudits, projector P):
  ρ → (1 − p) ρ + p [P⊥ρP⊥ + Tr_Q(PρP) ⊗ P/D_S]; for S = all levels this is the usual
  ρ → (1 − p) ρ + p Tr_Q ρ ⊗ 1/D (Nielsen & Chuang 2000, §8.3.4);
* preparation: with probability p a qudit starts in a uniformly random wrong level (Kraus
  √(1−p) 1 and √(p/(d−1)) X^s, X the cyclic shift).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, Sequence, Union

import numpy as np

from .accounting import schedule
from .circuit import ParametrizedCircuit
from .gates import Gate, MSGate, TwoLevelRotation
from .noise_model import NoiseModel

__all__ = ["GateEvent", "DecoherenceEvent", "DepolarizeEvent", "PrepareEvent", "NoisyProgram",
           "noisy_program", "dephasing_kraus", "decay_kraus", "depolarizing_kraus", "preparation_kraus",
           "touched_levels", "depolarizing_from_fidelity"]


@dataclass(frozen=True)
class GateEvent:
    """A unitary: ``gate`` at angle ``angle`` (over-rotation included)."""

    gate: Gate
    angle: float


@dataclass(frozen=True)
class DecoherenceEvent:
    """Dephasing and decay of one qudit over ``duration_us``."""

    qudit: int
    duration_us: float


@dataclass(frozen=True)
class DepolarizeEvent:
    """Depolarizing with probability ``p`` on the levels ``masks[i]`` of ``qudits[i]``."""

    qudits: tuple[int, ...]
    masks: tuple[np.ndarray, ...]
    p: float


@dataclass(frozen=True)
class PrepareEvent:
    """Preparation error (random wrong level with probability ``p``) on one qudit."""

    qudit: int
    p: float


Event = Union[GateEvent, DecoherenceEvent, DepolarizeEvent, PrepareEvent]


@dataclass
class NoisyProgram:
    """Events of one noisy circuit run, with the register's channel data.

    Attributes
    ----------
    n_qudits, d : register size and levels per qudit
    events : ordered events
    covariance : (d, d) phase-noise covariance rate C (rad²/µs), see :class:`NoiseModel`
    decay_rate, decay_target : per level 1/T₁ (1/µs) and target level (−1 = leaked)
    confusion : (d, d) readout response A[read, true]
    leaked_outcome : how a shot with leaked population reads ("discard" or "random")
    duration_us : end of the schedule
    """

    n_qudits: int
    d: int
    events: list[Event]
    covariance: np.ndarray
    decay_rate: np.ndarray
    decay_target: np.ndarray
    confusion: np.ndarray
    leaked_outcome: str
    duration_us: float

    def dephasing_factors(self, t: float) -> np.ndarray:
        """Λ_ij = exp(−Γ_ij t), the Hadamard factor of dephasing over ``t`` µs."""
        c = self.covariance
        diag = np.diag(c)
        return np.exp(-0.5 * (diag[:, None] + diag[None, :] - 2 * c) * t)


def touched_levels(gate: Gate) -> list[np.ndarray]:
    """Per gate qudit, the boolean mask of the levels the gate addresses."""
    masks = []
    for _ in gate.qudits:
        m = np.zeros(gate.d, dtype=bool)
        if isinstance(gate, (TwoLevelRotation, MSGate)):
            m[[gate.j, gate.k]] = True
        else:
            m[:] = True
        masks.append(m)
    return masks


def depolarizing_from_fidelity(fidelity: float, touched_states: int) -> float:
    """p of the depolarizing channel with process fidelity F on D touched states:
    F = 1 − p (1 − 1/D²) (Nielsen & Chuang 2000, §9.3)."""
    return min(1.0, (1.0 - fidelity) / (1.0 - 1.0 / touched_states ** 2))


def noisy_program(circuit: ParametrizedCircuit, params: Sequence[float] | None, model: NoiseModel,
                  spec: Callable[[Gate], tuple[float, float]] | None = None,
                  key: Callable[[Gate], str] | None = None) -> NoisyProgram:
    """Events of ``circuit`` at ``params`` under ``model``.

    ``spec(gate) -> (duration_us, process_fidelity)`` comes from the hardware profile (``None``:
    zero durations, fidelity 1); ``key(gate)`` is the gate-kind key (default
    :func:`circuits.hardware.hardware_key`).
    """
    from .hardware import hardware_key

    space = circuit.space
    if not space.register:
        raise ValueError("noisy simulation needs a register circuit")
    K, d = space.n_qudits, space.d
    key = key or hardware_key
    spec = spec or (lambda gate: (0.0, 1.0))
    angles = circuit.angles(params)
    rates, targets = model.decay_rates(d)
    events: list[Event] = []
    if model.ideal:
        events = [GateEvent(op.gate, float(t)) for op, t in zip(circuit.ops, angles)]
        return NoisyProgram(K, d, events, np.zeros((d, d)), np.zeros(d), targets, np.eye(d),
                            model.leaked_outcome, 0.0)
    specs = [spec(op.gate) for op in circuit.ops]
    durations = {id(op): s[0] for op, s in zip(circuit.ops, specs)}
    sched = schedule(circuit, lambda op: durations[id(op)])
    if model.preparation_error > 0:
        events += [PrepareEvent(q, model.preparation_error) for q in range(K)]
    # decoherence of a qudit commutes with the gates on other qudits, so each qudit's idle gap and
    # gate durations since its last gate are applied as one event just before its next gate
    pending = np.zeros(K)
    clock = np.zeros(K)
    for i, (op, t) in enumerate(zip(circuit.ops, angles)):
        gate = op.gate
        qs = list(gate.qudits)
        start, finish = float(sched.start[i]), float(sched.finish[i])
        for q in qs:
            wait = pending[q] + max(start - clock[q], 0.0)
            if wait > 0:
                events.append(DecoherenceEvent(q, wait))
            pending[q] = finish - start
            clock[q] = finish
        gn = model.gate_noise(key(gate))
        events.append(GateEvent(gate, float(t) * (1.0 + gn.over_rotation)))
        masks = touched_levels(gate)
        if gn.spectator_phase_rad != 0.0:
            from .gates import DiagonalGate

            for q, m in zip(qs, masks):
                if not m.all():
                    events.append(GateEvent(DiagonalGate([q], np.where(m, 0.0, -gn.spectator_phase_rad), d), 1.0))
        p = gn.depolarizing
        if p is None:
            p = depolarizing_from_fidelity(specs[i][1], int(np.prod([m.sum() for m in masks])))
        if p > 0:
            events.append(DepolarizeEvent(tuple(qs), tuple(masks), float(p)))
    end = float(clock.max(initial=0.0))
    for q in range(K):
        wait = pending[q] + end - clock[q]
        if wait > 0:
            events.append(DecoherenceEvent(q, wait))
    if not (np.any(model.dephasing_covariance(d)) or np.any(rates)):
        events = [e for e in events if not isinstance(e, DecoherenceEvent)]
    return NoisyProgram(K, d, events, model.dephasing_covariance(d), rates, targets, model.confusion(d),
                        model.leaked_outcome, end)


# ---------------------------------------------------------------------- Kraus maps (one qudit)
def dephasing_kraus(factors: np.ndarray) -> list[np.ndarray]:
    """Diagonal Kraus operators of ρ → Λ ∘ ρ (Λ positive semidefinite, unit diagonal)."""
    w, v = np.linalg.eigh(factors)
    return [np.sqrt(max(x, 0.0)) * np.diag(v[:, k]) for k, x in enumerate(w) if x > 1e-15]


def decay_kraus(rates: np.ndarray, targets: np.ndarray, t: float) -> list[np.ndarray]:
    """Kraus operators of decay over ``t`` (leaked targets omitted: trace-decreasing)."""
    d = rates.size
    keep = np.exp(-rates * t)
    ops = [np.diag(np.sqrt(keep)).astype(complex)]
    for i in range(d):
        if rates[i] > 0 and targets[i] >= 0:
            a = np.zeros((d, d), complex)
            a[targets[i], i] = np.sqrt(1 - keep[i])
            ops.append(a)
    return ops


def depolarizing_kraus(masks: Sequence[np.ndarray], p: float) -> list[np.ndarray]:
    """Kraus operators (on the gate qudits, row-major) of the depolarizing channel on touched levels."""
    m = masks[0]
    for extra in masks[1:]:
        m = np.multiply.outer(m, extra)
    m = m.ravel()
    idx = np.flatnonzero(m)
    D = m.size
    ops = [np.sqrt(1 - p) * np.eye(D, dtype=complex), np.sqrt(p) * np.diag((~m).astype(complex))]
    for i in idx:
        for j in idx:
            k = np.zeros((D, D), complex)
            k[i, j] = np.sqrt(p / idx.size)
            ops.append(k)
    return ops


def preparation_kraus(d: int, p: float) -> list[np.ndarray]:
    """√(1−p) 1 and √(p/(d−1)) X^s, s = 1..d−1 (X|j⟩ = |j+1 mod d⟩)."""
    shift = np.roll(np.eye(d), 1, axis=0)
    return [np.sqrt(1 - p) * np.eye(d, dtype=complex)] + [
        np.sqrt(p / (d - 1)) * np.linalg.matrix_power(shift, s).astype(complex) for s in range(1, d)]
