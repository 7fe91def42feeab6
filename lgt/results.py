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
    """

    times: np.ndarray
    values: np.ndarray
    unit: str = "dimensionless"

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
    """

    task: str
    parameters: dict[str, Any]
    series: dict[str, TimeSeries] = field(default_factory=dict)
    arrays: dict[str, np.ndarray] = field(default_factory=dict)
    attributes: dict[str, Any] = field(default_factory=dict)
    timings: dict[str, float] = field(default_factory=dict)
    tables: dict[str, "Table"] = field(default_factory=dict)


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
