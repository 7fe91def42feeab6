"""Every executor gives the serial results; pool workers run with one BLAS thread."""

from __future__ import annotations

import sys

import numpy as np
import pytest

from lgt.errors import ConfigError
from lgt.sweep import list_runs, load_sweep, run_sweep
from lgt.sweep.executors import DaskRunner, ProcessPoolRunner, SerialExecutor, make_executor
from sweep_configs import spectrum_sweep

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

CONFIG = tomllib.loads(spectrum_sweep(8, 5, '"model.mass" = [0.2, 0.6]',
                                      '"model.coupling" = [0.5, 1.0, 2.0]\n"model.theta" = [0.0, 1.0, 2.0]'))


@pytest.fixture(scope="module")
def serial(tmp_path_factory):
    out = tmp_path_factory.mktemp("serial") / "serial.h5"
    run_sweep(CONFIG, out, SerialExecutor(), progress=False)
    return load_sweep(out)


def _assert_same(data, reference):
    assert list(data["run_id"]) == list(reference["run_id"])
    for key in ("model.mass", "model.coupling", "model.theta", "dimension"):
        np.testing.assert_array_equal(data[key], reference[key])
    np.testing.assert_allclose(data["energies"], reference["energies"], rtol=0, atol=1e-11)


def test_process_pool_equals_serial_with_pinned_blas(serial, tmp_path):
    out = tmp_path / "pool.h5"
    with ProcessPoolRunner(2) as pool:
        summary = run_sweep(CONFIG, out, pool, progress=False)
    assert summary.completed == 6
    _assert_same(load_sweep(out), serial)
    rows = list_runs(out)
    assert len({r["worker"] for r in rows}) >= 1
    import h5py
    with h5py.File(out, "r") as f:
        threads = {int(g.attrs["threads"]) for g in f["runs"].values()}
    assert threads == {1}  # worker processes never started a second (BLAS) thread


def test_dask_local_cluster_equals_serial(serial, tmp_path):
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as cluster, \
            distributed.Client(cluster) as client:
        with DaskRunner(client=client) as runner:
            run_sweep(CONFIG, tmp_path / "dask.h5", runner, progress=False)
    _assert_same(load_sweep(tmp_path / "dask.h5"), serial)


@pytest.mark.slow
def test_dask_local_process_cluster_equals_serial(serial, tmp_path):
    pytest.importorskip("distributed")
    with make_executor(dask_local=2) as runner:
        run_sweep(CONFIG, tmp_path / "dask.h5", runner, progress=False)
    _assert_same(load_sweep(tmp_path / "dask.h5"), serial)


def test_executor_choice():
    assert isinstance(make_executor(), SerialExecutor)
    assert isinstance(make_executor(workers=1), SerialExecutor)
    with pytest.raises(ConfigError) as info:
        make_executor(workers=2, scheduler="tcp://127.0.0.1:8786")
    assert info.value.key == "--scheduler"
    with pytest.raises(ConfigError) as info:
        make_executor(workers=0)
    assert info.value.key == "--workers" and info.value.value == 0


@pytest.mark.slow
def test_scheduler_address_equals_serial(serial, tmp_path):
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster:
        with make_executor(scheduler=cluster.scheduler_address) as runner:
            assert "2 workers" in runner.describe()
            run_sweep(CONFIG, tmp_path / "remote.h5", runner, progress=False)
    _assert_same(load_sweep(tmp_path / "remote.h5"), serial)
