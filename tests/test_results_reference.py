"""The exact reference of a run (``RunResult.reference``): HDF5 round trip, derived errors, fit
results without name prefixes, legacy files, sweeps with a ``source`` axis; kind axes."""

from __future__ import annotations

import h5py
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from lgt.io import read_run_file, write_run_file
from lgt.results import RunResult, TimeSeries
from lgt.sweep import load_sweep, run_sweep, to_xarray
from lgt.variational.comparison import COMPARED
from lgt.variational.workflow import run_fit

MODEL = {"sites": 4, "hopping": 1.0, "mass": 0.5, "coupling": 1.0, "levels": 3}
VARIATIONAL = {"layers": 2, "dt": 0.1, "t_final": 0.3, "tolerance": 1e-3, "compile": False}


def _run(times: np.ndarray, fitted: np.ndarray, exact: np.ndarray) -> RunResult:
    return RunResult("evolve", {"model": MODEL}, {"electric_field": TimeSeries(times, fitted),
                                                  "echo": TimeSeries(times, np.ones(len(times)))},
                     reference={"electric_field": TimeSeries(times, exact)})


@settings(max_examples=15, deadline=None)
@given(st.integers(1, 6), st.integers(1, 4), st.integers(0, 2 ** 31 - 1))
def test_reference_round_trips_through_hdf5_and_errors_are_derived(tmp_path_factory, n_times, links, seed):
    """reference/<name>/{step,time,value} is written as an H5MD time series group and read back
    bit for bit; the error is max_n |value - reference| (recomputed here with numpy)."""
    rng = np.random.default_rng(seed)
    times = np.sort(rng.uniform(0, 5, n_times))
    fitted, exact = rng.normal(size=(n_times, links)), rng.normal(size=(n_times, links))
    path = write_run_file(tmp_path_factory.mktemp("ref") / "r.h5", _run(times, fitted, exact))
    with h5py.File(path) as f:
        assert f.attrs["fluxline_layout"] == 3
        assert set(f["reference/electric_field"]) == {"step", "time", "value"}
        np.testing.assert_array_equal(f["reference/electric_field/step"][()], np.arange(n_times))
        assert "error" not in f["reference"] and set(f["observables"]) == {"electric_field", "echo"}
    back = read_run_file(path)
    assert set(back.reference) == {"electric_field"}
    np.testing.assert_array_equal(back.reference["electric_field"].values, exact)
    np.testing.assert_array_equal(back.reference["electric_field"].times, times)
    np.testing.assert_array_equal(back.reference_error("electric_field").values,
                                  np.max(np.abs(fitted - exact), axis=1))


def test_a_reference_must_match_its_series():
    t = np.arange(3.0)
    with pytest.raises(ValueError, match="no series"):
        RunResult("evolve", {}, {}, reference={"x": TimeSeries(t, t)})
    with pytest.raises(ValueError, match="shape"):
        RunResult("evolve", {}, {"x": TimeSeries(t, t)}, reference={"x": TimeSeries(t, np.zeros((3, 2)))})


def test_kind_axis_round_trips():
    """A trailing kind axis keeps its labels through the file; a wrong label count is refused."""
    t = np.arange(4.0)
    values = np.arange(12.0).reshape(4, 3)
    with pytest.raises(ValueError, match="kinds"):
        TimeSeries(t, values, kinds=("a", "b"))
    series = TimeSeries(t, values, kinds=("raw", "mitigated", "exact"))
    np.testing.assert_array_equal(series.kind("mitigated"), values[:, 1])


def test_kind_axis_survives_hdf5(tmp_path):
    t = np.arange(4.0)
    result = RunResult("analyze", {}, {"nu": TimeSeries(t, np.ones((4, 2)), kinds=("raw", "exact"))})
    back = read_run_file(write_run_file(tmp_path / "k.h5", result))
    assert back.series["nu"].kinds == ("raw", "exact")


@pytest.fixture(scope="module")
def fit_result() -> RunResult:
    return run_fit({"model": MODEL, "initial": {"kind": "vacuum"}, "variational": VARIATIONAL})


