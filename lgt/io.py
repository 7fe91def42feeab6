"""HDF5 results layer: one :class:`~lgt.results.RunResult` per HDF5 group.

Layout (documented in ``docs/hdf5_layout.md``, versioned by :data:`LAYOUT_VERSION`):

* file root: H5MD 1.1 metadata group ``/h5md`` (``version`` = [1, 1], ``author/name``,
  ``creator/name``, ``creator/version``) and the attribute ``fluxline_layout``;
* run group: attributes (task, status, program version, units convention, parameters as JSON
  plus flattened ``param.<section>.<key>`` copies, ``timing.<phase>``, ``result.<name>``),
  ``observables/<name>/{step,time,value}`` H5MD time series (``value`` carries a ``kinds``
  attribute when its trailing axis labels estimates), ``reference/<name>/{step,time,value}``
  the exact reference of observables, ``arrays/<name>`` datasets and
  ``tables/<name>/<column>`` structured tables; attribute values too large for an HDF5
  attribute are datasets ``large_attributes/<attribute name>``.

No pickles: every value is a plain HDF5 dataset or attribute. Result datasets carry the
``fletcher32`` checksum filter. Every reader checks the layout version
(:func:`check_layout`). File safety (atomic replacement, output checks) lives in
:mod:`lgt.files`; configuration hashing in :mod:`lgt.hashing`.
"""

from __future__ import annotations

import getpass
import json
from pathlib import Path
from typing import Any, Mapping

import h5py
import numpy as np

import lgt
from lgt import files as _files
from lgt.errors import InputError
from lgt.hashing import canonical_json, flatten, plain
from lgt.results import RunResult, Table, TimeSeries

# Re-exported for other modules: file safety lives in lgt.files.
atomic_h5 = _files.atomic_h5
check_output_path = _files.check_output_path

#: Version of the Fluxline HDF5 layout described in docs/hdf5_layout.md.
LAYOUT_VERSION = 3
#: Layout versions this reader understands (2 adds tables, large attributes, checksums; 3 the
#: ``reference`` group and ``kinds`` axes).
READABLE_LAYOUTS = (1, 2, 3)
#: H5MD specification version the files follow (H5MD 1.1, section "H5MD metadata").
H5MD_VERSION = (1, 1)
#: Units convention stored on every run.
UNITS = ("lattice units: energies in units of the Hamiltonian couplings, "
         "times in their inverse")
#: Run status values.
STATUS_WRITING = "writing"
STATUS_COMPLETE = "complete"
#: Attribute values longer than this (bytes) are stored as datasets (HDF5 limit: 64 KiB).
MAX_ATTRIBUTE_BYTES = 16384
#: Group holding attribute values too large for an attribute.
LARGE = "large_attributes"

_PARAM = "param."
_TIMING = "timing."
_RESULT = "result."
#: Errors h5py / numpy / json raise on damaged content (turned into InputError).
DAMAGE = (OSError, KeyError, ValueError, TypeError, RuntimeError, UnicodeDecodeError,
          AttributeError, IndexError)


# ---------------------------------------------------------------------------------- attributes
def _attr_value(value: Any) -> Any:
    """An HDF5-storable form of a plain value (JSON text for anything not scalar/uniform)."""
    value = plain(value)
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


def set_attr(obj: h5py.Group, key: str, value: Any) -> None:
    """Store ``value`` as attribute ``key``, or as dataset ``large_attributes/<key>`` if large."""
    stored = _attr_value(value)
    size = len(stored.encode()) if isinstance(stored, str) else np.asarray(stored).nbytes
    if size <= MAX_ATTRIBUTE_BYTES:
        obj.attrs[key] = stored
        return
    if key in obj.attrs:
        del obj.attrs[key]
    large = obj.require_group(LARGE)
    if key in large:
        del large[key]
    if isinstance(stored, str):
        large.create_dataset(key, data=stored, dtype=h5py.string_dtype())
    else:
        _create_dataset(large, key, stored)


def get_attr(obj: h5py.Group, key: str, default: Any = None) -> Any:
    """Attribute ``key`` written by :func:`set_attr` (plain Python value), else ``default``."""
    if key in obj.attrs:
        return _from_attr(obj.attrs[key])
    large = obj.get(LARGE)
    if large is not None and key in large:
        return _from_attr(large[key][()])
    return default


def _all_attrs(obj: h5py.Group) -> dict[str, Any]:
    values = {k: _from_attr(v) for k, v in obj.attrs.items()}
    large = obj.get(LARGE)
    if large is not None:
        values.update({k: _from_attr(ds[()]) for k, ds in large.items()})
    return values


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


