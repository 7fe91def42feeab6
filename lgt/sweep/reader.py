"""Read a sweep output back: run listing, numpy arrays, xarray Dataset.

Runs finished but not yet merged into the main file (after a kill) are read from the sidecar
``OUT.h5.parts/`` directory too, so nothing complete is ever invisible.
"""

from __future__ import annotations

import json
import warnings
from contextlib import ExitStack
from pathlib import Path
from typing import Any, Iterator

import h5py
import numpy as np

from lgt.errors import InputError
from lgt.io import (DAMAGE, STATUS_COMPLETE, check_layout, check_run, get_attr, open_result_file,
                    read_run, run_status)
from lgt.sweep.store import full_check_by_default, parts_dir

#: Status shown for a run marked complete whose data cannot be read.
STATUS_CORRUPT = "corrupt"


def _open_runs(stack: ExitStack, path: str | Path) -> tuple[h5py.File, dict[str, tuple[h5py.Group, str]]]:
    """Open the main file and its parts; map run id -> (group, "merged" | "pending")."""
    path = Path(path)
    main = stack.enter_context(open_result_file(path))
    try:
        if "sweep_config_hash" not in main.attrs:
            raise InputError(str(path), "is not a Fluxline sweep file")
        runs = {run_id: (g, "merged") for run_id, g in main["runs"].items()}
    except DAMAGE as exc:
        raise InputError(str(path), f"is damaged: the run index cannot be read ({exc})") from None
    for part in sorted(parts_dir(path).glob("*.h5")):
        try:
            f = stack.enter_context(h5py.File(part, "r"))
            check_layout(f)
            if f.attrs.get("sweep_config_hash") != main.attrs["sweep_config_hash"]:
                continue
            items = list(f.get("runs", {}).items())
        except (InputError, *DAMAGE):
            continue  # a damaged part is set aside (and its run redone) by the next sweep
        for run_id, g in items:
            if run_id not in runs or not _complete(runs[run_id][0]):
                runs[run_id] = (g, "pending merge")
    return main, runs


def _complete(group: h5py.Group) -> bool:
    try:
        return run_status(group) == STATUS_COMPLETE
    except DAMAGE:
        return False


def _attr(group: h5py.Group, key: str, default: Any = None) -> Any:
    try:
        return get_attr(group, key, default)
    except DAMAGE:
        return default


def list_runs(path: str | Path, verify: bool | None = None) -> list[dict[str, Any]]:
    """One dict per run: run_id, point, status, assignments, finished_at, wall_seconds,
    worker, error (first line, for failed and corrupt runs) and storage (merged / pending
    merge).

    A run is listed ``complete`` only if its attributes and dataset headers read and, with
    ``verify``, every dataset reads in full as well (checking the fletcher32 checksums);
    otherwise its status is ``corrupt`` and ``error`` says what failed. ``verify=None`` reads
    everything for files up to ``lgt.sweep.store.AUTO_VERIFY_BYTES`` (256 MiB; so a small sweep is never listed
    complete with unreadable data), only the structure above.
    """
    if verify is None:
        verify = full_check_by_default(path)
    with ExitStack() as stack:
        _, runs = _open_runs(stack, path)
        rows = []
        for run_id, (g, storage) in runs.items():
            problem = check_run(g, read_data=verify)
            error = _attr(g, "error") if problem is None else problem
            try:
                assignments = json.loads(_attr(g, "sweep_assignments", "{}"))
            except ValueError:
                assignments = {}
            rows.append({
                "run_id": run_id, "point": _int(_attr(g, "sweep_point", -1)),
                "status": STATUS_CORRUPT if problem else run_status(g),
                "assignments": assignments,
                "finished_at": _attr(g, "finished_at"), "wall_seconds": _attr(g, "wall_seconds"),
                "worker": _attr(g, "worker"), "storage": storage,
                "error": str(error).splitlines()[0] if error else None,
            })
    return sorted(rows, key=lambda r: r["point"])


def _int(value: Any) -> int:
    try:
        return int(value)
    except (TypeError, ValueError):
        return -1


def sweep_info(path: str | Path) -> dict[str, Any]:
    """File-level description: task, point count, grid and zip axes, config hash."""
    with open_result_file(path) as f:
        try:
            return {"task": str(get_attr(f, "sweep_task")), "points": int(get_attr(f, "sweep_points")),
                    "grid": dict(json.loads(get_attr(f, "sweep_grid"))),
                    "zip": dict(json.loads(get_attr(f, "sweep_zip"))),
                    "config_hash": str(get_attr(f, "sweep_config_hash"))}
        except DAMAGE as exc:
            raise InputError(str(path), f"is not a readable Fluxline sweep file ({exc})") from None


