"""Lab side: Gauss-law post-selection, readout inversion, measured-data input, predict / analyze."""

from __future__ import annotations

import json

import h5py
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from cli_runner import run_cli
from lgt.basis import PhysicalBasis
from lgt.config import load_config
from lgt.lab.measured import read_measured, write_csv
from lgt.lab.mitigation import StringObservables, analyze_counts, apply_response, unfold
from lgt.lab.workflow import exact_observables, split_config
from lgt.model import ModelParams
from test_variational_cli import CONFIG as VARIATIONAL_CONFIG

PARAMS = ModelParams(sites=4, hopping=1.0, mass=0.5, coupling=1.0, levels=3)

# the fit test's configuration over a shorter window (0.5), one depth, plus a [lab] section
CONFIG = VARIATIONAL_CONFIG.replace("t_final = 1.0", "t_final = 0.5").replace("max_layers = 4", "layers = 3")
LAB = """
[lab]
shots = 4000
bootstrap = 100
seed = 3
"""

ERROR_FREE_PROFILE = '[hardware]\nname = "error-free test profile"\n' + "".join(
    f"[hardware.gates.{key}]\nduration_us = {us}\nfidelity = 1.0\n"
    for key, us in (("rotation", 10.0), ("phase", 0.0), ("ms", 100.0), ("phase2", 100.0), ("generator", 500.0))
) + '[noise]\nformat = 1\nname = "no errors"\n'


def _config(tmp_path, profile: str | None = None) -> str:
    line = ""
    if profile is not None:
        (tmp_path / "profile.toml").write_text(profile)
        line = f'hardware_profile = "{tmp_path / "profile.toml"}"\n'
    path = tmp_path / "lab.toml"
    path.write_text(CONFIG + line + LAB)
    return str(path)


# ---------------------------------------------------------------------- post-selection
def test_gauss_mask_matches_the_enumerated_physical_basis():
    """The strings kept by post-selection are exactly the Gauss-law basis grown site by site."""
    obs = StringObservables.for_model(PARAMS)
    assert np.array_equal(np.flatnonzero(obs.physical), PhysicalBasis(PARAMS).codes)


def test_postselection_removes_exactly_the_unphysical_weight():
    """A state with known leakage w (a mixture of physical and unphysical strings) loses exactly w;
    a noiseless physical state loses nothing."""
    obs = StringObservables.for_model(PARAMS)
    rng = np.random.default_rng(0)
    phys = rng.random(obs.physical.size) * obs.physical
    unphys = rng.random(obs.physical.size) * ~obs.physical
    w = 0.137
    p = (1 - w) * phys / phys.sum() + w * unphys / unphys.sum()
    kept, discarded = obs.postselect(p[None])
    assert np.isclose(discarded[0], w)
    assert np.allclose(kept[0], (1 - w) * phys / phys.sum())
    basis = PhysicalBasis(PARAMS)
    clean = np.zeros(obs.physical.size)
    clean[basis.codes] = rng.random(basis.dimension)
    clean /= clean.sum()
    res = analyze_counts(np.round(clean * 1e4), obs, [np.eye(3)] * PARAMS.n_links, bootstrap=20)
    assert res["discarded_fraction"] == 0.0


# ---------------------------------------------------------------------- readout inversion
def test_unfolding_recovers_known_populations_within_error_bars():
    """Synthetic shots from known populations through known per-qudit confusion matrices: the
    mitigated field and density agree with the known values within 3 bootstrap standard errors,
    while the raw values are biased far beyond theirs."""
    obs = StringObservables.for_model(PARAMS)
    rng = np.random.default_rng(5)
    basis = PhysicalBasis(PARAMS)
    p_true = np.zeros(obs.physical.size)
    p_true[basis.codes] = rng.random(basis.dimension) ** 3
    p_true /= p_true.sum()
    mats = []
    for _ in range(PARAMS.n_links):
        a = np.eye(3) * 0.9 + rng.random((3, 3)) * 0.05
        mats.append(a / a.sum(axis=0, keepdims=True))
    p_read = apply_response(p_true[None], mats)[0]
    counts = rng.multinomial(50_000, p_read)
    res = analyze_counts(counts, obs, mats, bootstrap=100, iterations=300, seed=1)
    known = obs.values(p_true[None])
    for name in ("electric_field", "particle_density"):
        err = np.abs(np.asarray(res[name]["mitigated"]) - known[name][0])
        assert np.all(err <= 3 * np.asarray(res[name]["mitigated_error"])), name
    bias = np.abs(res["particle_density"]["raw"] - known["particle_density"][0])
    assert bias > 5 * res["particle_density"]["raw_error"]
    # unfolding keeps a valid distribution
    p = unfold((counts / counts.sum())[None], mats)
    assert np.all(p >= 0) and np.isclose(p.sum(), 1)


