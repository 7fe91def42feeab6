"""Layer-family registry: a family registered from outside the package runs end to end
(config validation, fit, native cost, sizing, circuit export) without editing any module."""

from __future__ import annotations

import json

import numpy as np
import pytest
import scipy.linalg as sla

from circuits.export import from_dict
from circuits.layers import build_layers, generator_layer_builder
from circuits.register import Space
from circuits.terms import LocalTerm
from lgt.basis import PhysicalBasis
from lgt.errors import ConfigError
from lgt.hamiltonian import build_hamiltonian, register_hamiltonian
from lgt.model import ModelParams
from lgt.variational import families
from lgt.variational.families import LayerFamily, ModelAnsatz, family_names, get_family, register_family
from lgt.variational.workflow import (export_circuits, initial_state_from_document, run_fit, run_size,
                                      validate_variational_config)

MODEL = {"sites": 4, "hopping": 1.0, "mass": 0.5, "coupling": 1.0, "levels": 3}


class WholeHamiltonianFamily(LayerFamily):
    """Toy family for the test: each layer is exp(−iθH) of the whole Hamiltonian, so one layer
    at θ = t is the exact propagator (textbook: ψ(t) = e^{−iHt}ψ₀ for time-independent H)."""

    name = "whole-h"
    summary = "exp(-i theta H) per layer (test family)"
    fit_space = "physical"

    def build(self, basis, layers, options, space=None):
        space = space or self.fit_space
        if space == "physical":
            H = build_hamiltonian(basis)
            sp_space, term = Space.subspace(basis.dimension), H
        else:
            p = basis.params
            H = register_hamiltonian(p, physical_only=True, basis=basis)
            sp_space = Space.qudits(p.n_links, p.levels)
            term = LocalTerm(tuple(range(p.n_links)), register_hamiltonian(p).toarray())
        circuit = build_layers(sp_space, layers, generator_layer_builder(sp_space, [term]))
        return ModelAnsatz(self.name, space, circuit, H, basis, layers)

    def native_cost(self, ansatz, costing):
        return costing.of_circuit(ansatz.circuit)  # one generic "generator" block per layer


@pytest.fixture
def toy_family():
    family = register_family(WholeHamiltonianFamily())
    yield family
    families.unregister_family(family.name)


def test_builtin_families_are_discovered():
    assert {"symmetric", "hardware"} <= set(family_names())
    assert get_family("symmetric").fit_space == "physical"
    assert get_family("hardware").fit_space == "register"
    with pytest.raises(ValueError, match="unknown layer family"):
        get_family("nonexistent")


def test_unavailable_family_is_a_named_config_error():
    # two sites have one link: no brickwork bond for the hardware family
    config = {"model": {**MODEL, "sites": 2}, "variational": {"family": "hardware", "t_final": 1.0}}
    with pytest.raises(ConfigError) as err:
        validate_variational_config(config)
    assert err.value.key == "variational.family"


def test_toy_family_fits_exports_and_sizes_end_to_end(toy_family, tmp_path):
    config = {"model": MODEL, "initial": {"kind": "vacuum"},
              "variational": {"family": toy_family.name, "layers": 1, "dt": 0.1, "t_final": 0.5,
                              "tolerance": 1e-6, "compile": False}}
    fit = run_fit(config)
    # reference: exact propagation with scipy.linalg.expm; one layer e^{-iθH} is exact at θ = t
    assert fit.attributes["max_infidelity"] < 1e-9
    assert fit.attributes["meets_tolerance"] is True
    np.testing.assert_allclose(fit.arrays["parameters"][:, 0], np.arange(6) * 0.1, atol=1e-4)
    assert fit.attributes["two_qudit_gates"] == 0  # priced by its own gates: one generic block

    # a whole-Hamiltonian generator has no exact native block: export the generator form
    paths = export_circuits(config, fit.arrays["parameters"], tmp_path, form="generator")
    basis = PhysicalBasis(ModelParams(**MODEL))
    H = build_hamiltonian(basis).toarray()
    doc = json.loads(paths[-1].read_text())
    state = from_dict(doc).apply(None, initial_state_from_document(doc["initial_state"], 3, 3))
    psi0 = basis.from_register(initial_state_from_document(doc["initial_state"], 3, 3))[0]
    exact = basis.to_register(sla.expm(-1j * 0.5 * H) @ psi0)
    assert abs(np.vdot(exact, state)) ** 2 > 1 - 1e-8

    size = run_size({**config, "variational": {**config["variational"], "max_layers": 2, "tolerance": 0.01,
                                               "compare_families": True}})
    families_table = size.tables["families"].rows()
    assert families_table[0]["family"] == toy_family.name and families_table[0]["layers"] == 1
    # every other registered family that can run the model is sized too
    assert {r["family"] for r in families_table} == set(family_names())
    assert size.tables[f"depth_{toy_family.name}"].rows()[0]["meets_tolerance"] is True
