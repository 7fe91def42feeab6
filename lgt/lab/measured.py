"""Measured outcomes in: the CSV form and the equivalent HDF5 form (``docs/lab.md``).

CSV: a header ``time,count,q0,q1,…,q{K-1}``, then one row per distinct outcome at a stored time —
the time (lattice units, on the configuration's grid t_k = k dt), the number of shots that gave it
(an integer ≥ 0) and the level of each link qudit (0…d−1, level j = L + S). HDF5: datasets
``time`` (R,), ``count`` (R,) and ``levels`` (R, K) in the file's root (or in a group ``outcomes``),
with the same meaning row by row. Every check names the line (CSV) or row (HDF5) and the field.
"""

from __future__ import annotations

import csv
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from lgt.errors import InputError

__all__ = ["Outcomes", "read_measured", "write_csv", "TIME_TOLERANCE"]

#: a measured time matches grid time t_k when |t − t_k| ≤ TIME_TOLERANCE · max(1, |t_k|)
TIME_TOLERANCE = 1e-6


@dataclass
class Outcomes:
    """Counts per stored time: ``steps`` (T,) grid indices, ``counts`` (T, d^K) shots per string."""

    steps: np.ndarray
    counts: np.ndarray


def _grid_step(t: float, dt: float, n_steps: int) -> int | None:
    k = int(round(t / dt))
    if 0 <= k <= n_steps and abs(t - k * dt) <= TIME_TOLERANCE * max(1.0, abs(k * dt)):
        return k
    return None


def _collect(rows, where, n_qudits: int, d: int, dt: float, n_steps: int) -> Outcomes:
    """rows: iterable of (location, time, count, levels); validate and accumulate."""
    weights = d ** np.arange(n_qudits - 1, -1, -1, dtype=np.int64)
    per_step: dict[int, np.ndarray] = {}
    for loc, t, count, levels in rows:
        k = _grid_step(t, dt, n_steps)
        if k is None:
            raise InputError(f"{where} {loc}, field time", f"{t!r} is not on the time grid k*dt, dt = {dt}, "
                             f"k = 0..{n_steps}")
        if count < 0:
            raise InputError(f"{where} {loc}, field count", f"{count!r} is negative")
        for q, lev in enumerate(levels):
            if not 0 <= lev < d:
                raise InputError(f"{where} {loc}, field q{q}", f"level {lev!r} outside 0..{d - 1}")
        if k not in per_step:
            per_step[k] = np.zeros(d ** n_qudits, dtype=np.int64)
        per_step[k][int(np.dot(levels, weights))] += count
    if not per_step:
        raise InputError(where, "holds no outcomes")
    steps = np.array(sorted(per_step), dtype=np.int64)
    return Outcomes(steps, np.stack([per_step[k] for k in steps]))


def _integer(text: str, loc: str, field: str) -> int:
    try:
        value = float(text)
    except ValueError:
        raise InputError(f"{loc}, field {field}", f"{text!r} is not a number") from None
    if not np.isfinite(value) or not value.is_integer():
        raise InputError(f"{loc}, field {field}", f"{text!r} is not an integer")
    return int(value)


def _csv_rows(path: Path, n_qudits: int):
    expected = ["time", "count"] + [f"q{q}" for q in range(n_qudits)]
    with path.open(newline="") as fh:
        reader = csv.reader(fh)
        header = next(reader, None)
        if header is None:
            raise InputError(f"{path} line 1", "empty file; expected header " + ",".join(expected))
        header = [h.strip() for h in header]
        if header != expected:
            n_q = sum(1 for h in header if h.startswith("q"))
            reason = (f"register has {n_qudits} link qudits but the file has {n_q}" if n_q != n_qudits
                      else f"header must be {','.join(expected)}")
            raise InputError(f"{path} line 1, header", reason)
        for row in reader:
            line = reader.line_num
            if not row or all(not c.strip() for c in row):
                continue
            loc = f"line {line}"
            if len(row) != len(expected):
                raise InputError(f"{path} {loc}", f"{len(row)} fields, the header has {len(expected)}")
            try:
                t = float(row[0])
            except ValueError:
                raise InputError(f"{path} {loc}, field time", f"{row[0]!r} is not a number") from None
            count = _integer(row[1].strip(), f"{path} {loc}", "count")
            levels = [_integer(c.strip(), f"{path} {loc}", f"q{q}") for q, c in enumerate(row[2:])]
            yield loc, t, count, levels


def _h5_rows(path: Path, n_qudits: int):
    import h5py

    try:
        f = h5py.File(path, "r")
    except OSError as exc:
        raise InputError(str(path), f"cannot be read as HDF5 ({exc})") from None
    with f:
        g = f["outcomes"] if "outcomes" in f else f
        for name in ("time", "count", "levels"):
            if name not in g:
                raise InputError(f"{path}", f"missing dataset {name!r}")
        times, counts, levels = g["time"][()], g["count"][()], g["levels"][()]
    if levels.ndim != 2 or levels.shape[1] != n_qudits:
        raise InputError(f"{path}, dataset levels", f"shape {levels.shape}; register has {n_qudits} link qudits")
    if not (times.shape == counts.shape == (levels.shape[0],)):
        raise InputError(f"{path}", "datasets time, count and levels must have the same number of rows")
    for r in range(levels.shape[0]):
        loc = f"row {r}"
        c = counts[r]
        if not float(c).is_integer():
            raise InputError(f"{path} {loc}, field count", f"{c!r} is not an integer")
        lv = levels[r]
        for q, x in enumerate(lv):
            if not float(x).is_integer():
                raise InputError(f"{path} {loc}, field q{q}", f"{x!r} is not an integer")
        yield loc, float(times[r]), int(c), [int(x) for x in lv]


def read_measured(path: str | Path, n_qudits: int, d: int, dt: float, n_steps: int) -> Outcomes:
    """Read and validate a measured file (``.h5``/``.hdf5`` as HDF5, anything else as CSV)."""
    path = Path(path)
    if not path.is_file():
        raise InputError(str(path), "file not found")
    rows = _h5_rows(path, n_qudits) if path.suffix.lower() in (".h5", ".hdf5") else _csv_rows(path, n_qudits)
    return _collect(rows, str(path), n_qudits, d, dt, n_steps)


def write_csv(path: str | Path, times: np.ndarray, counts: np.ndarray, n_qudits: int, d: int) -> Path:
    """Write counts (T, d^K) at ``times`` in the CSV form (one row per non-zero outcome)."""
    from lgt.lab.mitigation import register_levels

    levels = register_levels(n_qudits, d)
    with Path(path).open("x", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["time", "count"] + [f"q{q}" for q in range(n_qudits)])
        for t, row in zip(times, counts):
            for code in np.flatnonzero(row):
                w.writerow([repr(float(t)), int(row[code])] + levels[code].tolist())
    return Path(path)