# ---------------------------------------------------------------------- measured data in
def _exact_counts(tmp_path, shots=20000, seed=0):
    """Counts sampled from the exact state at each grid time through the default readout response."""
    from circuits.noise_model import NoiseModel

    resolved, _ = split_config(load_config(_config(tmp_path)))
    basis = PhysicalBasis(PARAMS)
    from lgt.states import prepare_initial_state
    from lgt.variational.ansatz import symmetric_ansatz
    from lgt.variational.stepper import exact_trajectory

    states = exact_trajectory(symmetric_ansatz(basis, 1), prepare_initial_state(basis, resolved["initial"]), 0.1, 5)
    a = NoiseModel.default().confusion(3)
    rng = np.random.default_rng(seed)
    counts = []
    for s in states:
        p = np.zeros(3 ** PARAMS.n_links)
        p[basis.codes] = np.abs(s) ** 2
        counts.append(rng.multinomial(shots, apply_response(p[None], [a] * PARAMS.n_links)[0]))
    return np.arange(6) * 0.1, np.array(counts), resolved


def test_analyze_reproduces_exact_observables_within_errors(tmp_path):
    """analyze on shots sampled from the exact state (through the profile's readout response)
    recovers the exact curves within 3 reported standard errors."""
    times, counts, resolved = _exact_counts(tmp_path)
    csv = write_csv(tmp_path / "measured.csv", times, counts, PARAMS.n_links, 3)
    out = run_cli("analyze", str(csv), _config(tmp_path), "--json", "--output", str(tmp_path / "a.h5"),
                  "--plots", str(tmp_path / "figures"))
    assert out.returncode == 0, out.stderr
    rep = json.loads(out.stdout)
    assert np.allclose(rep["times"], times)
    exact = exact_observables(resolved, np.arange(6))  # reference: exact_trajectory (scipy expm_multiply)
    for name in ("particle_density", "electric_field"):
        entry = rep[name]
        assert set(entry) >= {"raw", "mitigated", "mitigated_error", "exact"}
        assert np.allclose(entry["exact"], exact[name])
        assert np.all(np.abs(np.array(entry["mitigated"]) - exact[name]) <= 3 * np.array(entry["mitigated_error"]) + 1e-12)
    assert len(rep["discarded_fraction"]) == 6
    assert (tmp_path / "a.h5").is_file()
    assert len(list((tmp_path / "figures").glob("analyze_*.png"))) == 1 + PARAMS.n_links
    again = run_cli("analyze", str(csv), _config(tmp_path), "--output", str(tmp_path / "a.h5"))
    assert again.returncode == 2 and "--overwrite" in again.stderr
    # `fluxline plot` of the saved file draws the same figures (raw, mitigated, exact)
    plotted = run_cli("plot", str(tmp_path / "a.h5"), "--outdir", str(tmp_path / "replot"))
    assert plotted.returncode == 0, plotted.stderr
    assert len(list((tmp_path / "replot").glob("analyze_*.png"))) == 1 + PARAMS.n_links
    # the file holds structure, not the report as JSON text; the report rebuilt from it is the --json one
    from lgt.io import read_run_file
    from lgt.lab.report import report_from_result

    with h5py.File(tmp_path / "a.h5") as f:
        assert not any("report_json" in key for key in f.attrs)
        assert list(f["observables/particle_density/value"].attrs["kinds"]) == list(rep["particle_density"])
    rebuilt = report_from_result(read_run_file(tmp_path / "a.h5"))
    assert rebuilt == rep


