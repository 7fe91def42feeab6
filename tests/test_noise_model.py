"""Noise model of the qudit register: parsing, channels (CPTP, textbook limits), the density-matrix
simulator against qutip, and trajectories against the density matrix."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import qutip
from hypothesis import given, settings
from hypothesis import strategies as st

from circuits.circuit import ParametrizedCircuit
from circuits.density import simulate_density
from circuits.gates import DiagonalGate, GeneratorGate, MSGate, TwoLevelRotation
from circuits.hardware import load_profile
from circuits.noise_model import LevelNoise, NoiseModel, NoiseModelError
from circuits.noise_program import (DecoherenceEvent, DepolarizeEvent, GateEvent, NoisyProgram, PrepareEvent,
                                    decay_kraus, dephasing_kraus, depolarizing_kraus, noisy_program,
                                    preparation_kraus)
from circuits.register import Space, product_state
from circuits.trajectories import _marginals, simulate_trajectories


def _completeness(ops):
    return sum(k.conj().T @ k for k in ops)


def _program(d, K, events, model):
    rates, targets = model.decay_rates(d)
    return NoisyProgram(K, d, events, model.dephasing_covariance(d), rates, targets, model.confusion(d),
                        model.leaked_outcome, 0.0)


# ---------------------------------------------------------------------- CPTP (Kraus completeness)
@settings(max_examples=30, deadline=None)
@given(st.integers(2, 5), st.floats(0.0, 1.0), st.floats(0.0, 50.0), st.integers(0, 10_000))
def test_channels_are_cptp(d, p, t, seed):
    """Σ K†K = 1 for every channel (Nielsen & Chuang 2000, §8.2.3: trace preservation)."""
    rng = np.random.default_rng(seed)
    model = NoiseModel(levels=tuple(LevelNoise(rng.normal(), rng.uniform(0, 0.1), rng.uniform(1, 100),
                                               int((i + 1 + rng.integers(d - 1)) % d)) for i in range(d)),
                       field_noise_G=0.01, field_correlation_us=1.0)
    prog = _program(d, 1, [], model)
    rates, targets = model.decay_rates(d)
    masks = [rng.random(d) < 0.6 for _ in range(2)]
    masks = [m if m.any() else np.ones(d, bool) for m in masks]
    for ops in (dephasing_kraus(prog.dephasing_factors(t)), decay_kraus(rates, targets, t),
                depolarizing_kraus(masks, p), preparation_kraus(d, p)):
        assert np.allclose(_completeness(ops), np.eye(ops[0].shape[0]), atol=1e-10)


def test_leaking_decay_loses_exactly_the_decayed_weight():
    """Decay out of the encoded levels: Σ K†K = diag(1, e^{−t/T₁}) (trace lost = leaked population)."""
    rates, targets = np.array([0.0, 0.1]), np.array([-1, -1])
    assert np.allclose(_completeness(decay_kraus(rates, targets, 3.0)), np.diag([1.0, np.exp(-0.3)]))


# ---------------------------------------------------------------------- textbook limits
def test_pure_dephasing_decays_coherence_exponentially():
    """Phase damping: ρ_01(t) = ρ_01(0) e^{−Γt} (Nielsen & Chuang 2000, §8.3.6), with
    Γ_01 = γ_0 + γ_1 + (2π σ_B Δs)² τ_c (motional narrowing, Kubo 1954)."""
    d = 3
    model = NoiseModel(levels=(LevelNoise(1.0, 0.001), LevelNoise(-0.5, 0.002), LevelNoise(0.3)),
                       field_noise_G=1e-3, field_correlation_us=100.0)
    gamma01 = 0.003 + (2 * np.pi * 1e-3 * 1.5) ** 2 * 100.0
    assert np.isclose(model.dephasing_rates(d)[0, 1], gamma01)
    psi = np.ones(d, complex) / np.sqrt(d)
    for t in (0.0, 10.0, 200.0):
        res = simulate_density(_program(d, 1, [DecoherenceEvent(0, t)], model), psi)
        assert np.isclose(res.rho[0, 1], np.exp(-gamma01 * t) / d)
        assert np.allclose(np.diag(res.rho).real, 1 / d)


def test_amplitude_damping_populations_decay_exponentially():
    """Amplitude damping: excited population e^{−t/T₁}, ground 1 − e^{−t/T₁}
    (Nielsen & Chuang 2000, §8.3.5); a leaked decay instead loses that population."""
    model = NoiseModel(levels=(LevelNoise(), LevelNoise(t1_us=50.0, decays_to=0), LevelNoise(t1_us=20.0)))
    for t in (5.0, 40.0):
        res = simulate_density(_program(3, 1, [DecoherenceEvent(0, t)], model), np.array([0, 1, 0], complex))
        assert np.isclose(res.rho[1, 1].real, np.exp(-t / 50.0))
        assert np.isclose(res.rho[0, 0].real, 1 - np.exp(-t / 50.0))
        leak = simulate_density(_program(3, 1, [DecoherenceEvent(0, t)], model), np.array([0, 0, 1], complex))
        assert np.isclose(leak.lost, 1 - np.exp(-t / 20.0))


def test_full_depolarizing_gives_maximally_mixed_state():
    """p = 1 on all levels: ρ → Tr_Q ρ ⊗ 1/D (Nielsen & Chuang 2000, §8.3.4)."""
    d, K = 3, 2
    psi = product_state([1, 2], d)
    ev = DepolarizeEvent((1,), (np.ones(d, bool),), 1.0)
    res = simulate_density(_program(d, K, [ev], NoiseModel()), psi)
    expect = np.kron(np.diag([0, 1, 0]), np.eye(3) / 3)
    assert np.allclose(res.rho, expect)


# ---------------------------------------------------------------------- against qutip
def _random_circuit(K, d, seed):
    rng = np.random.default_rng(seed)
    c = ParametrizedCircuit(Space.qudits(K, d))
    for q in range(K):
        c.append(TwoLevelRotation(q, 0, 1, d, rng.uniform(0, 3)), offset=rng.uniform(0.5, 2))
        c.append(TwoLevelRotation(q, 1, d - 1, d, rng.uniform(0, 3)), offset=rng.uniform(0.5, 2))
    c.append(MSGate([K - 1, 0], 0, 1, d, 0.4), offset=0.6)
    c.append(DiagonalGate([0, 1], rng.normal(size=(d, d)), d), offset=0.7)
    g = rng.normal(size=(d * d, d * d)) + 1j * rng.normal(size=(d * d, d * d))
    c.append(GeneratorGate([1, 0], g + g.conj().T, d), offset=0.2)
    for q in range(K):
        c.append(TwoLevelRotation(q, 0, d - 1, d, rng.uniform(0, 3)), offset=rng.uniform(0.5, 2))
    return c


def _strong_model(d):
    base = NoiseModel.default()
    levels = tuple(dataclasses.replace(lv, t1_us=lv.t1_us / 2000, dephasing_per_us=1e-4 * i)
                   for i, lv in enumerate(base.levels))
    return dataclasses.replace(base, levels=levels, field_noise_G=2e-3, preparation_error=0.05)


def _spec(profile):
    """Durations and fidelities of the default profile; a general two-qudit diagonal, which it
    has no entry for, takes the light-shift phase gate's numbers."""
    def spec(gate):
        key = gate.hardware_key if profile.has(gate.hardware_key) else "light_shift"
        entry = profile.spec_for(key)
        return entry.duration_us, entry.fidelity
    return spec


