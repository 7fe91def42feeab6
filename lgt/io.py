"""HDF5 results layer: one :class:`~lgt.results.RunResult` per HDF5 group.

Layout (documented in ``docs/hdf5_layout.md``, versioned by :data:`LAYOUT_VERSION`):

* file root: H5MD 1.1 metadata group ``/h5md`` (``version`` = [1, 1], ``author/name``,
  ``creator/name``, ``creator/version``) and the attribute ``fluxline_layout``;
* run group: attributes (task, status, program version, units convention, parameters as JSON
  plus flattened ``param.<section>.<key>`` copies, ``timing.<phase>``, ``result.<name>``),
  ``observables/<name>/{step,time,value}`` H5MD time series and ``arrays/<name>`` datasets.

No pickles: every value is a plain HDF5 dataset or attribute. A single-run file is written to a
temporary file and moved into place with :func:`os.replace`, so a crash never leaves a torn file.
"""

from __future__ import annotations

import getpass
import json
import os
import shutil
import tempfile
from contextlib import contextmanager
from pathlib import Path
from typing import Any, Iterator, Mapping

import h5py
import numpy as np

import lgt
from lgt.results import RunResult, Table, TimeSeries

#: Version of the Fluxline HDF5 layout described in docs/hdf5_layout.md.
LAYOUT_VERSION = 1
#: H5MD specification version the files follow (H5MD 1.1, section "H5MD metadata").
H5MD_VERSION = (1, 1)
#: Units convention stored on every run.
UNITS = ("lattice units: energies in units of the Hamiltonian couplings, "
         "times in their inverse")
#: Run status values.
STATUS_WRITING = "writing"
STATUS_COMPLETE = "complete"

_PARAM = "param."
_TIMING = "timing."
_RESULT = "result."


# ---------------------------------------------------------------------------------- helpers
def canonical_json(value: Any) -> str:
    """Deterministic JSON text of plain data (sorted keys, no spaces, exact float repr)."""
    return json.dumps(_plain(value), sort_keys=True, separators=(",", ":"), allow_nan=False)


def _plain(value: Any) -> Any:
    """Convert numpy scalars/arrays and tuples into JSON-compatible Python values."""
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, np.ndarray):
        return _plain(value.tolist())
    if isinstance(value, np.generic):
        return value.item()
    return value


def flatten(tree: Mapping[str, Any], prefix: str = "") -> Iterator[tuple[str, Any]]:
    """Yield ``(dotted.key, leaf)`` pairs of a nested mapping."""
    for key, value in tree.items():
        name = f"{prefix}{key}"
        if isinstance(value, Mapping):
            yield from flatten(value, name + ".")
        else:
            yield name, value


def _attr_value(value: Any) -> Any:
    """An HDF5-storable form of a plain value (JSON text for anything not scalar/uniform)."""
    value = _plain(value)
    if isinstance(value, (bool, int, float, str)):
        return value
    if isinstance(value, list) and value and all(
            isinstance(v, (int, float)) and not isinstance(v, bool) for v in value):
        return np.asarray(value)
    return json.dumps(value)


def _from_attr(value: Any) -> Any:
    """Plain Python value of an HDF5 attribute."""
    if isinstance(value, bytes):
        return value.decode()
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, np.generic):
        return value.item()
    return value


def _check_name(name: str, kind: str) -> None:
    if not name or "/" in name or name in (".", ".."):
        raise ValueError(f"{kind} name {name!r} cannot be an HDF5 link name")


# ---------------------------------------------------------------------------------- H5MD root
def write_h5md_root(f: h5py.File, author: str | None = None) -> None:
    """Create the H5MD 1.1 metadata group ``/h5md`` (idempotent)."""
    h5md = f.require_group("h5md")
    h5md.attrs["version"] = np.asarray(H5MD_VERSION, dtype=np.int32)
    h5md.require_group("author").attrs["name"] = author or _default_author()
    creator = h5md.require_group("creator")
    creator.attrs["name"] = "fluxline"
    creator.attrs["version"] = lgt.__version__
    f.attrs["fluxline_layout"] = LAYOUT_VERSION


