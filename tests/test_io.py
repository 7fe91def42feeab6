"""HDF5 results layer: round trip, H5MD structure, atomic single-run files, no pickles."""

from __future__ import annotations

import json

import h5py
import numpy as np
import pytest

import lgt
from lgt.io import (UNITS, read_run, read_run_file, run_status, write_h5md_root, write_run_file,
                    write_run_group)
from lgt.results import RunResult, TimeSeries


def _result() -> RunResult:
    times = np.linspace(0.0, 2.0, 5)
    return RunResult(
        task="evolve",
        parameters={"model": {"sites": 4, "mass": 0.25, "link": "truncated",
                              "static_charges": [[1, 1], [2, -1]], "boundary_field": 0.0},
                    "evolution": {"times": [0.0, 2.0], "method": "krylov"}},
        series={"field": TimeSeries(times, np.arange(15.0).reshape(5, 3), "dimensionless"),
                "echo": TimeSeries(times, np.exp(-times), "dimensionless"),
                "amplitude": TimeSeries(times, np.exp(1j * times), "dimensionless")},
        arrays={"energies": np.array([-1.5, -0.2, 0.7]), "labels": np.array(["a", "bc"]),
                "counts": np.array([[1, 2], [3, 4]], dtype=np.int64)},
        attributes={"dimension": 19, "converged": True, "method": "dense", "norm": 1.0},
        timings={"build": 0.01, "solve": 0.02},
    )


def test_round_trip_preserves_every_field(tmp_path):
    original = _result()
    path = write_run_file(tmp_path / "run.h5", original)
    back = read_run_file(path)
    assert back.task == original.task
    assert back.parameters == original.parameters
    assert back.timings == original.timings
    assert back.attributes == original.attributes
    assert set(back.series) == set(original.series)
    for name, series in original.series.items():
        np.testing.assert_array_equal(back.series[name].times, series.times)
        np.testing.assert_array_equal(back.series[name].values, series.values)
        assert back.series[name].unit == series.unit
    for name, array in original.arrays.items():
        np.testing.assert_array_equal(back.arrays[name], array)
        assert back.arrays[name].dtype.kind == array.dtype.kind


def test_run_metadata_attributes(tmp_path):
    path = write_run_file(tmp_path / "run.h5", _result())
    with h5py.File(path, "r") as f:
        assert run_status(f) == "complete"
        assert f.attrs["program_version"] == lgt.__version__
        assert f.attrs["units"] == UNITS
        assert f.attrs["task"] == "evolve"
        assert json.loads(f.attrs["parameters"])["model"]["mass"] == 0.25
        assert f.attrs["param.model.mass"] == 0.25
        np.testing.assert_array_equal(f.attrs["param.evolution.times"], [0.0, 2.0])
        assert json.loads(f.attrs["param.model.static_charges"]) == [[1, 1], [2, -1]]
        assert f.attrs["timing.solve"] == 0.02


def test_h5md_required_structure(tmp_path):
    """Checked against the H5MD specification version 1.1 (https://www.nongnu.org/h5md/h5md.html),
    sections "H5MD metadata" and "Time-dependent data": /h5md with an Integer[2] attribute
    ``version``, subgroups ``author`` (attribute ``name``) and ``creator`` (attributes ``name``,
    ``version``); a time-dependent group holds ``step`` (Integer[variable]), ``time``
    ([variable]) and ``value`` ([variable][...]) with matching leading dimension."""
    path = write_run_file(tmp_path / "run.h5", _result())
    with h5py.File(path, "r") as f:
        h5md = f["h5md"]
        assert isinstance(h5md, h5py.Group)
        version = h5md.attrs["version"]
        assert version.shape == (2,) and version.dtype.kind == "i"
        assert tuple(version) == (1, 1)
        assert isinstance(h5md["author"], h5py.Group)
        assert isinstance(h5md["author"].attrs["name"], str) and h5md["author"].attrs["name"]
        assert h5md["creator"].attrs["name"] == "fluxline"
        assert h5md["creator"].attrs["version"] == lgt.__version__
        assert isinstance(f["observables"], h5py.Group)
        for name in ("field", "echo", "amplitude"):
            group = f["observables"][name]
            step, time, value = group["step"], group["time"], group["value"]
            assert step.dtype.kind == "i" and step.ndim == 1
            assert time.dtype.kind == "f" and time.ndim == 1
            assert step.shape[0] == time.shape[0] == value.shape[0] == 5
            assert np.all(np.diff(step[()]) > 0) and np.all(np.diff(time[()]) >= 0)
        assert f["observables/field/value"].shape == (5, 3)


def test_no_pickled_or_opaque_data(tmp_path):
    path = write_run_file(tmp_path / "run.h5", _result())
    kinds = []

    def visit(name, obj):
        if isinstance(obj, h5py.Dataset):
            kinds.append((name, obj.dtype))
            assert h5py.check_opaque_dtype(obj.dtype) is False
            assert obj.dtype.kind in "biufcSO", (name, obj.dtype)
            if obj.dtype.kind == "O":  # only variable-length strings
                assert h5py.check_string_dtype(obj.dtype) is not None
    with h5py.File(path, "r") as f:
        f.visititems(visit)
        for key, value in f.attrs.items():
            assert not (isinstance(value, bytes) and value.startswith(b"\x80")), key
    assert kinds


def test_single_run_file_is_replaced_atomically(tmp_path):
    path = write_run_file(tmp_path / "run.h5", _result())
    before = path.read_bytes()
    bad = _result()
    bad.arrays["oops"] = np.array([{"a": 1}], dtype=object)
    with pytest.raises(TypeError, match="oops"):
        write_run_file(path, bad)
    assert path.read_bytes() == before
    assert [p.name for p in tmp_path.iterdir()] == ["run.h5"]


def test_group_inside_a_file_and_bad_names(tmp_path):
    with h5py.File(tmp_path / "many.h5", "w") as f:
        write_h5md_root(f)
        write_run_group(f.create_group("runs/a"), _result(), {"sweep_point": 3})
        assert f["runs/a"].attrs["sweep_point"] == 3
        assert read_run(f["runs/a"]).parameters == _result().parameters
        bad = _result()
        bad.series = {"a/b": bad.series["echo"]}
        with pytest.raises(ValueError, match="a/b"):
            write_run_group(f.create_group("runs/b"), bad)
        assert run_status(f["runs/b"]) == "writing"
        with pytest.raises(ValueError, match="not a Fluxline run"):
            read_run(f["h5md"])


def test_mismatched_series_rejected(tmp_path):
    bad = _result()
    bad.series["echo"] = TimeSeries(np.arange(3.0), np.arange(4.0))
    with pytest.raises(ValueError, match="do not match"):
        write_run_file(tmp_path / "x.h5", bad)