def _qutip_run(prog, psi0):
    """The program's events applied with qutip: unitaries and Kraus maps embedded by
    qutip.expand_operator, decoherence by qutip.mesolve with Lindblad collapse operators."""
    K, d = prog.n_qudits, prog.d
    dims = [d] * K
    rho = qutip.ket2dm(qutip.Qobj(psi0, dims=[dims, [1] * K]))

    def embed(mat, qudits):
        k = len(qudits)
        return qutip.expand_operator(qutip.Qobj(mat, dims=[[d] * k, [d] * k]), dims=dims, targets=list(qudits))

    c = prog.covariance
    w, v = np.linalg.eigh(c)
    single = [np.diag(np.sqrt(max(x, 0)) * v[:, k]) for k, x in enumerate(w) if x > 1e-14]
    for i in range(d):
        if prog.decay_rate[i] > 0:
            a = np.zeros((d, d))
            if prog.decay_target[i] >= 0:
                a[prog.decay_target[i], i] = np.sqrt(prog.decay_rate[i])
                single.append(a)
    leak = np.diag([prog.decay_rate[i] if prog.decay_target[i] < 0 else 0.0 for i in range(d)])
    for ev in prog.events:
        if isinstance(ev, GateEvent):
            u = embed(ev.gate.unitary(ev.angle), ev.gate.qudits)
            rho = u * rho * u.dag()
        elif isinstance(ev, DecoherenceEvent):
            # dissipator with L = √(eigenvalue) diag(v) reproduces the phase covariance C; leaked decay
            # as the trace-decreasing term −½ (Γρ + ρΓ) with Γ = Σ γ_i |i⟩⟨i| over leaking levels
            c_ops = [embed(m, [ev.qudit]) for m in single]
            gamma = embed(leak, [ev.qudit])
            lv = qutip.liouvillian(embed(np.zeros((d, d)), [ev.qudit]), c_ops) - 0.5 * (qutip.spre(gamma) + qutip.spost(gamma))
            res = qutip.mesolve(lv, rho, [0.0, ev.duration_us], options={"atol": 1e-12, "rtol": 1e-10, "nsteps": 200000,
                                                                               "normalize_output": False})
            rho = res.states[-1]
        elif isinstance(ev, DepolarizeEvent):
            ops = [embed(k, ev.qudits) for k in depolarizing_kraus(ev.masks, ev.p)]
            rho = sum(k * rho * k.dag() for k in ops)
        elif isinstance(ev, PrepareEvent):
            ops = [embed(k, [ev.qudit]) for k in preparation_kraus(d, ev.p)]
            rho = sum(k * rho * k.dag() for k in ops)
    return rho.full()


