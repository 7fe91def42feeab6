"""Export to cirq and back: cirq's own simulator reproduces the engine's states (cirq as reference)."""

from __future__ import annotations

import numpy as np
import pytest

cirq = pytest.importorskip("cirq")

from circuits.cirq_bridge import from_cirq, to_cirq  # noqa: E402
from circuits.register import product_state  # noqa: E402
from test_noise_model import _random_circuit  # noqa: E402


@pytest.mark.parametrize("K,d", [(3, 3), (2, 5)])
def test_cirq_simulator_reproduces_the_state(K, d):
    """cirq.final_state_vector of the exported circuit on cirq.LineQid(i, dimension=d) equals the
    engine's state; the circuit imported back has the same unitary."""
    circuit = _random_circuit(K, d, 7)
    exported = to_cirq(circuit)
    qids = cirq.LineQid.range(K, dimension=d)
    assert set(exported.all_qubits()) == set(qids)
    levels = [(q + 2) % d for q in range(K)]
    psi0 = product_state(levels, d)
    ref = cirq.final_state_vector(exported, initial_state=psi0.astype(np.complex64), qubit_order=qids,
                                  dtype=np.complex128)
    assert np.allclose(ref, circuit.apply(None, psi0), atol=1e-6)
    back = from_cirq(exported)
    assert len(back.ops) == len(circuit.ops)
    assert np.allclose(back.unitary(None), circuit.unitary(None), atol=1e-8)