def test_hdf5_form_equals_csv_form(tmp_path):
    times, counts, _ = _exact_counts(tmp_path, shots=500)
    csv = write_csv(tmp_path / "m.csv", times, counts, PARAMS.n_links, 3)
    rows = [(t, c, code) for t, row in zip(times, counts) for code, c in enumerate(row) if c]
    levels = np.array([np.unravel_index(code, (3,) * PARAMS.n_links) for _, _, code in rows])
    with h5py.File(tmp_path / "m.h5", "w") as f:
        g = f.create_group("outcomes")
        g["time"] = [r[0] for r in rows]
        g["count"] = [r[1] for r in rows]
        g["levels"] = levels
    a = read_measured(csv, PARAMS.n_links, 3, 0.1, 5)
    b = read_measured(tmp_path / "m.h5", PARAMS.n_links, 3, 0.1, 5)
    assert np.array_equal(a.steps, b.steps) and np.array_equal(a.counts, b.counts)
    assert np.array_equal(a.counts, counts)


@pytest.mark.parametrize("text,where", [
    ("time,count,q0,q1\n0.0,5,1,1\n", "line 1, header"),            # wrong register size
    ("time,count,q0,q1,q2\n0.0,5,1,3,1\n", "line 2, field q1"),      # level outside 0..2
    ("time,count,q0,q1,q2\n0.0,5,1,1,1\n0.15,5,1,1,1\n", "line 3, field time"),  # not on the grid
    ("time,count,q0,q1,q2\n0.1,2.5,1,1,1\n", "line 2, field count"),  # non-integer count
    ("time,count,q0,q1,q2\n0.1,x,1,1,1\n", "line 2, field count"),
    ("time,count,q0,q1,q2\n0.1,4,1,1\n", "line 2"),
])
def test_malformed_measured_files_exit_2_naming_line_and_field(tmp_path, text, where):
    bad = tmp_path / "bad.csv"
    bad.write_text(text)
    out_file = tmp_path / "never.h5"
    out = run_cli("analyze", str(bad), _config(tmp_path), "--output", str(out_file))
    assert out.returncode == 2
    assert where in out.stderr and "Traceback" not in out.stderr
    assert not out_file.exists()


# ---------------------------------------------------------------------- predict
def test_predict_error_free_profile_equals_exact_within_shot_error(tmp_path):
    """With every error zero the predicted (raw and mitigated) curves are the exact curves within
    3 shot standard errors, and no shot is discarded."""
    out = run_cli("predict", _config(tmp_path, ERROR_FREE_PROFILE), "--json")
    assert out.returncode == 0, out.stderr
    rep = json.loads(out.stdout)
    assert rep["times"] == pytest.approx([0.1 * k for k in range(6)])
    assert rep["discarded_fraction"] == [0.0] * 6
    assert rep["fit"]["max_infidelity"] < 1e-3
    for name in ("particle_density", "electric_field"):
        e = {k: np.array(v) for k, v in rep[name].items()}
        # the noiseless fitted circuits differ from exact by the fit error only (1 − F ≤ 1e-3)
        fit_error = np.abs(e["circuit"] - e["exact"])
        assert fit_error.max() < 0.03
        assert np.allclose(e["noisy_expected"], e["circuit"], atol=1e-9)
        assert np.all(np.abs(e["mitigated"] - e["circuit"]) <= 3 * e["mitigated_error"] + 1e-12)
        assert np.all(np.abs(e["mitigated"] - e["exact"]) <= 3 * e["mitigated_error"] + fit_error + 1e-12)
    assert rep["noise"]["noise_model"]["name"] == "no errors"


def test_predict_with_default_noise_reports_discards_and_mitigates(tmp_path):
    """Under the built-in illustrative model shots violate Gauss's law; post-selection moves ν
    towards the exact value compared with the raw estimate (on average over the window)."""
    out = run_cli("predict", _config(tmp_path), "--json", "--output", str(tmp_path / "p.h5"))
    assert out.returncode == 0, out.stderr
    rep = json.loads(out.stdout)
    assert min(rep["discarded_fraction"]) > 0.01
    assert "recalled from memory" in rep["noise"]["noise_model"]["source"]
    assert rep["simulation"]["method"] == ["density"] * 6
    # the file form: no JSON report, every section rebuilt from structure; `fluxline plot` draws it
    from lgt.io import read_run_file
    from lgt.lab.report import report_from_result

    result = read_run_file(tmp_path / "p.h5")
    assert "report_json" not in result.attributes and result.tables["simulation"].units["duration_us"] == "us"
    assert report_from_result(result) == rep
    plotted = run_cli("plot", str(tmp_path / "p.h5"), "--outdir", str(tmp_path / "replot"))
    assert plotted.returncode == 0, plotted.stderr
    assert len(list((tmp_path / "replot").glob("predict_*.png"))) == 1 + PARAMS.n_links