#: Axis names and units of the arrays the built-in tasks store (other arrays get
#: ``<name>_index`` axes).
ARRAY_AXES = {"energies": ("level",), "gaps": ("level",), "field_values": ("field_level",)}
ARRAY_UNITS = {"energies": "lattice energy", "gaps": "lattice energy"}
#: Unit of stored times.
TIME_UNIT = "lattice time"
#: Labels of the ``source`` axis of an observable that has an exact reference.
SOURCES = ("result", "reference")


def load_sweep(path: str | Path) -> dict[str, np.ndarray]:
    """Complete runs of a sweep as numpy arrays, one entry per run along axis 0 (point order).

    Keys: ``run_id``, ``point``; each swept dotted key (``"model.mass"``); each stored array
    (``"energies"``); each observable's values (``"<name>"``) and times (``"<name>/time"``);
    each table column (``"<table>.<column>"``); each scalar result attribute (``"dimension"``;
    ``"attr.<name>"`` if the name is taken). Entries whose shapes differ between runs become
    object arrays. A run whose data cannot be read is left out with a warning.
    """
    return {key: _stack(values) for key, values in _collect(path)[0].items()}


def _collect(path: str | Path) -> tuple[dict[str, list[Any]], dict[str, tuple[tuple[str, ...], dict]]]:
    """Columns of :func:`load_sweep` (as lists) and, per entry, the names of its axes after
    the run axis and its attributes (units, description)."""
    info = sweep_info(path)
    axes = list(info["grid"]) + list(info["zip"])
    meta: dict[str, tuple[tuple[str, ...], dict]] = {}
    with ExitStack() as stack:
        _, runs = _open_runs(stack, path)
        complete = sorted(((_int(_attr(g, "sweep_point", -1)), run_id, g)
                           for run_id, (g, _) in runs.items() if _complete(g)),
                          key=lambda t: t[0])
        columns: dict[str, list[Any]] = {"run_id": [], "point": []}
        for key in axes:
            columns[key] = []
        for point, run_id, g in complete:
            try:
                result = read_run(g)
                assignments = json.loads(_attr(g, "sweep_assignments", "{}"))
            except DAMAGE as exc:
                warnings.warn(f"{path}: run {run_id} cannot be read ({exc}); left out "
                              "(fluxline runs --verify lists damaged runs)", stacklevel=3)
                continue
            columns["run_id"].append(run_id)
            columns["point"].append(point)
            for key in axes:
                columns[key].append(assignments.get(key))
            for name, value, dims, attrs in _entries(result, axes):
                columns.setdefault(name, []).append(value)
                meta.setdefault(name, (dims, attrs))
    return columns, meta


def _entries(result: Any, axes: list[str]) -> Iterator[tuple[str, Any, tuple[str, ...], dict]]:
    """``(name, value, axis names, attributes)`` of everything one run stored."""
    model = result.parameters.get("model", {})
    sites = model.get("sites") if isinstance(model, dict) else None
    taken: set[str] = set()
    for name, array in result.arrays.items():
        array = np.asarray(array)
        dims = ARRAY_AXES.get(name) or _generic_axes(name, array.ndim)
        attrs = {"units": ARRAY_UNITS[name]} if name in ARRAY_UNITS else {}
        taken.add(name)
        yield name, array, dims[:array.ndim], attrs
    for name, series in result.series.items():
        values = np.asarray(series.values)
        taken.update((name, f"{name}/time"))
        lattice = values.shape[1:len(values.shape) - (1 if series.kinds else 0)]
        dims = ("time", *_lattice_axes(name, lattice, sites), *(("kind",) if series.kinds else ()))
        attrs = {"units": series.unit, **({"kinds": list(series.kinds)} if series.kinds else {})}
        if name in result.reference:  # a leading source axis: the result, then its exact reference
            values = np.stack([values, np.asarray(result.reference[name].values)])
            dims, attrs = ("source", *dims), {**attrs, "sources": list(SOURCES)}
        yield name, values, dims, attrs
        yield f"{name}/time", np.asarray(series.times), ("time",), {"units": TIME_UNIT}
    for table_name, table in result.tables.items():
        for column, values in table.columns.items():
            name = f"{table_name}.{column}"
            taken.add(name)
            attrs = {"description": table.description}
            if column in table.units:
                attrs["units"] = table.units[column]
            yield name, values, (f"{table_name}_row",), attrs
    for name, value in result.attributes.items():
        key = name if name not in taken and name not in axes else f"attr.{name}"
        yield key, value, (), {}


