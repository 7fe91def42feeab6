"""Gate counts, ASAP depth and hardware budgets."""
from __future__ import annotations

import math

import numpy as np
import pytest

from circuits.accounting import counts_per_layer, depth, gate_counts, schedule
from circuits.circuit import ParametrizedCircuit
from circuits.gates import DiagonalGate, GeneratorGate, MSGate, TwoLevelRotation
from circuits.hardware import HardwareProfile, load_profile
from circuits.layers import native_brickwork
from circuits.random_circuits import random_hermitian
from circuits.register import Space


def known_circuit() -> ParametrizedCircuit:
    """Hand-scheduled: slot 1 R(0) R(2) R(3); slot 2 MS(0,1) MS(2,3); slot 3 G(1,2); slot 4 phase(1)."""
    c = ParametrizedCircuit(Space.qudits(4, 3))
    for q in (0, 2, 3):
        c.append(TwoLevelRotation(q, 0, 1, 3), 0)
    c.append(MSGate((0, 1), 0, 1, 3), 1)
    c.append(MSGate((2, 3), 1, 2, 3), 1)
    c.append(GeneratorGate((1, 2), random_hermitian(np.random.default_rng(0), 9), 3), 2)
    c.append(DiagonalGate((1,), [0.0, 1.0, 2.0], 3), 3)
    return c


def test_counts_and_depth_of_known_circuit():
    c = known_circuit()
    assert gate_counts(c) == {"single": 4, "two": 2, "generator": 1, "generator[2]": 1, "total": 7}
    assert depth(c) == 4
    np.testing.assert_array_equal(schedule(c).start, [0, 0, 0, 1, 1, 2, 3])


def test_brickwork_depth_and_per_layer():
    # two layers on 4 qudits: per layer rotations (4 sequential on each qudit) + 2 bond slots
    c = native_brickwork(4, 3, 2)
    assert depth(c) == 2 * (4 + 2)
    per = counts_per_layer(c)
    assert set(per) == {0, 1} and per[0] == {"single": 16, "two": 3, "total": 19}


def test_hardware_budget_product_and_duration(tmp_path):
    toml = tmp_path / "hw.toml"
    toml.write_text(
        "[hardware]\nname='test'\n"
        "[hardware.gates.rotation]\nduration_us=10\nfidelity=0.99\n"
        "[hardware.gates.ms]\nduration_us=100\nfidelity=0.9\n"
        "[hardware.gates.phase]\nduration_us=0\nfidelity=1.0\n"
        "[hardware.gates.generator]\nduration_us=1000\nfidelity=0.5\n"
    )
    hw = load_profile(toml)
    c = known_circuit()
    # hand computation: 3 rotations, 2 MS, 1 generator, 1 phase
    assert hw.predicted_fidelity(c) == pytest.approx(0.99**3 * 0.9**2 * 0.5 * 1.0, rel=1e-14)
    assert hw.duration_us(c) == pytest.approx(10 + 100 + 1000 + 0)


def test_default_profile_complete_and_sourced():
    hw = load_profile()
    for key in ("rotation", "phase", "ms", "light_shift", "generator"):  # format 2 names the light-shift gate
        assert key in hw.gates and hw.gates[key].source
    assert 0 < hw.predicted_fidelity(native_brickwork(3, 3, 1)) < 1
    assert math.isfinite(hw.duration_us(known_circuit()))


def test_bad_profile_rejected():
    with pytest.raises(ValueError):
        HardwareProfile.from_dict({"hardware": {"gates": {"ms": {"duration_us": 1, "fidelity": 1.5}}}})
    with pytest.raises(ValueError):
        HardwareProfile.from_dict({"hardware": {"gates": {"ms": {"fidelity": 0.9}}}})
    with pytest.raises(KeyError):
        HardwareProfile("empty", {}).spec(TwoLevelRotation(0, 0, 1, 2))