def test_fit_stores_the_exact_reference_apart(fit_result, tmp_path):
    """No series name carries structure: the exact curves are the reference of the compared
    observables; max_observable_error is the largest derived error of the criterion observables."""
    from lgt.variational.sizing import CRITERION_OBSERVABLES

    assert not [n for n in fit_result.series if n.startswith(("exact_", "error_"))]
    assert set(fit_result.reference) == set(COMPARED)
    worst = max(float(np.max(fit_result.reference_error(n).values)) for n in CRITERION_OBSERVABLES)
    assert fit_result.attributes["max_observable_error"] == pytest.approx(worst, rel=0, abs=0)
    # the reference at t = 0 is the initial state: vacuum fields 0, echo 1 (docs/conventions.md §2)
    np.testing.assert_allclose(fit_result.reference["electric_field"].values[0], 0.0, atol=1e-12)
    assert fit_result.reference["loschmidt_echo"].values[0] == pytest.approx(1.0)
    back = read_run_file(write_run_file(tmp_path / "fit.h5", fit_result))
    for name in COMPARED:
        np.testing.assert_array_equal(back.reference[name].values, fit_result.reference[name].values)


def test_layout_2_fit_files_still_read(fit_result, tmp_path):
    """A fit file of layout 2 (exact_<name> / error_<name> series) reads with its reference."""
    old = RunResult("fit", fit_result.parameters, dict(fit_result.series), fit_result.arrays,
                    fit_result.attributes)
    for name, ref in fit_result.reference.items():
        old.series[f"exact_{name}"] = ref
        old.series[f"error_{name}"] = fit_result.reference_error(name)
    path = write_run_file(tmp_path / "old.h5", old)
    with h5py.File(path, "r+") as f:
        f.attrs["fluxline_layout"] = 2
    back = read_run_file(path)
    assert set(back.reference) == set(COMPARED) and set(back.series) == set(fit_result.series)


FIT_SWEEP = """
[model]
sites = 4
levels = 3
[initial]
kind = "vacuum"
[variational]
layers = 2
dt = 0.1
t_final = 0.3
compile = false
[sweep]
task = "fit"
[sweep.grid]
"model.mass" = [0.3, 0.8]
"""


def test_fit_sweep_has_a_source_dimension(tmp_path):
    """to_xarray of a fit sweep: each compared observable has named dims (mass, source, time, link)
    with source = result / reference; the reference slice equals each run's stored reference."""
    import tomllib

    out = tmp_path / "fit_sweep.h5"
    run_sweep(tomllib.loads(FIT_SWEEP), out, progress=False)
    ds = to_xarray(out)
    field = ds["electric_field"]
    assert field.dims == ("model.mass", "source", "time", "link")
    assert ds["source"].values.tolist() == ["result", "reference"]
    assert ds["time"].attrs["units"] == "lattice time"
    assert ds["fidelity"].dims == ("model.mass", "time")  # no reference, no source axis
    data = load_sweep(out)
    assert data["electric_field"].shape == (2, 2, 4, 3)
    for i, mass in enumerate(ds["model.mass"].values):
        fit = run_fit({"model": {**MODEL, "mass": float(mass), "hopping": 1.0, "coupling": 1.0},
                       "initial": {"kind": "vacuum"}, "variational": VARIATIONAL})
        np.testing.assert_allclose(field.sel({"model.mass": mass, "source": "reference"}).values,
                                   fit.reference["electric_field"].values, atol=1e-12)


def test_sweep_of_a_kind_axis_has_a_kind_coordinate(tmp_path):
    """A series with kinds becomes a variable with a ``kind`` dimension labelled by the kinds."""
    import tomllib

    from lgt.tasks import register_task, validate_spectrum

    def run(resolved: dict) -> RunResult:
        mass = resolved["model"]["mass"]
        t = np.arange(3.0)
        values = np.stack([np.full((3, 3), mass), np.full((3, 3), 2 * mass)], axis=-1)  # (time, link, kind)
        return RunResult("test-kinds", resolved, {"field": TimeSeries(t, values, kinds=("raw", "mitigated"))})
    register_task("test-kinds", validate_spectrum, run, sections=("model", "spectrum"))
    cfg = tomllib.loads('[model]\nsites = 4\n[spectrum]\ncount = 2\n[sweep]\ntask = "test-kinds"\n'
                        '[sweep.grid]\n"model.mass" = [0.1, 0.5]\n')
    run_sweep(cfg, tmp_path / "k.h5", progress=False)
    ds = to_xarray(tmp_path / "k.h5")
    assert ds["field"].dims == ("model.mass", "time", "link", "kind")
    assert ds["kind"].values.tolist() == ["raw", "mitigated"]
    np.testing.assert_allclose(ds["field"].sel(kind="mitigated").values[:, 0, 0], [0.2, 1.0])