def _default_author() -> str:
    try:
        return getpass.getuser()
    except (KeyError, OSError):  # no passwd entry (containers)
        return "unknown"


# ---------------------------------------------------------------------------------- write
def write_run_group(group: h5py.Group, result: RunResult,
                    extra_attrs: Mapping[str, Any] | None = None) -> None:
    """Write ``result`` into an empty ``group``; status becomes ``complete`` after a flush.

    The status attribute is ``writing`` while data goes in; the file is flushed, then the
    status is set to ``complete`` and the file is flushed again.
    """
    attrs = group.attrs
    attrs["status"] = STATUS_WRITING
    attrs["task"] = result.task
    attrs["program"] = "fluxline"
    attrs["program_version"] = lgt.__version__
    attrs["units"] = UNITS
    attrs["parameters"] = canonical_json(result.parameters)
    for key, value in flatten(result.parameters):
        attrs[_PARAM + key] = _attr_value(value)
    for key, value in result.timings.items():
        attrs[_TIMING + key] = float(value)
    for key, value in result.attributes.items():
        attrs[_RESULT + key] = _attr_value(value)
    for key, value in (extra_attrs or {}).items():
        attrs[key] = _attr_value(value)
    obs = group.create_group("observables")
    for name, series in result.series.items():
        _check_name(name, "observable")
        _write_series(obs.create_group(name), series)
    arrays = group.create_group("arrays")
    for name, array in result.arrays.items():
        _check_name(name, "array")
        arrays.create_dataset(name, data=_storable(np.asarray(array), name))
    _write_tables(group, result.tables)
    group.file.flush()
    attrs["status"] = STATUS_COMPLETE
    group.file.flush()


def _storable(array: np.ndarray, name: str) -> np.ndarray:
    if array.dtype.kind == "O":
        raise TypeError(f"array {name!r} has dtype object; store numbers or strings only")
    if array.dtype.kind == "U":
        return array.astype(h5py.string_dtype())
    return array


def _write_series(group: h5py.Group, series: TimeSeries) -> None:
    """H5MD time-dependent data group: ``step`` [T], ``time`` [T], ``value`` [T][...]."""
    times = np.asarray(series.times, dtype=np.float64)
    values = np.asarray(series.values)
    if values.shape[:1] != times.shape:
        raise ValueError(f"observable values of shape {values.shape} do not match "
                         f"{times.shape[0]} stored times")
    group.create_dataset("step", data=np.asarray(series.steps, dtype=np.int64))
    group.create_dataset("time", data=times).attrs["unit"] = "lattice time"
    group.create_dataset("value", data=_storable(values, "value")).attrs["unit"] = series.unit


def write_run_file(path: str | Path, result: RunResult,
                   root_attrs: Mapping[str, Any] | None = None) -> Path:
    """Write one run as a whole HDF5 file (H5MD root + run at ``/``), atomically.

    See :func:`atomic_h5`: readers see the old file or the new one, never a partial one.
    """
    with atomic_h5(path) as f:
        write_h5md_root(f)
        for key, value in (root_attrs or {}).items():
            f.attrs[key] = _attr_value(value)
        write_run_group(f, result)
    return Path(path)


