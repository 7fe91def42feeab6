"""Structured tables in HDF5, named xarray dimensions with units, identical serial and pool
results, config hashing in its own module, signal handling in-process."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
from pathlib import Path

import h5py
import numpy as np
import pytest

from lgt.io import read_run_file, write_run_file
from lgt.results import RunResult, Table
from lgt.signals import Interrupted, deferred, stop_on_signals
from lgt.sweep import load_sweep, run_sweep, to_xarray
from lgt.sweep.executors import ProcessPoolRunner, SerialExecutor
from sweep_configs import meson_evolve_sweep

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib


def _sizing_table() -> Table:
    return Table({"layers": np.array([1, 2, 3]), "fidelity": np.array([0.9, 0.99, 0.999]),
                  "family": np.array(["hardware", "hardware", "subspace"]),
                  "duration": np.array([12.5, 25.0, 37.5])},
                 units={"duration": "us"}, description="one row per circuit depth")


def test_table_round_trip_as_an_hdf5_group(tmp_path):
    result = RunResult("size", {"model": {"sites": 4}}, tables={"sizing": _sizing_table()})
    path = write_run_file(tmp_path / "t.h5", result)
    with h5py.File(path, "r") as f:  # readable without Fluxline: one dataset per column
        group = f["tables/sizing"]
        assert group["duration"].attrs["unit"] == "us"
        np.testing.assert_array_equal(group["layers"][()], [1, 2, 3])
        assert group["fidelity"].fletcher32
    back = read_run_file(path).tables["sizing"]
    assert list(back.columns) == ["layers", "fidelity", "family", "duration"]
    assert back.rows() == _sizing_table().rows()
    assert back.units == {"duration": "us"} and back.description == "one row per circuit depth"


EVOLVE = tomllib.loads(meson_evolve_sweep(
    1.0, 0.25, ["loschmidt_echo", "electric_field", "occupation", "charge_correlation"],
    '"model.mass" = [0.3, 0.8]'))


def test_xarray_has_named_dimensions_coordinates_and_units(tmp_path):
    out = tmp_path / "ev.h5"
    run_sweep(EVOLVE, out, progress=False)
    ds = to_xarray(out)
    assert ds["electric_field"].dims == ("model.mass", "time", "link")   # N - 1 = 3 links
    assert ds["occupation"].dims == ("model.mass", "time", "site")       # N = 4 sites
    assert ds["charge_correlation"].dims == ("model.mass", "time", "site", "site_2")
    np.testing.assert_allclose(ds["time"].values, [0, 0.25, 0.5, 0.75, 1.0])
    assert ds["time"].attrs["units"] == "lattice time"
    assert ds["loschmidt_echo"].attrs["units"] == "dimensionless"
    assert not [d for d in ds.dims if "_dim" in str(d)]
    # ⟨ψ0|ψ0⟩ = 1 at t = 0 (normalised initial state)
    np.testing.assert_allclose(ds["loschmidt_echo"].sel(time=0.0), 1.0, atol=1e-12)


def test_spectrum_levels_axis_and_energy_unit(tmp_path):
    cfg = tomllib.loads('[model]\nsites = 4\n[spectrum]\ncount = 3\n[sweep]\ntask = "spectrum"\n'
                        '[sweep.grid]\n"model.mass" = [0.1, 0.5]\n')
    run_sweep(cfg, tmp_path / "s.h5", progress=False)
    ds = to_xarray(tmp_path / "s.h5")
    assert ds["energies"].dims == ("model.mass", "level")
    assert ds["energies"].attrs["units"] == "lattice energy"


def test_serial_and_pool_results_are_identical(tmp_path):
    cfg = tomllib.loads('[model]\nsites = 12\nlevels = 3\n[spectrum]\ncount = 4\n'
                        '[sweep]\ntask = "spectrum"\n[sweep.grid]\n"model.mass" = [0.2, 0.7]\n')
    run_sweep(cfg, tmp_path / "serial.h5", SerialExecutor(), progress=False)
    with ProcessPoolRunner(2) as pool:
        run_sweep(cfg, tmp_path / "pool.h5", pool, progress=False)
    a, b = load_sweep(tmp_path / "serial.h5"), load_sweep(tmp_path / "pool.h5")
    # N = 12 is large enough for multi-threaded BLAS to sum in another order (9e-15 apart
    # when the serial coordinator is not pinned, measured); pinned, they agree bit for bit.
    np.testing.assert_array_equal(a["energies"], b["energies"])


def test_config_hashing_lives_in_its_own_module():
    import lgt.hashing
    import lgt.io
    assert lgt.io.canonical_json is lgt.hashing.canonical_json
    assert lgt.hashing.canonical_json({"b": 1, "a": np.float64(0.5)}) == '{"a":0.5,"b":1}'
    # sha256 of the empty string (FIPS 180-4 test vector)
    assert lgt.hashing.digest("", 64) == ("e3b0c44298fc1c149afbf4c8996fb924"
                                          "27ae41e4649b934ca495991b7852b855")


def test_sigterm_raises_interrupted_with_status_143_and_handlers_are_restored():
    before = signal.getsignal(signal.SIGTERM)
    with pytest.raises(Interrupted) as info:
        with stop_on_signals():
            os.kill(os.getpid(), signal.SIGTERM)
            for _ in range(1000):  # the handler runs between bytecodes
                pass
    assert info.value.exit_status == 143
    assert signal.getsignal(signal.SIGTERM) is before


def test_deferred_block_finishes_before_the_interruption():
    done = []
    with pytest.raises(Interrupted):
        with stop_on_signals():
            with deferred():
                os.kill(os.getpid(), signal.SIGHUP)
                done.append("written")
            done.append("not reached")
    assert done == ["written"]


def test_second_signal_ends_at_once_after_the_abort_callbacks(tmp_path):
    marker = tmp_path / "workers-killed"
    script = f'''
import os, signal, time
from lgt.signals import stop_on_signals, deferred, on_abort
with stop_on_signals(), on_abort(lambda: open({str(marker)!r}, "w").close()):
    with deferred():
        os.kill(os.getpid(), signal.SIGTERM)
        os.kill(os.getpid(), signal.SIGTERM)
        time.sleep(30)
'''
    env = {**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parents[1])}
    proc = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True,
                          env=env, timeout=20)
    assert proc.returncode == 143
    assert marker.exists() and "Traceback" not in proc.stderr
    assert "second signal" in proc.stderr


def test_lost_worker_is_recorded_as_failed_with_its_reason(tmp_path, capsys):
    from lgt.cli import main
    from lgt.sweep import list_runs
    from lgt.sweep.executors import Executor, WorkerLost
    from lgt.sweep.work import execute_point

    class LosesSecond(Executor):
        def run(self, fn, jobs):
            for index, job in enumerate(jobs):
                yield index, (WorkerLost("worker 42 was killed by SIGKILL", 3) if index == 1
                              else execute_point(*job))

    cfg = tomllib.loads('[model]\nsites = 4\n[spectrum]\ncount = 2\n[sweep]\ntask = "spectrum"\n'
                        '[sweep.grid]\n"model.mass" = [0.1, 0.5, 0.9]\n')
    out = tmp_path / "s.h5"
    summary = run_sweep(cfg, out, LosesSecond(), progress=False)
    assert (summary.completed, summary.failed, summary.exit_code) == (2, 1, 1)
    failed = [r for r in list_runs(out) if r["status"] == "failed"]
    assert failed[0]["error"] == "worker lost 3 times: worker 42 was killed by SIGKILL"
    assert main(["runs", str(out)]) == 1
    assert "failed: worker lost 3 times" in capsys.readouterr().out
    assert run_sweep(cfg, out, progress=False).completed == 1  # redone on the next start


def test_sweep_tables_become_variables_along_a_row_axis(tmp_path):
    from lgt.tasks import register_task, validate_spectrum

    def run(resolved: dict) -> RunResult:
        return RunResult("test-table", resolved, tables={"sizing": _sizing_table()})
    register_task("test-table", validate_spectrum, run, sections=("model", "spectrum"))
    cfg = tomllib.loads('[model]\nsites = 4\n[spectrum]\ncount = 2\n[sweep]\ntask = "test-table"\n'
                        '[sweep.grid]\n"model.mass" = [0.1, 0.5]\n')
    run_sweep(cfg, tmp_path / "t.h5", progress=False)
    data = load_sweep(tmp_path / "t.h5")
    np.testing.assert_array_equal(data["sizing.layers"], [[1, 2, 3], [1, 2, 3]])
    ds = to_xarray(tmp_path / "t.h5")
    assert ds["sizing.duration"].dims == ("model.mass", "sizing_row")
    assert ds["sizing.duration"].attrs["units"] == "us"
    assert ds["sizing.family"].values.tolist()[0] == ["hardware", "hardware", "subspace"]
