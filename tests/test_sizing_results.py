"""Sizing and fit results as tables, ``meets_tolerance``, and the sizing decisions: abort
thresholds, compiled term costs, shot counts, the observables criterion, fast vs plain fits."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
import scipy.linalg as sla

from circuits.hardware import GateFigures, HardwareProfile, load_profile
from lgt.basis import PhysicalBasis
from lgt.hamiltonian import build_hamiltonian
from lgt.io import read_run_file, write_run_file
from lgt.model import ModelParams
from lgt.states import basis_state
from lgt.variational.budget import Costing
from lgt.variational.native_cost import model_term_costs, uncompiled_hoppings
from lgt.variational.settings import resolve_variational
from lgt.variational.shots import shots_needed
from lgt.variational.sizing import abort_thresholds, depth_ansatz, depth_cost, evaluate_depth, size_depth, trotter_rows
from lgt.variational.workflow import run_fit, run_size, size_summary_dict

MODEL = {"sites": 4, "hopping": 1.0, "mass": 0.5, "coupling": 1.0, "levels": 3}
VAR = {"dt": 0.1, "t_final": 0.5, "tolerance": 1e-3, "compile": False}


@pytest.fixture(scope="module")
def basis() -> PhysicalBasis:
    return PhysicalBasis(ModelParams(**MODEL))


@pytest.fixture(scope="module")
def sized():
    config = {"model": MODEL, "initial": {"kind": "vacuum"},
              "variational": {**VAR, "max_layers": 3, "compare_families": True}}
    return run_size(config)


def settings_of(**section):
    return resolve_variational({"variational": {**VAR, **section}}, MODEL["levels"])


def test_size_tables_round_trip_through_hdf5(sized, tmp_path):
    # reference: h5py (HDF5) stores the columns exactly; the JSON summary read from the file is the same
    path = write_run_file(tmp_path / "size.h5", sized)
    back = read_run_file(path)
    assert set(back.tables) == set(sized.tables)
    for name, table in sized.tables.items():
        copy = back.tables[name]
        assert list(copy.columns) == list(table.columns)
        assert copy.units == table.units and copy.description == table.description
        for col, values in table.columns.items():
            np.testing.assert_array_equal(copy.columns[col], values)
    assert size_summary_dict(back) == size_summary_dict(sized)
    assert not any(isinstance(v, str) and v.startswith(("[", "{")) for v in back.attributes.values())


def test_size_summary_rows_and_units(sized):
    summary = size_summary_dict(sized)
    depth = sized.tables["depth_symmetric"]
    assert depth.units["duration_us"] == "us" and depth.units["fit_seconds"] == "s"
    assert [r["layers"] for r in summary["table"]] == depth.columns["layers"].tolist()
    assert set(summary["families"]) == {"symmetric", "hardware"}
    assert summary["meets_tolerance"] is (summary["layers"] is not None)
    traj = sized.tables["trajectories_symmetric"].columns
    assert set(np.unique(traj["layers"])) == set(depth.columns["layers"].tolist())


def test_meets_tolerance_true_and_false():
    # reference: dense scipy.linalg.expm of H on the vacuum; D = 3 symmetric layers follow it to
    # 1 - F < 1e-3 up to t = 0.5 (so <L_n> within 2 sqrt(1 - F) max|L| of it), one layer does not
    config = {"model": MODEL, "initial": {"kind": "vacuum"}, "variational": {**VAR, "layers": 3}}
    good = run_fit(config)
    basis = PhysicalBasis(ModelParams(**MODEL))
    exact = sla.expm(-0.5j * build_hamiltonian(basis).toarray()) @ basis_state(basis, np.zeros(3))
    fields = np.abs(exact) ** 2 @ basis.fields()
    np.testing.assert_allclose(good.reference["electric_field"].values[-1], fields, atol=1e-8)
    assert np.abs(good.series["electric_field"].values[-1] - fields).max() < 2 * np.sqrt(1e-3)
    assert good.attributes["meets_tolerance"] is True and good.attributes["tolerance"] == 1e-3
    bad = run_fit({**config, "variational": {**VAR, "layers": 1}})
    assert bad.attributes["max_infidelity"] > 1e-3
    assert bad.attributes["meets_tolerance"] is False
    none = run_size({**config, "variational": {**VAR, "max_layers": 1, "compare_families": False}})
    assert none.attributes["meets_tolerance"] is False and size_summary_dict(none)["layers"] is None


def test_abort_thresholds_follow_the_budget_bound(basis):
    # derivation in abort_thresholds' docstring, checked with independent arithmetic: every gate
    # of fidelity f, so F_noise(D) = f^(gates per layer * D)
    f = 0.99
    profile = HardwareProfile("uniform", {k: GateFigures(1.0, f) for k in ("rotation", "phase", "ms", "phase2", "generator")})
    settings = settings_of(family="hardware", max_layers=4, tolerance=0.01)
    costing = Costing(profile, {})
    per_layer = len(depth_ansatz(basis, settings, 1).circuit.ops)
    got = abort_thresholds(basis, settings, costing)
    for D in range(1, 5):
        expected = max(0.01, 1 - 0.99 * f ** (per_layer * (4 - D)))
        assert got[D] == pytest.approx(expected, rel=1e-12)
    assert got[4] == pytest.approx(0.01)  # the deepest depth stops only at the tolerance itself
    assert set(abort_thresholds(basis, replace(settings, criterion="observables"), costing).values()) == {None}


def test_a_depth_stops_once_past_its_threshold(basis):
    # one symmetric layer cannot follow the quench: its fit stops at the first step past 0.05
    settings = settings_of(max_layers=1)
    profile = load_profile(None)
    costing = Costing(profile, lambda: model_term_costs(basis.params, settings.native_spec(), profile, compile=False))
    row, traj, _ = evaluate_depth(basis, basis_state(basis, np.zeros(3)), settings, 1, costing, abort=0.05)
    assert row.reached_time < settings.t_final
    assert 1 - traj.fidelity[-1] > 0.05 >= (1 - traj.fidelity[:-1]).max()


def test_compiled_term_costs_replace_generic_blocks(basis, tmp_path, monkeypatch):
    # compile = true prices each hopping exponential by its exact native block (shipped for d = 3;
    # counts in docs/circuits.md with the default light-shift profile: 2, 16 and 2 two-qudit gates
    # for the left, interior and right blocks; interior mass terms are linear in the fields and
    # need none), compile = false as one generic block per hopping term
    monkeypatch.setenv("FLUXLINE_CACHE_DIR", str(tmp_path))
    settings = settings_of(compile=True)
    if uncompiled_hoppings(basis.params, settings.native_spec(), settings.compile_fidelity):
        pytest.skip("hopping blocks not shipped for this model: compiling them is slow")
    profile = load_profile(None)
    compiled = Costing(profile, lambda: model_term_costs(basis.params, settings.native_spec(), profile, compile=True))
    generic = Costing(profile, lambda: model_term_costs(basis.params, settings.native_spec(), profile, compile=False),
                      exported=False)
    ansatz = depth_ansatz(basis, settings, 2)
    c, g = depth_cost(ansatz, compiled), depth_cost(ansatz, generic)
    assert c.other == 0 and g.other == 2 * 3  # three hopping terms per layer
    assert c.two_qudit == 2 * (2 + 16 + 2)
    assert (c.source, g.source) == ("exported", "terms")
    # the exported circuit is scheduled as soon as possible: never longer than the blocks run one
    # after another (durations added), with the same gates
    summed = compiled.of_terms(ansatz.labels, 2)
    assert c.counts == summed.counts and c.fidelity == pytest.approx(summed.fidelity, rel=1e-12)
    assert c.duration_us <= summed.duration_us
    assert not list(tmp_path.iterdir())  # nothing compiled, nothing written


def test_shot_count_takes_the_worst_state_and_component(basis):
    # Bernoulli variance p(1 - p)(a - b)^2 of a two-point distribution (textbook) and n = Var/σ²
    # (central limit theorem); a basis state needs no shots
    a, b = 0, 1
    psi_a, psi_b = np.eye(basis.dimension)[a], np.eye(basis.dimension)[b]
    sigma = 0.05
    field_gap = np.abs(basis.fields()[a] - basis.fields()[b]).max()
    assert shots_needed(basis, psi_a[None], sigma)["electric_field"] == 0
    shots = shots_needed(basis, np.array([psi_a, (psi_a + psi_b) / np.sqrt(2)]), sigma)
    assert shots["electric_field"] == int(np.ceil(0.25 * field_gap ** 2 / sigma ** 2))


def test_observables_criterion_is_one_rule_for_depths_and_trotter(basis):
    # with criterion = "observables" both the depth search and the Trotter baseline accept when the
    # largest error of <L_n> and ν stays below observable_tolerance; the infidelity tolerance is not used
    psi0 = basis_state(basis, np.zeros(3))
    settings = settings_of(criterion="observables", observable_tolerance=0.02, tolerance=1e-6,
                           trotter_orders=[2], max_layers=3)
    costs = model_term_costs(basis.params, settings.native_spec(), load_profile(None), compile=False)
    (row,) = trotter_rows(basis, psi0, settings, costs)
    assert row.steps is not None and row.max_observable_error <= 0.02
    assert row.max_infidelity > 1e-6  # accepted although the infidelity tolerance is not met
    fewer = trotter_rows(basis, psi0, replace(settings, trotter_max_steps=row.steps - 1), costs)[0]
    assert fewer.steps is None and fewer.max_observable_error > 0.02  # the least count is least
    result = size_depth(basis, psi0, settings, Costing(load_profile(None), costs), baselines=False)
    chosen = [r for r in result.rows if r.layers == result.chosen][0]
    assert chosen.max_observable_error <= 0.02 and chosen.max_infidelity > 1e-6


def test_fast_path_chooses_the_same_depths_as_the_plain_path(basis):
    # the plain fits (every step to its threshold, every missed step restarted) are the reference
    psi0 = basis_state(basis, np.zeros(3))
    profile = load_profile(None)
    costing = Costing(profile, model_term_costs(basis.params, settings_of().native_spec(), profile, compile=False))
    for family in ("symmetric", "hardware"):
        settings = settings_of(family=family, max_layers=4)
        plain = size_depth(basis, psi0, settings, costing, baselines=False, fast=False)
        fast = size_depth(basis, psi0, settings, costing, baselines=False, fast=True)
        assert plain.chosen is not None and fast.chosen == plain.chosen
        assert fast.best_under_noise == plain.best_under_noise