def test_bad_lab_and_noise_tables_exit_2(tmp_path):
    cfg = _config(tmp_path)
    with open(cfg) as fh:
        text = fh.read()
    with open(cfg, "w") as fh:
        fh.write(text.replace("shots = 4000", "shots = 0"))
    out = run_cli("predict", cfg)
    assert out.returncode == 2 and "lab.shots" in out.stderr
    bad = ERROR_FREE_PROFILE.replace('name = "no errors"', 'name = "x"\nleaked_outcome = "keep"')
    out = run_cli("predict", _config(tmp_path, bad))
    assert out.returncode == 2 and "noise.leaked_outcome" in out.stderr


def test_predict_reuses_a_fit_file(tmp_path):
    """predict --fit FILE gives the same report as fitting afresh; a fit of another model is refused."""
    cfg = _config(tmp_path, ERROR_FREE_PROFILE)
    with open(cfg) as fh:
        fit_cfg = tmp_path / "fit.toml"  # fit does not read [lab] (and rejects it today)
        fit_cfg.write_text(fh.read().replace(LAB, ""))
    fit = run_cli("fit", str(fit_cfg), "--json", "--output", str(tmp_path / "fit.h5"))
    assert fit.returncode == 0, fit.stderr
    fresh = json.loads(run_cli("predict", cfg, "--json").stdout)
    reused = run_cli("predict", cfg, "--json", "--fit", str(tmp_path / "fit.h5"))
    assert reused.returncode == 0, reused.stderr
    rep = json.loads(reused.stdout)
    assert rep["particle_density"] == fresh["particle_density"]
    with open(cfg) as fh:
        text = fh.read()
    with open(cfg, "w") as fh:
        fh.write(text.replace("mass = 0.5", "mass = 0.7"))
    other = run_cli("predict", cfg, "--fit", str(tmp_path / "fit.h5"))
    assert other.returncode == 2 and "[model]" in other.stderr


@settings(max_examples=25, deadline=None)
@given(st.integers(2, 4), st.integers(1, 3), st.integers(0, 10_000))
def test_unfolding_stays_a_probability_distribution(d, K, seed):
    """Invariant: for any column-stochastic responses and any counts, the unfolded estimate is
    non-negative and normalised, and the response preserves total probability."""
    rng = np.random.default_rng(seed)
    mats = []
    for _ in range(K):
        a = rng.random((d, d)) + np.eye(d) * rng.uniform(0, 3)
        mats.append(a / a.sum(axis=0, keepdims=True))
    counts = rng.integers(0, 20, size=(2, d ** K)).astype(float)
    counts[:, 0] += 1
    freq = counts / counts.sum(axis=1, keepdims=True)
    assert np.allclose(apply_response(freq, mats).sum(axis=1), 1)
    p = unfold(freq, mats, iterations=50)
    assert np.all(p >= 0) and np.allclose(p.sum(axis=1), 1)


def test_predict_noise_none_with_trajectories(tmp_path):
    """[lab] noise = "none" and method = "trajectories": noiseless trajectories all agree, so the
    minimum batch is reported with zero statistical error, and nothing is discarded."""
    cfg = _config(tmp_path)
    with open(cfg) as fh:
        text = fh.read()
    with open(cfg, "w") as fh:
        fh.write(text.replace("seed = 3", 'seed = 3\nnoise = "none"\nmethod = "trajectories"\nshots = 500'
                              ).replace("shots = 4000\n", ""))
    out = run_cli("predict", cfg, "--json")
    assert out.returncode == 0, out.stderr
    rep = json.loads(out.stdout)
    assert rep["simulation"]["method"] == ["trajectories"] * 6
    assert rep["simulation"]["trajectories"] == [64] * 6
    assert max(rep["simulation"]["trajectory_error"]) < 1e-6  # rounding only
    assert rep["discarded_fraction"] == [0.0] * 6
    e = {k: np.array(v) for k, v in rep["particle_density"].items()}
    assert np.allclose(e["noisy_expected"], e["circuit"], atol=1e-9)