@contextmanager
def atomic_h5(path: str | Path, copy_from: str | Path | None = None) -> Iterator[h5py.File]:
    """Open a temporary HDF5 file that replaces ``path`` only if the block succeeds.

    The temporary file lives in the same directory (optionally starting as a byte copy of
    ``copy_from``); on success it is closed, fsynced and moved over ``path`` with
    :func:`os.replace`, which is atomic on POSIX, and the directory is fsynced. On any exception, or if the process is killed,
    ``path`` is untouched (a killed process leaves only a ``.*.tmp`` file behind).
    """
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    try:
        os.chmod(tmp, _file_mode(path))
        if copy_from is not None:
            shutil.copyfile(copy_from, tmp)
        with h5py.File(tmp, "r+" if copy_from is not None else "w") as f:
            yield f
        _fsync(tmp)
        os.replace(tmp, path)
        _fsync(path.parent)  # make the rename itself durable (power loss)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def _file_mode(path: Path) -> int:
    """Mode of the existing ``path``, else the default for new files under the umask."""
    try:
        return path.stat().st_mode & 0o777
    except FileNotFoundError:
        umask = os.umask(0)
        os.umask(umask)
        return 0o666 & ~umask


def _fsync(path: str | Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


# ---------------------------------------------------------------------------------- read
def run_status(group: h5py.Group) -> str:
    """Status attribute of a run group (``"missing"`` when absent)."""
    return str(_from_attr(group.attrs.get("status", "missing")))


def read_run(group: h5py.Group) -> RunResult:
    """Read a run group (or a single-run file's root) back into a :class:`RunResult`."""
    attrs = group.attrs
    if "parameters" not in attrs or "task" not in attrs:
        raise ValueError(f"HDF5 group {group.name!r} is not a Fluxline run")
    timings: dict[str, float] = {}
    attributes: dict[str, Any] = {}
    for key, value in attrs.items():
        if key.startswith(_TIMING):
            timings[key[len(_TIMING):]] = float(value)
        elif key.startswith(_RESULT):
            attributes[key[len(_RESULT):]] = _from_attr(value)
    series = {}
    for name, sub in group.get("observables", {}).items():
        values = sub["value"][()]
        series[name] = TimeSeries(times=sub["time"][()], values=_decoded(values),
                                  unit=str(_from_attr(sub["value"].attrs.get("unit", ""))))
    arrays = {name: _decoded(ds[()]) for name, ds in group.get("arrays", {}).items()}
    return RunResult(task=str(_from_attr(attrs["task"])),
                     parameters=json.loads(_from_attr(attrs["parameters"])),
                     series=series, arrays=arrays, attributes=attributes, timings=timings,
                     tables=_read_tables(group))


# ---------------------------------------------------------------------------------- tables
# Minimal layout for RunResult.tables, added with the sizing tables (the HDF5 layout owner may
# replace it): ``tables/<name>`` group with attribute ``description``, one dataset per column
# (in column order, attribute ``column_order`` on the group) with attribute ``unit`` where the
# column has one.
def _write_tables(group: h5py.Group, tables: Mapping[str, Table]) -> None:
    if not tables:
        return
    root = group.create_group("tables")
    for name, table in tables.items():
        _check_name(name, "table")
        sub = root.create_group(name)
        sub.attrs["description"] = table.description
        sub.attrs["column_order"] = json.dumps(list(table.columns))
        for col, values in table.columns.items():
            _check_name(col, "table column")
            ds = sub.create_dataset(col, data=_storable(np.asarray(values), col))
            if col in table.units:
                ds.attrs["unit"] = table.units[col]


def _read_tables(group: h5py.Group) -> dict[str, Table]:
    out = {}
    for name, sub in group.get("tables", {}).items():
        order = json.loads(_from_attr(sub.attrs["column_order"]))
        columns = {col: _decoded(sub[col][()]) for col in order}
        units = {col: str(_from_attr(sub[col].attrs["unit"])) for col in order if "unit" in sub[col].attrs}
        out[name] = Table(columns, units, str(_from_attr(sub.attrs.get("description", ""))))
    return out


def _decoded(values: np.ndarray) -> np.ndarray:
    if values.dtype.kind == "O":  # variable-length strings come back as bytes objects
        return np.vectorize(lambda b: b.decode() if isinstance(b, bytes) else b,
                            otypes=[str])(values)
    return values


def read_run_file(path: str | Path) -> RunResult:
    """Read a file written by :func:`write_run_file`."""
    with h5py.File(path, "r") as f:
        return read_run(f)
