"""Property tests (hypothesis): norm, export round trip, subspace = register mode."""
from __future__ import annotations

import json

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st

from circuits.circuit import ParametrizedCircuit
from circuits.gates import TwoLevelRotation
from circuits.export import CircuitFormatError, from_json, to_json
from circuits.random_circuits import random_circuit, random_sparse_generator, random_state
from circuits.register import Space, embed_local
from circuits.sparse_gates import SparseGeneratorGate

shapes = st.sampled_from([(1, 5), (2, 2), (2, 3), (3, 3), (4, 2), (3, 4)])
seeds = st.integers(0, 2**31 - 1)


@settings(max_examples=30, deadline=None)
@given(shape=shapes, seed=seeds, n_gates=st.integers(1, 20))
def test_norm_preserved(shape, seed, n_gates):
    # textbook identity: unitary evolution preserves the 2-norm
    rng = np.random.default_rng(seed)
    c = random_circuit(rng, *shape, n_gates, 3)
    psi = random_state(rng, c.space.dim)
    out = c.apply(rng.normal(size=3) * 10, psi)
    assert abs(np.linalg.norm(out) - 1.0) < 1e-12


@settings(max_examples=30, deadline=None)
@given(shape=shapes, seed=seeds, n_gates=st.integers(0, 15))
def test_export_roundtrip_same_state(shape, seed, n_gates):
    rng = np.random.default_rng(seed)
    c = random_circuit(rng, *shape, n_gates, 4)
    p = rng.normal(size=4)
    back = from_json(to_json(c, p))
    assert back.n_params == 0 and len(back) == len(c)
    psi = random_state(rng, c.space.dim)
    np.testing.assert_array_equal(back.apply(None, psi), c.apply(p, psi))
    assert json.loads(to_json(back)) == json.loads(to_json(c, p))


@settings(max_examples=25, deadline=None)
@given(shape=shapes, seed=seeds, n_gates=st.integers(1, 12))
def test_subspace_mode_equals_register_mode(shape, seed, n_gates):
    # reference: the kron-embedded generator (embed_local is itself checked against numpy kron)
    rng = np.random.default_rng(seed)
    reg = random_circuit(rng, *shape, n_gates, 3)
    n, d = shape
    sub = ParametrizedCircuit(Space.subspace(d**n), 3)
    for op in reg.ops:
        g = sp.csr_matrix(embed_local(op.gate.generator(), op.gate.qudits, n, d))
        sub.append(SparseGeneratorGate(g), op.index, op.scale, op.offset)
    p, psi, phi = rng.normal(size=3), random_state(rng, d**n), random_state(rng, d**n)
    np.testing.assert_allclose(sub.apply(p, psi), reg.apply(p, psi), atol=1e-11)
    f1, g1 = reg.overlap_and_gradient(p, psi, phi)
    f2, g2 = sub.overlap_and_gradient(p, psi, phi)
    np.testing.assert_allclose([f1, *g1], [f2, *g2], atol=1e-10)


def test_subspace_export_roundtrip():
    rng = np.random.default_rng(0)
    c = ParametrizedCircuit(Space.subspace(30), 1)
    c.append(SparseGeneratorGate(random_sparse_generator(rng, 30, 5, 4, big=6), label="hop"), 0)
    psi = random_state(rng, 30)
    np.testing.assert_array_equal(from_json(to_json(c, [0.7])).apply(None, psi), c.apply([0.7], psi))


@pytest.mark.parametrize(
    "mutate, message",
    [
        (lambda d: d.update(format="other"), "format"),
        (lambda d: d.update(version=99), "version"),
        (lambda d: d["space"].pop("levels"), "levels"),
        (lambda d: d["gates"][0].update(kind="teleport"), "unknown gate kind"),
        (lambda d: d["gates"][0].pop("angle"), "angle"),
        (lambda d: d["gates"][0].update(levels=[2, 1]), "gates[0]"),
        (lambda d: d["gates"][0].update(qudits=[7]), "gates[0]"),
    ],
)
def test_import_rejects_malformed(mutate, message):
    c = ParametrizedCircuit(Space.qudits(2, 3))
    c.append(TwoLevelRotation(0, 0, 1, 3), 0)
    doc = json.loads(to_json(c, [0.1]))
    mutate(doc)
    with pytest.raises(CircuitFormatError, match=message.replace("[", r"\[")):
        from_json(json.dumps(doc))
    with pytest.raises(CircuitFormatError):
        from_json("{not json")
