"""Read a sweep output back: run listing, numpy arrays, xarray Dataset.

Runs finished but not yet merged into the main file (after a kill) are read from the sidecar
``OUT.h5.parts/`` directory too, so nothing complete is ever invisible.
"""

from __future__ import annotations

import json
from contextlib import ExitStack
from pathlib import Path
from typing import Any

import h5py
import numpy as np

from lgt.io import STATUS_COMPLETE, read_run, run_status
from lgt.sweep.store import parts_dir


def _open_runs(stack: ExitStack, path: str | Path) -> tuple[h5py.File, dict[str, tuple[h5py.Group, str]]]:
    """Open the main file and its parts; map run id -> (group, "merged" | "pending")."""
    path = Path(path)
    if not path.exists():
        raise FileNotFoundError(f"no sweep output at {path}")
    main = stack.enter_context(h5py.File(path, "r"))
    if "sweep_config_hash" not in main.attrs:
        raise ValueError(f"{path} is not a Fluxline sweep file")
    runs = {run_id: (g, "merged") for run_id, g in main.get("runs", {}).items()}
    for part in sorted(parts_dir(path).glob("*.h5")):
        try:
            f = stack.enter_context(h5py.File(part, "r"))
        except OSError:
            continue
        if f.attrs.get("sweep_config_hash") != main.attrs["sweep_config_hash"]:
            continue
        for run_id, g in f.get("runs", {}).items():
            if run_id not in runs or run_status(runs[run_id][0]) != STATUS_COMPLETE:
                runs[run_id] = (g, "pending merge")
    return main, runs


def _attr(group: h5py.Group, key: str, default: Any = None) -> Any:
    value = group.attrs.get(key, default)
    if isinstance(value, bytes):
        return value.decode()
    return value.item() if isinstance(value, np.generic) else value


def list_runs(path: str | Path) -> list[dict[str, Any]]:
    """One dict per run: run_id, point, status, assignments, finished_at, wall_seconds,
    worker, error (first line, for failed runs) and storage (merged / pending merge)."""
    with ExitStack() as stack:
        _, runs = _open_runs(stack, path)
        rows = []
        for run_id, (g, storage) in runs.items():
            error = _attr(g, "error")
            rows.append({
                "run_id": run_id, "point": _attr(g, "sweep_point", -1),
                "status": run_status(g),
                "assignments": json.loads(_attr(g, "sweep_assignments", "{}")),
                "finished_at": _attr(g, "finished_at"), "wall_seconds": _attr(g, "wall_seconds"),
                "worker": _attr(g, "worker"), "storage": storage,
                "error": error.splitlines()[0] if error else None,
            })
    return sorted(rows, key=lambda r: r["point"])


def sweep_info(path: str | Path) -> dict[str, Any]:
    """File-level description: task, point count, grid and zip axes, config hash."""
    with h5py.File(path, "r") as f:
        a = f.attrs
        return {"task": str(a["sweep_task"]), "points": int(a["sweep_points"]),
                "grid": dict(json.loads(a["sweep_grid"])), "zip": dict(json.loads(a["sweep_zip"])),
                "config_hash": str(a["sweep_config_hash"])}


def load_sweep(path: str | Path) -> dict[str, np.ndarray]:
    """Complete runs of a sweep as numpy arrays, one entry per run along axis 0 (point order).

    Keys: ``run_id``, ``point``; each swept dotted key (``"model.mass"``); each stored array
    (``"energies"``); each observable's values (``"<name>"``) and times (``"<name>/time"``);
    each scalar result attribute (``"dimension"``; ``"attr.<name>"`` if the name is taken).
    Entries whose shapes differ between runs become object arrays.
    """
    info = sweep_info(path)
    axes = list(info["grid"]) + list(info["zip"])
    with ExitStack() as stack:
        _, runs = _open_runs(stack, path)
        complete = sorted(((_attr(g, "sweep_point", -1), run_id, g) for run_id, (g, _) in runs.items()
                           if run_status(g) == STATUS_COMPLETE), key=lambda t: t[0])
        columns: dict[str, list[Any]] = {"run_id": [], "point": []}
        for key in axes:
            columns[key] = []
        for point, run_id, g in complete:
            result = read_run(g)
            assignments = json.loads(_attr(g, "sweep_assignments", "{}"))
            columns["run_id"].append(run_id)
            columns["point"].append(point)
            for key in axes:
                columns[key].append(assignments.get(key))
            entries: dict[str, Any] = dict(result.arrays)
            for name, series in result.series.items():
                entries[name] = series.values
                entries[f"{name}/time"] = series.times
            for name, value in result.attributes.items():
                entries[name if name not in entries and name not in axes else f"attr.{name}"] = value
            for name, value in entries.items():
                columns.setdefault(name, []).append(value)
    return {key: _stack(values) for key, values in columns.items()}


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
    """The sweep as an ``xarray.Dataset``.

    A complete sweep gets one dimension per grid axis plus a ``zip`` dimension (zipped keys
    are coordinates along it); an incomplete one keeps the runs along a ``run`` dimension
    with the swept keys as coordinates.
    """
    import xarray as xr

    info = sweep_info(path)
    data = load_sweep(path)
    n = len(data["run_id"])
    axes = list(info["grid"]) + list(info["zip"])
    coords = {key: ("run", _coordinate(data[key])) for key in ["run_id", "point", *axes]}
    variables = {}
    for name, values in data.items():
        if name in coords or values.dtype == object:
            continue
        dims = ("run",) + tuple(f"{name}_dim{i}" for i in range(1, values.ndim))
        variables[name] = (dims, values)
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
