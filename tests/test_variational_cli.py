"""``fluxline fit`` / ``fluxline size`` JSON output (issue contract) and exit status on bad input."""

from __future__ import annotations

import json

import numpy as np

from cli_runner import run_cli
from lgt.basis import PhysicalBasis
from lgt.hamiltonian import build_hamiltonian
from lgt.model import ModelParams

CONFIG = """
[model]
sites = 4
hopping = 1.0
mass = 0.5
coupling = 1.0
levels = 3

[initial]
kind = "vacuum"

[variational]
family = "symmetric"
dt = 0.1
t_final = 1.0
tolerance = 0.001
max_layers = 4
compile = false
compare_families = false
"""



def test_size_json_contract(tmp_path):
    path = tmp_path / "size.toml"
    path.write_text(CONFIG)
    out = run_cli("size", str(path), "--json")
    assert out.returncode == 0, out.stderr
    data = json.loads(out.stdout)
    for key in ("layers", "table", "trotter", "budget"):
        assert key in data
    rows = data["table"]
    assert [r["layers"] for r in rows] == list(range(1, len(rows) + 1))
    for r in rows:
        for key in ("layers", "max_infidelity", "two_qudit_gates", "parameters"):
            assert key in r
    chosen = data["layers"]
    assert chosen is not None
    assert rows[chosen - 1]["max_infidelity"] <= 1e-3
    assert all(r["max_infidelity"] > 1e-3 for r in rows[: chosen - 1])
    # the Trotter baseline meets the same tolerance; second order needs fewer steps than first
    steps = {t["order"]: t["steps"] for t in data["trotter"]}
    assert steps[2] < steps[1]


def test_fit_json_and_exact_reference(tmp_path):
    path = tmp_path / "fit.toml"
    path.write_text(CONFIG.replace("max_layers = 4", "layers = 3"))
    out = run_cli("fit", str(path), "--json", "--circuits", str(tmp_path / "circuits"))
    assert out.returncode == 0, out.stderr
    data = json.loads(out.stdout)
    assert data["layers"] == 3 and len(data["table"]) == 1
    assert min(data["fidelity"]) > 0.999
    assert len(list((tmp_path / "circuits").glob("step_*.json"))) == 11
    # reference: dense scipy.linalg.expm of H applied to the vacuum, against the last exported
    # circuit re-simulated from its JSON file alone
    import scipy.linalg as sla

    from circuits.export import from_dict
    from lgt.variational.workflow import initial_state_from_document

    basis = PhysicalBasis(ModelParams(sites=4, hopping=1.0, mass=0.5, coupling=1.0, levels=3))
    H = build_hamiltonian(basis).toarray()
    psi0 = np.zeros(basis.dimension)
    psi0[basis.index_of_fields(np.zeros(3))[0]] = 1
    exact = basis.to_register(sla.expm(-1j * 1.0 * H) @ psi0)
    doc = json.loads((tmp_path / "circuits" / "step_0010.json").read_text())
    state = from_dict(doc).apply(None, initial_state_from_document(doc["initial_state"], 3, 3))
    assert abs(np.vdot(exact, state)) ** 2 > 0.999


def test_bad_variational_config_exit_status(tmp_path):
    path = tmp_path / "bad.toml"
    path.write_text(CONFIG.replace('family = "symmetric"', 'family = "both"'))
    out = run_cli("size", str(path), "--json")
    assert out.returncode == 2
    assert "variational.family" in out.stderr
