"""Serial sweeps: results, resume, refusal of foreign outputs, failures, Ctrl-C, reading back."""

from __future__ import annotations

import argparse
import sys

import h5py
import numpy as np
import pytest

from lgt.errors import ConfigError
from lgt.model import ModelParams
from lgt.results import RunResult
from lgt.sweep import list_runs, load_sweep, run_sweep, to_xarray
from lgt.sweep.plan import expand_sweep
from lgt.sweep.store import SweepStore, parts_dir
from lgt.tasks import register_task, validate_spectrum
from sweep_configs import meson_evolve_sweep, spectrum_sweep

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

BASE = spectrum_sweep(6, 4, '"model.mass" = [0.1, 0.5, 0.9]\n"model.coupling" = [1.0, 2.0]')


def _cfg(text: str = BASE) -> dict:
    return tomllib.loads(text)


def _reference_levels(model: dict, count: int) -> np.ndarray:
    """Independent check: dense eigenvalues of H written out from docs/conventions.md §1 for N = 6, d = 3
    (truncated links), by enumerating field configurations that satisfy Gauss's law."""
    p = ModelParams.from_dict(model)
    n, spin = p.sites, 1
    states = []
    for code in range(3 ** (n - 1)):
        fields = [(code // 3 ** (n - 2 - k)) % 3 - spin for k in range(n - 1)]
        full = [0] + fields + [0]  # L_{-1} = L_{N-1} = 0
        occ = [full[i + 1] - full[i] + (i % 2) for i in range(n)]
        if all(o in (0, 1) for o in occ):
            states.append((tuple(fields), occ))
    index = {s: i for i, (s, _) in enumerate(states)}
    h = np.zeros((len(states), len(states)))
    for i, (fields, occ) in enumerate(states):
        h[i, i] = p.mass * sum((-1) ** s * occ[s] for s in range(n)) \
            + p.coupling * sum(f * f for f in fields)
        for link in range(n - 1):  # hop across link: raise L_link when site link empty, next full
            if occ[link] == 0 and occ[link + 1] == 1 and fields[link] < spin:
                raised = list(fields)
                raised[link] += 1
                j = index[tuple(raised)]
                h[i, j] = h[j, i] = p.hopping
    return np.linalg.eigvalsh(h)[:count]


def test_serial_sweep_matches_independent_diagonalisation(tmp_path):
    out = tmp_path / "r.h5"
    summary = run_sweep(_cfg(), out, progress=False)
    assert (summary.total, summary.completed, summary.failed, summary.exit_code) == (6, 6, 0, 0)
    data = load_sweep(out)
    assert list(data["point"]) == list(range(6))
    assert data["energies"].shape == (6, 4)
    for k in range(6):
        model = {"sites": 6, "levels": 3, "mass": data["model.mass"][k],
                 "coupling": data["model.coupling"][k]}
        np.testing.assert_allclose(data["energies"][k], _reference_levels(model, 4), atol=1e-10)
        np.testing.assert_allclose(data["gaps"][k], data["energies"][k] - data["energies"][k, 0])
    assert not parts_dir(out).exists() and not out.with_name("r.h5.lock").exists()


def test_resume_skips_complete_runs(tmp_path):
    out = tmp_path / "r.h5"
    run_sweep(_cfg(), out, progress=False)
    before = {r["run_id"]: r["finished_at"] for r in list_runs(out)}
    again = run_sweep(_cfg(), out, progress=False)
    assert (again.skipped, again.completed) == (6, 0)
    assert {r["run_id"]: r["finished_at"] for r in list_runs(out)} == before


def test_incomplete_group_is_deleted_and_redone(tmp_path):
    out = tmp_path / "r.h5"
    run_sweep(_cfg(), out, progress=False)
    with h5py.File(out, "r+") as f:
        victim = sorted(f["runs"])[2]
        f["runs"][victim].attrs["status"] = "writing"
        del f["runs"][victim]["arrays"]
    summary = run_sweep(_cfg(), out, progress=False)
    assert (summary.skipped, summary.completed) == (5, 1)
    with h5py.File(out, "r") as f:
        assert f["runs"][victim].attrs["status"] == "complete"
        assert "energies" in f["runs"][victim]["arrays"]


def test_output_of_another_config_is_refused(tmp_path):
    out = tmp_path / "r.h5"
    run_sweep(_cfg(), out, progress=False)
    before = out.read_bytes()
    other = _cfg(BASE.replace("0.9]", "1.3]"))
    with pytest.raises(ConfigError, match="different sweep configuration") as info:
        run_sweep(other, out, progress=False)
    assert info.value.key == "--output"
    assert out.read_bytes() == before
    summary = run_sweep(other, out, progress=False, overwrite=True)
    assert summary.completed == 6
    assert 1.3 in load_sweep(out)["model.mass"]


def test_foreign_file_is_refused(tmp_path):
    out = tmp_path / "r.h5"
    with h5py.File(out, "w") as f:
        f["data"] = np.arange(3)
    with pytest.raises(ConfigError, match="not a Fluxline sweep file"):
        run_sweep(_cfg(), out, progress=False)
    out.write_text("hello")
    with pytest.raises(ConfigError, match="not a readable HDF5 file"):
        run_sweep(_cfg(), out, progress=False)


def test_bad_point_fails_before_any_work(tmp_path):
    out = tmp_path / "r.h5"
    bad = _cfg(BASE + '[sweep.zip]\n"model.levels" = [3, 4]\n')
    with pytest.raises(ConfigError, match=r'sweep.zip."model.levels".*point 1'):
        run_sweep(bad, out, progress=False)
    assert list(tmp_path.iterdir()) == []


def test_second_coordinator_is_locked_out(tmp_path):
    out = tmp_path / "r.h5"
    plan = expand_sweep(_cfg())
    with SweepStore(out, plan):
        with pytest.raises(ConfigError, match="in use by another running sweep"):
            SweepStore(out, plan).open()
    SweepStore(out, plan).open()  # free again after close


def _flaky_run(threshold: float):
    def run(resolved: dict) -> RunResult:
        mass = resolved["model"]["mass"]
        if mass > threshold:
            raise RuntimeError(f"solver diverged at mass {mass}")
        return RunResult("test-flaky", resolved, arrays={"mass": np.array([mass])})
    return run


def test_failed_runs_are_recorded_then_redone(tmp_path):
    register_task("test-flaky", validate_spectrum, _flaky_run(0.6), sections=("model", "spectrum"))
    out = tmp_path / "r.h5"
    cfg = _cfg(BASE.replace('"spectrum"\n[sweep.grid]', '"test-flaky"\n[sweep.grid]'))
    summary = run_sweep(cfg, out, progress=False, stream=sys.stdout)
    assert (summary.completed, summary.failed, summary.exit_code) == (4, 2, 1)
    failed = [r for r in list_runs(out) if r["status"] == "failed"]
    assert len(failed) == 2 and "solver diverged at mass 0.9" in failed[0]["error"]
    assert len(load_sweep(out)["run_id"]) == 4
    register_task("test-flaky", validate_spectrum, _flaky_run(10.0), sections=("model", "spectrum"))
    summary = run_sweep(cfg, out, progress=False)
    assert (summary.skipped, summary.completed, summary.failed) == (4, 2, 0)
    assert all(r["status"] == "complete" for r in list_runs(out))


def test_keyboard_interrupt_keeps_finished_runs_and_says_how_to_resume(tmp_path, capsys):
    calls = []

    def run(resolved: dict) -> RunResult:
        calls.append(resolved["model"]["mass"])
        if len(calls) == 3:
            raise KeyboardInterrupt
        return RunResult("test-ctrlc", resolved, arrays={"x": np.zeros(2)})
    register_task("test-ctrlc", validate_spectrum, run, sections=("model", "spectrum"))
    out = tmp_path / "r.h5"
    cfg = _cfg(BASE.replace('"spectrum"\n[sweep.grid]', '"test-ctrlc"\n[sweep.grid]'))
    summary = run_sweep(cfg, out, progress=False, resume_hint="fluxline sweep c.toml -o r.h5")
    assert summary.interrupted and summary.exit_code == 130
    err = capsys.readouterr().err
    assert "2 of 6 runs are complete" in err and "fluxline sweep c.toml -o r.h5" in err
    assert [r["status"] for r in list_runs(out)] == ["complete", "complete"]
    summary = run_sweep(cfg, out, progress=False)
    assert (summary.skipped, summary.completed) == (2, 4)


def test_unmerged_parts_are_visible_to_readers(tmp_path):
    out = tmp_path / "r.h5"
    plan = expand_sweep(_cfg())
    store = SweepStore(out, plan, merge_every=1e9)
    store.open()
    from lgt.sweep.work import execute_point
    outcome = execute_point(plan.task, plan.points[0].config)
    store.add(plan.points[0], outcome.result, outcome.info)
    rows = list_runs(out)
    assert [(r["status"], r["storage"]) for r in rows] == [("complete", "pending merge")]
    store.close()
    assert [r["storage"] for r in list_runs(out)] == ["merged"]


def test_xarray_grid_and_runs_command(tmp_path, capsys):
    out = tmp_path / "r.h5"
    run_sweep(_cfg(), out, progress=False)
    ds = to_xarray(out)
    assert ds["energies"].dims[:2] == ("model.mass", "model.coupling")
    assert ds["energies"].shape == (3, 2, 4)
    data = load_sweep(out)
    k = int(np.flatnonzero((data["model.mass"] == 0.5) & (data["model.coupling"] == 2.0))[0])
    np.testing.assert_array_equal(ds["energies"].sel({"model.mass": 0.5, "model.coupling": 2.0}),
                                  data["energies"][k])
    from lgt.commands import runs
    parser = argparse.ArgumentParser()
    runs.register(parser.add_subparsers())
    args = parser.parse_args(["runs", str(out)])
    assert args.func(args) == 0
    text = capsys.readouterr().out
    assert "6 of 6 runs complete" in text and text.count("complete") == 7


def test_evolve_sweep_stores_h5md_series(tmp_path):
    pytest.importorskip("lgt.evolution")
    cfg = _cfg(meson_evolve_sweep(1.0, 0.25, ["loschmidt_echo", "electric_field"],
                                  '"model.mass" = [0.3, 0.8]\n"initial.sites" = [[1, 2], [0, 1]]', table="zip"))
    out = tmp_path / "ev.h5"
    assert run_sweep(cfg, out, progress=False).completed == 2
    data = load_sweep(out)
    assert data["loschmidt_echo"].shape == (2, 5)
    assert data["electric_field"].shape == (2, 5, 3)
    np.testing.assert_allclose(data["loschmidt_echo/time"][0], [0, 0.25, 0.5, 0.75, 1.0])
    np.testing.assert_allclose(data["loschmidt_echo"][:, 0], 1.0, atol=1e-12)  # |<psi0|psi0>|^2
    with h5py.File(out, "r") as f:
        for group in f["runs"].values():
            series = group["observables/electric_field"]
            np.testing.assert_array_equal(series["step"][()], np.arange(5))
            assert series["value"].shape == (5, 3)
    assert to_xarray(out)["initial.sites"].values.tolist() == ["[1, 2]", "[0, 1]"]


def test_command_exit_status_and_message(tmp_path, capsys):
    from lgt.sweep.__main__ import main
    config = tmp_path / "bad.toml"
    config.write_text(BASE.replace('"model.coupling" = [1.0, 2.0]', '"model.coupling" = []'))
    assert main([str(config), "--output", str(tmp_path / "r.h5"), "--no-progress"]) == 2
    assert 'sweep.grid."model.coupling" = []: empty axis' in capsys.readouterr().err
    assert not (tmp_path / "r.h5").exists()
    config.write_text(BASE)
    assert main([str(config), "--output", str(tmp_path / "r.h5"), "--no-progress"]) == 0
    assert "6 runs: 0 already complete, 6 computed, 0 failed" in capsys.readouterr().err
    assert main([str(config), "-o", str(tmp_path / "r.h5"), "--workers", "0"]) == 2


def test_ragged_results_load_as_object_arrays(tmp_path):
    cfg = _cfg('[model]\nsites = 2\n[spectrum]\ncount = 5\n[sweep]\ntask = "spectrum"\n'
               '[sweep.zip]\n"model.sites" = [2, 4]\n')
    out = tmp_path / "r.h5"
    run_sweep(cfg, out, progress=False)
    data = load_sweep(out)
    assert data["energies"].dtype == object
    assert [len(e) for e in data["energies"]] == list(data["levels_returned"])
    assert list(data["levels_returned"]) == [min(5, d) for d in data["dimension"]]
    assert "energies" not in to_xarray(out)  # ragged entries stay out of the Dataset


def test_xarray_grid_times_zip_layout(tmp_path):
    cfg = _cfg(BASE + '[sweep.zip]\n"model.hopping" = [0.5, 1.0, 1.5]\n"model.theta" = [0.0, 1.0, 2.0]\n')
    out = tmp_path / "r.h5"
    run_sweep(cfg, out, progress=False)
    ds, data = to_xarray(out), load_sweep(out)
    assert ds["energies"].shape == (3, 2, 3, 4)
    assert ds["model.theta"].dims == ("zip",)
    for k in range(len(data["run_id"])):
        z = int(np.flatnonzero(ds["model.hopping"].values == data["model.hopping"][k])[0])
        assert ds["model.theta"].values[z] == data["model.theta"][k]
        cell = ds["energies"].sel({"model.mass": data["model.mass"][k],
                                   "model.coupling": data["model.coupling"][k], "zip": z})
        np.testing.assert_array_equal(cell, data["energies"][k])