def check_layout(f: h5py.File, what: str | None = None) -> int:
    """The file's layout version; refuse a file without one or with an unknown one.

    Raises
    ------
    InputError
        Naming the file: no ``fluxline_layout`` attribute, or a version not in
        :data:`READABLE_LAYOUTS` (written by a newer Fluxline, or damaged).
    """
    what = what or f.filename
    try:
        version = f.attrs.get("fluxline_layout")
    except DAMAGE as exc:
        raise InputError(what, f"is damaged (root attributes unreadable: {exc})") from None
    if version is None:
        raise InputError(what, "is not a Fluxline file (no fluxline_layout attribute)")
    try:
        version = int(np.asarray(version).item())
    except (TypeError, ValueError):
        raise InputError(what, f"has an invalid layout version {version!r}") from None
    if version not in READABLE_LAYOUTS:
        readable = ", ".join(map(str, READABLE_LAYOUTS))
        raise InputError(what, f"has layout version {version}; this Fluxline reads layout "
                               f"{readable} (written by a newer Fluxline, or damaged)")
    return version


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
    set_attr(group, "parameters", canonical_json(result.parameters))
    for key, value in flatten(result.parameters):
        set_attr(group, _PARAM + key, value)
    for key, value in result.timings.items():
        attrs[_TIMING + key] = float(value)
    for key, value in result.attributes.items():
        set_attr(group, _RESULT + key, value)
    for key, value in (extra_attrs or {}).items():
        set_attr(group, key, value)
    for where, collection in (("observables", result.series), ("reference", result.reference)):
        if collection or where == "observables":
            sub = group.create_group(where)
            for name, series in collection.items():
                _check_name(name, "observable")
                _write_series(sub.create_group(name), series)
    arrays = group.create_group("arrays")
    for name, array in result.arrays.items():
        _check_name(name, "array")
        _create_dataset(arrays, name, _storable(np.asarray(array), name))
    if result.tables:
        tables = group.create_group("tables")
        for name, table in result.tables.items():
            _check_name(name, "table")
            _write_table(tables.create_group(name), table)
    group.file.flush()
    attrs["status"] = STATUS_COMPLETE
    group.file.flush()


def _storable(array: np.ndarray, name: str) -> np.ndarray:
    if array.dtype.kind == "O":
        raise TypeError(f"array {name!r} has dtype object; store numbers or strings only")
    if array.dtype.kind == "U":
        return array.astype(h5py.string_dtype())
    return array


def _create_dataset(group: h5py.Group, name: str, data: np.ndarray) -> h5py.Dataset:
    """A dataset with the fletcher32 checksum filter wherever HDF5 allows one (non-empty
    numeric arrays; scalars and strings are stored without)."""
    data = np.asarray(data) if not isinstance(data, np.ndarray) else data
    checksum = data.ndim > 0 and data.size > 0 and data.dtype.kind in "biufc"
    return group.create_dataset(name, data=data, fletcher32=checksum or None)


def _write_series(group: h5py.Group, series: TimeSeries) -> None:
    """H5MD time-dependent data group: ``step`` [T], ``time`` [T], ``value`` [T][...]."""
    times = np.asarray(series.times, dtype=np.float64)
    values = np.asarray(series.values)
    if values.shape[:1] != times.shape:
        raise ValueError(f"observable values of shape {values.shape} do not match "
                         f"{times.shape[0]} stored times")
    _create_dataset(group, "step", np.asarray(series.steps, dtype=np.int64))
    _create_dataset(group, "time", times).attrs["unit"] = "lattice time"
    value = _create_dataset(group, "value", _storable(values, "value"))
    value.attrs["unit"] = series.unit
    if series.kinds:
        value.attrs["kinds"] = np.array(series.kinds, dtype=h5py.string_dtype())


def _write_table(group: h5py.Group, table: Table) -> None:
    """One dataset per column (``unit`` attribute where given); column order in ``columns``."""
    group.attrs["description"] = table.description
    group.attrs["columns"] = json.dumps(list(table.columns))
    for name, column in table.columns.items():
        _check_name(name, "table column")
        ds = _create_dataset(group, name, _storable(column, name))
        if name in table.units:
            ds.attrs["unit"] = table.units[name]


def write_run_file(path: str | Path, result: RunResult,
                   root_attrs: Mapping[str, Any] | None = None) -> Path:
    """Write one run as a whole HDF5 file (H5MD root + run at ``/``), atomically.

    See :func:`lgt.files.atomic_h5`: readers see the old file or the new one, never a partial
    one; a full disk raises :class:`~lgt.errors.ResourceError` and keeps the old file.
    """
    with atomic_h5(path) as f:
        write_h5md_root(f)
        for key, value in (root_attrs or {}).items():
            set_attr(f, key, value)
        write_run_group(f, result)
    return Path(path)


# ---------------------------------------------------------------------------------- read
def run_status(group: h5py.Group) -> str:
    """Status attribute of a run group (``"missing"`` when absent)."""
    return str(_from_attr(group.attrs.get("status", "missing")))