@pytest.mark.parametrize("K,d", [(2, 3), (3, 3), (2, 5)])
def test_density_matrix_equals_qutip(K, d):
    """The vectorised density-matrix run equals the same events run with qutip (mesolve for
    dephasing and decay, explicit Kraus maps for depolarizing and preparation); qutip as reference."""
    prog = noisy_program(_random_circuit(K, d, K * d), None, _strong_model(d), _spec(load_profile()))
    kinds = {type(e) for e in prog.events}
    assert kinds == {GateEvent, DecoherenceEvent, DepolarizeEvent, PrepareEvent}
    psi0 = product_state([(q + 1) % d for q in range(K)], d)
    ours = simulate_density(prog, psi0)
    ref = _qutip_run(prog, psi0)
    assert np.allclose(ours.rho, ref, atol=1e-7)
    assert np.isclose(ours.lost, 1 - np.trace(ref).real, atol=1e-7)


def test_noiseless_model_reproduces_the_circuit_state():
    """No noise: ρ = |ψ⟩⟨ψ| of the engine's own state-vector run."""
    c = _random_circuit(3, 3, 1)
    psi0 = product_state([0, 1, 2], 3)
    res = simulate_density(noisy_program(c, None, NoiseModel.noiseless()), psi0)
    psi = c.apply(None, psi0)
    assert np.allclose(res.rho, np.outer(psi, psi.conj()), atol=1e-12)


# ---------------------------------------------------------------------- trajectories
@pytest.mark.parametrize("K,d,seed", [(3, 3, 11), (2, 5, 12)])
def test_trajectories_converge_to_density_matrix(K, d, seed):
    """Monte-Carlo wave functions (Dalibard, Castin & Mølmer 1992) average to the density matrix:
    every level population within 3 reported standard errors (seeds fixed)."""
    prog = noisy_program(_random_circuit(K, d, seed), None, _strong_model(d), _spec(load_profile()))
    psi0 = product_state([d - 1] * K, d)
    exact = simulate_density(prog, psi0)
    traj = simulate_trajectories(prog, psi0, accuracy=0.01, seed=seed)
    assert traj.standard_error <= 0.01 and traj.n_trajectories >= 64
    pe = _marginals(exact.probabilities()[None], K, d)[0]
    pt = _marginals(traj.probabilities[None], K, d)[0]
    assert np.all(np.abs(pe - pt) <= 3 * traj.population_error + 1e-12)
    if d == 5:  # level 4 leaks in the default model
        assert exact.lost > 0.01
        assert abs(traj.lost - exact.lost) < 4 * np.sqrt(exact.lost / traj.n_trajectories)


# ---------------------------------------------------------------------- parsing
def test_default_model_parses_and_is_marked_illustrative():
    m = NoiseModel.default()
    assert "recalled from memory" in m.source and "replace" in m.source
    assert len(m.levels) == 5 and m.levels[4].decays_to is None
    # sensitivity differences give pair rates that differ by far more than one rate per qudit allows
    g = m.dephasing_rates(3)
    assert g[0, 1] / g[0, 2] > 10


@pytest.mark.parametrize("table,key", [
    ({"format": 2}, "noise.format"),
    ({"format": 1, "colour": 1}, "noise.colour"),
    ({"format": 1, "level": [{"t1_us": -1.0}]}, "noise.level[0].t1_us"),
    ({"format": 1, "level": [{"t1_us": 5.0, "decays_to": 0}]}, "noise.level[0].decays_to"),
    ({"format": 1, "level": [{}, {"t1_us": 5.0}]}, "noise.level[1].decays_to"),
    ({"format": 1, "level": [{"sensitivity_MHz_per_G": "big"}]}, "noise.level[0].sensitivity_MHz_per_G"),
    ({"format": 1, "gates": {"rotaton": {}}}, "noise.gates.rotaton"),
    ({"format": 1, "gates": {"ms": {"depolarizing": 1.5}}}, "noise.gates.ms.depolarizing"),
    ({"format": 1, "readout": {"confusion": [[0.9, 0.2], [0.0, 1.0]]}}, "noise.readout.confusion"),
    ({"format": 1, "preparation": {"error": -0.1}}, "noise.preparation.error"),
    ({"format": 1, "leaked_outcome": "keep"}, "noise.leaked_outcome"),
])
def test_bad_tables_name_the_key(table, key):
    with pytest.raises(NoiseModelError) as info:
        NoiseModel.from_table(table)
    assert info.value.key == key


def test_confusion_matrix_orientation():
    """Rows of the TOML matrix are true levels; A[read, true] has unit column sums."""
    m = NoiseModel.from_table({"format": 1, "readout": {"confusion": [[0.9, 0.1, 0], [0, 1, 0], [0, 0.2, 0.8]]}})
    a = m.confusion(3)
    assert np.allclose(a.sum(axis=0), 1) and a[1, 0] == 0.1
    with pytest.raises(NoiseModelError):
        m.confusion(5)