def _lattice_axes(name: str, shape: tuple[int, ...], sites: Any) -> tuple[str, ...]:
    """Per-site axes are ``site`` (then ``site_2``), per-link ones ``link``; others
    ``<name>_index``."""
    dims: list[str] = []
    for i, n in enumerate(shape):
        base = ("site" if isinstance(sites, int) and n == sites else
                "link" if isinstance(sites, int) and n == sites - 1 else f"{name}_index")
        dim, k = base, 2
        while dim in dims:
            dim, k = f"{base}_{k}", k + 1
        dims.append(dim)
    return tuple(dims)


def _generic_axes(name: str, ndim: int) -> tuple[str, ...]:
    return tuple(f"{name}_index" if i == 0 else f"{name}_index_{i + 1}" for i in range(ndim))


def _stack(values: list[Any]) -> np.ndarray:
    arrays = [np.asarray(v) for v in values]
    if arrays and all(a.shape == arrays[0].shape and a.dtype.kind != "O" for a in arrays):
        return np.stack(arrays)
    out = np.empty(len(values), dtype=object)
    out[:] = [a if a.ndim else a.item() for a in arrays]
    return out


def _coordinate(values: np.ndarray) -> np.ndarray:
    """1-D coordinate values; list-valued axis entries become their JSON text."""
    if values.ndim == 1 and values.dtype != object:
        return values
    return np.array([json.dumps(np.asarray(v).tolist()) for v in values])


def to_xarray(path: str | Path) -> Any:
    """The sweep as an ``xarray.Dataset`` with named dimensions, coordinates and units.

    A complete sweep gets one dimension per grid axis plus a ``zip`` dimension (zipped keys
    are coordinates along it); an incomplete one keeps the runs along a ``run`` dimension with
    the swept keys as coordinates. Observables have a ``time`` dimension (a coordinate when
    every run stored the same times; otherwise ``<name>/time`` variables) and ``site`` /
    ``link`` axes, a ``source`` axis (coordinate ``result`` / ``reference``) when the runs stored
    an exact reference of it, a ``kind`` axis (coordinate: the estimate labels) when its values
    carry kinds; spectra a ``level`` axis; table columns ``<table>.<column>`` a ``<table>_row``
    axis. ``attrs["units"]`` carries each variable's unit.
    """
    import xarray as xr

    info = sweep_info(path)
    columns, meta = _collect(path)
    data = {key: _stack(values) for key, values in columns.items()}
    n = len(data["run_id"])
    axes = list(info["grid"]) + list(info["zip"])
    coords: dict[str, Any] = {key: ("run", _coordinate(data[key]))
                              for key in ["run_id", "point", *axes]}
    times = [data[k] for k in data if k.endswith("/time") and data[k].dtype != object]
    shared_time = (n > 0 and bool(times) and len(times) == sum(k.endswith("/time") for k in data)
                   and all(t.shape == times[0].shape and np.array_equal(t, times[0][:1].repeat(n, 0))
                           for t in times))
    if shared_time:
        coords["time"] = xr.Variable(("time",), times[0][0], attrs={"units": TIME_UNIT})
    variables = {}
    for name, values in data.items():
        if name in coords or values.dtype == object or (shared_time and name.endswith("/time")):
            continue
        dims, attrs = meta.get(name, ((), {}))
        attrs = dict(attrs)
        for dim, key in (("source", "sources"), ("kind", "kinds")):
            if key in attrs:
                labels = np.asarray(attrs.pop(key))
                if dim in coords and not np.array_equal(coords[dim].values, labels):
                    dims = tuple(f"{name}_{dim}" if d == dim else d for d in dims)
                    attrs[key] = labels.tolist()
                else:
                    coords[dim] = xr.Variable((dim,), labels)
        variables[name] = xr.Variable(("run", *dims[:values.ndim - 1]), values, attrs=attrs)
    ds = xr.Dataset(variables, coords=coords)
    if n == info["points"] and (info["grid"] or info["zip"]):
        ds = _gridded(ds, info)
    return ds


def _gridded(ds: Any, info: dict[str, Any]) -> Any:
    """Reshape the ``run`` dimension into one dimension per grid axis (+ ``zip``)."""
    index = list(info["grid"])
    zipped = info["zip"]
    if zipped:
        n_zip = len(next(iter(zipped.values())))
        ds = ds.drop_vars(list(zipped)).assign_coords(zip=("run", ds["point"].values % n_zip))
        index.append("zip")
    ds = ds.drop_vars(["run_id", "point"])
    if len(index) == 1:
        ds = ds.swap_dims({"run": index[0]})
    else:
        ds = ds.set_index(run=index).unstack("run").transpose(*index, ...)
    if zipped:
        ds = ds.assign_coords({key: ("zip", _coordinate(_stack(values)))
                               for key, values in zipped.items()})
    return ds
