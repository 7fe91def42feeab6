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
    """

    task: str
    parameters: dict[str, Any]
    series: dict[str, TimeSeries] = field(default_factory=dict)
    arrays: dict[str, np.ndarray] = field(default_factory=dict)
    attributes: dict[str, Any] = field(default_factory=dict)
    timings: dict[str, float] = field(default_factory=dict)
