"""In-memory result of one Fluxline run, the unit that io/sweep write to HDF5."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np


@dataclass
class TimeSeries:
    """An observable sampled at stored times (H5MD layout: step / time / value).

    Attributes
    ----------
    times : (T,) float array
        Times in lattice units (inverse units of the Hamiltonian couplings).
    values : (T, ...) array
        One entry per stored time (per-link / per-site observables add trailing axes).
    unit : str
        Unit convention of ``values`` (e.g. ``"lattice energy"``, ``"dimensionless"``).
    kinds : tuple of str
        Labels of a trailing ``kind`` axis of ``values`` (e.g. ``("raw", "mitigated", ...)``:
        several estimates of one observable); empty when ``values`` has no such axis.
    """

    times: np.ndarray
    values: np.ndarray
    unit: str = "dimensionless"
    kinds: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        self.kinds = tuple(str(k) for k in self.kinds)
        if self.kinds and np.shape(self.values)[-1:] != (len(self.kinds),):
            raise ValueError(f"values of shape {np.shape(self.values)} have no trailing axis of the "
                             f"{len(self.kinds)} kinds {list(self.kinds)}")

    def kind(self, name: str) -> np.ndarray:
        """The values of one kind (the trailing axis removed)."""
        return np.asarray(self.values)[..., self.kinds.index(name)]

    @property
    def steps(self) -> np.ndarray:
        """Integer step index of each stored time."""
        return np.arange(len(self.times), dtype=np.int64)


@dataclass
class RunResult:
    """Everything one run produced.

    Attributes
    ----------
    task : str
        ``"spectrum"``, ``"evolve"``, ``"fit"``, ``"size"``, ...
    parameters : dict
        Resolved configuration sections (plain TOML/JSON-compatible values).
    series : dict[str, TimeSeries]
        Time-resolved observables.
    arrays : dict[str, ndarray]
        Other numeric data (energies, gaps, fitted parameters per step, ...).
    attributes : dict[str, Any]
        Scalar summaries (strings / numbers / bools).
    timings : dict[str, float]
        Wall-clock seconds of the run's phases.
    tables : dict[str, Table]
        Structured result tables (sizing rows, Trotter rows, ...), never JSON strings.
    reference : dict[str, TimeSeries]
        The exact reference of observables in ``series``, at the same times and of the same
        shape (a ``fit`` stores the exact trajectory here); the deviation from it is derived
        on demand by :meth:`reference_error`, never stored.
    """

    task: str
    parameters: dict[str, Any]
    series: dict[str, TimeSeries] = field(default_factory=dict)
    arrays: dict[str, np.ndarray] = field(default_factory=dict)
    attributes: dict[str, Any] = field(default_factory=dict)
    timings: dict[str, float] = field(default_factory=dict)
    tables: dict[str, "Table"] = field(default_factory=dict)
    reference: dict[str, TimeSeries] = field(default_factory=dict)

    def __post_init__(self) -> None:
        for name, ref in self.reference.items():
            own = self.series.get(name)
            if own is None:
                raise ValueError(f"reference {name!r} has no series of that name")
            if np.shape(own.values) != np.shape(ref.values) or not np.allclose(own.times, ref.times):
                raise ValueError(f"reference {name!r} is not at the times / of the shape of its series")

    def reference_error(self, name: str) -> TimeSeries:
        """Per stored time, the largest |series − reference| of observable ``name`` over its
        other axes (links, sites)."""
        return TimeSeries(self.series[name].times,
                          max_deviation(self.series[name].values, self.reference[name].values),
                          self.series[name].unit)


def max_deviation(values: np.ndarray, reference: np.ndarray) -> np.ndarray:
    """(T,) largest |values − reference| at each time over the trailing axes of (T, ...) arrays."""
    err = np.abs(np.asarray(values) - np.asarray(reference))
    return err.reshape(err.shape[0], -1).max(axis=1)


@dataclass
class Table:
    """A structured result table: named columns of equal length (written as one HDF5 group).

    Attributes
    ----------
    columns : dict[str, ndarray]
        Column name → 1-D array (numbers, bools or strings), all of one length.
    units : dict[str, str]
        Unit of a column where it has one (``"us"``, ``"lattice energy"``, ...).
    description : str
        One line saying what a row is.
    """

    columns: dict[str, np.ndarray]
    units: dict[str, str] = field(default_factory=dict)
    description: str = ""

    def __post_init__(self) -> None:
        self.columns = {k: np.asarray(v) for k, v in self.columns.items()}
        lengths = {k: v.shape[0] for k, v in self.columns.items()}
        if len(set(lengths.values())) > 1:
            raise ValueError(f"table columns differ in length: {lengths}")

    def __len__(self) -> int:
        return next(iter(self.columns.values())).shape[0] if self.columns else 0

    def rows(self) -> list[dict[str, Any]]:
        """The table as a list of plain-Python row dicts."""
        names = list(self.columns)
        return [{n: self.columns[n][i].item() for n in names} for i in range(len(self))]
