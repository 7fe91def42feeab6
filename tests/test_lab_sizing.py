"""noisy_fidelities: noisy and post-selected fidelity with the discard rate."""

from __future__ import annotations

import numpy as np
import pytest

from circuits.circuit import ParametrizedCircuit
from circuits.gates import TwoLevelRotation
from circuits.hardware import load_profile
from circuits.noise_model import GateNoise, NoiseModel
from circuits.register import Space
from lgt.lab.noise import LabNoise
from lgt.lab.sizing import noisy_fidelities


def _one_rotation():
    c = ParametrizedCircuit(Space.qudits(1, 3))
    c.append(TwoLevelRotation(0, 0, 1, 3), offset=np.pi / 2)
    return c


@pytest.mark.parametrize("dm_limit", [None, 1])
def test_depolarized_rotation_matches_the_qubit_formula(monkeypatch, dm_limit):
    """R^{01}(π/2)|0⟩ then depolarizing p on levels {0, 1}: F = 1 − p/2 (qubit depolarizing channel,
    Nielsen & Chuang 2000, §8.3.4); with levels {0, 2} physical, Tr(Pρ) = 1/2 and F_ps = 1/2.
    Both simulators (trajectories: within 4 standard errors)."""
    if dm_limit is not None:
        monkeypatch.setattr("lgt.lab.sizing.MAX_DENSITY_DIM", dm_limit)
    p = 0.3
    noise = LabNoise(load_profile(), NoiseModel(gates={"rotation": GateNoise(depolarizing=p)}), "test")
    psi0 = np.array([1, 0, 0], complex)
    n = 4000
    f, fps, discard = noisy_fidelities(_one_rotation(), noise, psi0, np.array([True, False, True]), trajectories=n)
    tol = 1e-12 if dm_limit is None else 4 * 0.5 / np.sqrt(n)
    assert f == pytest.approx(1 - p / 2, abs=tol)
    assert discard == pytest.approx(0.5, abs=1e-12)
    assert fps == pytest.approx(0.5, abs=tol)


def test_noiseless_model_gives_unit_fidelity():
    noise = LabNoise(load_profile(), NoiseModel.noiseless(), "test")
    f, fps, discard = noisy_fidelities(_one_rotation(), noise, np.array([1, 0, 0], complex), np.ones(3, bool))
    assert (f, fps, discard) == pytest.approx((1.0, 1.0, 0.0))