def read_run(group: h5py.Group) -> RunResult:
    """Read a run group (or a single-run file's root) back into a :class:`RunResult`."""
    attrs = _all_attrs(group)
    if "parameters" not in attrs or "task" not in attrs:
        raise ValueError(f"HDF5 group {group.name!r} is not a Fluxline run")
    timings: dict[str, float] = {}
    attributes: dict[str, Any] = {}
    for key, value in attrs.items():
        if key.startswith(_TIMING):
            timings[key[len(_TIMING):]] = float(value)
        elif key.startswith(_RESULT):
            attributes[key[len(_RESULT):]] = value
    series = {name: _read_series(sub) for name, sub in group.get("observables", {}).items()}
    reference = {name: _read_series(sub) for name, sub in group.get("reference", {}).items()}
    if "reference" not in group and str(attrs["task"]) == "fit":
        reference = _legacy_fit_reference(series)
    arrays = {name: _decoded(ds[()]) for name, ds in group.get("arrays", {}).items()}
    tables = {name: _read_table(sub) for name, sub in group.get("tables", {}).items()}
    return RunResult(task=str(attrs["task"]), parameters=json.loads(attrs["parameters"]),
                     series=series, arrays=arrays, attributes=attributes, timings=timings,
                     tables=tables, reference=reference)


def _read_series(group: h5py.Group) -> TimeSeries:
    value = group["value"]
    kinds = [_from_attr(k) for k in value.attrs["kinds"]] if "kinds" in value.attrs else []
    return TimeSeries(times=group["time"][()], values=_decoded(value[()]),
                      unit=str(_from_attr(value.attrs.get("unit", ""))), kinds=tuple(kinds))


#: Layout 1–2 fit runs stored the reference as series ``exact_<name>`` (and ``error_<name>``).
_LEGACY_EXACT, _LEGACY_ERROR = "exact_", "error_"


def _legacy_fit_reference(series: dict[str, TimeSeries]) -> dict[str, TimeSeries]:
    """Move a layout 1–2 fit run's ``exact_<name>`` series into its reference (in place) and drop
    the stored ``error_<name>`` copies (derived on demand now). The only place old names are read."""
    legacy = [n for n in series if n.startswith(_LEGACY_EXACT) and n[len(_LEGACY_EXACT):] in series]
    reference = {n[len(_LEGACY_EXACT):]: series.pop(n) for n in legacy}
    for name in reference:
        series.pop(_LEGACY_ERROR + name, None)
    return reference


def _read_table(group: h5py.Group) -> Table:
    names = json.loads(_from_attr(group.attrs["columns"]))
    columns = {n: _decoded(group[n][()]) for n in names}
    units = {n: str(_from_attr(group[n].attrs["unit"])) for n in names if "unit" in group[n].attrs}
    return Table(columns, units, str(_from_attr(group.attrs.get("description", ""))))


def _decoded(values: np.ndarray) -> np.ndarray:
    if values.dtype.kind == "O":  # variable-length strings come back as bytes objects
        return np.vectorize(lambda b: b.decode() if isinstance(b, bytes) else b,
                            otypes=[str])(values)
    return values


def check_run(group: h5py.Group, read_data: bool = False) -> str | None:
    """Why the run group is unreadable (``None`` if it reads): every attribute, the parameters
    and every dataset's header are read; with ``read_data`` every dataset's values too (which
    verifies the fletcher32 checksums)."""
    try:
        attrs = _all_attrs(group)
        json.loads(attrs.get("parameters", "{}"))
        problems: list[str] = []

        def visit(name: str, obj: Any) -> None:
            if isinstance(obj, h5py.Dataset) and not problems:
                try:
                    _ = obj.shape, obj.dtype, dict(obj.attrs)
                    if read_data:
                        obj[()]
                except DAMAGE as exc:
                    problems.append(f"dataset {name}: {_first_line(exc)}")
        group.visititems(visit)
        return problems[0] if problems else None
    except DAMAGE as exc:
        return _first_line(exc)


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()
    return f"{type(exc).__name__}: {text[0] if text else ''}"


def open_result_file(path: str | Path) -> h5py.File:
    """Open a Fluxline HDF5 file for reading, with a named error if it is missing, not HDF5,
    damaged or of an unknown layout version."""
    path = Path(path)
    if path.is_dir():
        raise InputError(str(path), "is a directory, not an HDF5 file")
    if not path.exists():
        raise InputError(str(path), "does not exist")
    try:
        f = h5py.File(path, "r")
    except DAMAGE as exc:
        raise InputError(str(path), f"cannot be opened as HDF5 ({_first_line(exc)})") from None
    try:
        check_layout(f, str(path))
    except BaseException:
        f.close()
        raise
    return f


def read_run_file(path: str | Path) -> RunResult:
    """Read a file written by :func:`write_run_file` (named InputError if damaged)."""
    with open_result_file(path) as f:
        try:
            return read_run(f)
        except DAMAGE as exc:
            raise InputError(str(path), f"is damaged or not a single-run file "
                                        f"({_first_line(exc)})") from None
