"""Expand a ``[sweep]`` configuration into validated run points.

``[sweep]`` keys: ``task`` (a registered task name), ``[sweep.grid]`` (dotted key -> list of
values; cartesian product) and ``[sweep.zip]`` (dotted key -> equal-length lists advancing
together; the zip index is the innermost axis of the product with the grid). Every point is
validated by the task's validator before anything runs.
"""

from __future__ import annotations

import copy
import itertools
from dataclasses import dataclass, field
from typing import Any, Mapping

from lgt import hashing
from lgt.config import as_choice, check_keys, with_folder
from lgt.errors import ConfigError, ResourceError
from lgt.io import canonical_json, flatten
from lgt.resolved import ResolvedConfig
from lgt.tasks import Task, get_task, known_sections, task_names

SWEEP_KEYS = ("task", "grid", "zip")
#: Sections a sweep axis may address (every section some task reads).
SWEEPABLE = known_sections()
#: Most points one sweep may expand to (checked before expanding).
MAX_POINTS = 1_000_000
#: Length of the hexadecimal run identifiers.
ID_LENGTH = 16


@dataclass(frozen=True)
class SweepPoint:
    """One run of a sweep.

    Attributes
    ----------
    index : int
        Position in the expansion order (grid product outer, zip innermost).
    assignments : dict
        Swept dotted key -> value at this point.
    config : dict
        Plain form (``to_dict()``) of the resolved configuration returned by the task validator.
    run_id : str
        Stable hash of task and resolved configuration; names the HDF5 group.
    """

    index: int
    assignments: dict[str, Any]
    config: dict[str, Any]
    run_id: str


@dataclass(frozen=True)
class SweepPlan:
    """All points of a sweep and the identity of its configuration."""

    task: str
    grid: dict[str, list]
    zip: dict[str, list]
    points: list[SweepPoint] = field(repr=False)
    config_hash: str
    config_json: str = field(repr=False)

    @property
    def axes(self) -> tuple[str, ...]:
        """Swept dotted keys (grid first, then zip)."""
        return tuple(self.grid) + tuple(self.zip)


def digest(text: str, length: int = ID_LENGTH) -> str:
    """Truncated hexadecimal sha256 of ``text`` (run ids: :data:`ID_LENGTH` hex digits)."""
    return hashing.digest(text, length)


def run_identity(task: str, resolved: Mapping[str, Any]) -> str:
    """Stable run id: hash of the canonical JSON of task name and resolved config."""
    return digest(canonical_json({"task": task, "config": resolved}))


def expand_sweep(config: Mapping[str, Any]) -> SweepPlan:
    """Expand and validate every point of ``config["sweep"]``.

    Raises
    ------
    ConfigError
        Naming the key (and the point, for a value the task rejects) on a malformed section,
        unknown task, unknown section, empty axis, zip length mismatch, an invalid value at any
        point, or two points that resolve to the same run.
    """
    sweep = config.get("sweep")
    if not isinstance(sweep, Mapping):
        raise ConfigError("sweep", sweep, "a [sweep] table is required")
    check_keys(sweep, SWEEP_KEYS, "sweep")
    if "task" not in sweep:
        raise ConfigError("sweep.task", None, f"is required (one of {', '.join(task_names())})")
    task = get_task(as_choice(sweep["task"], "sweep.task", task_names()), "sweep.task")
    grid = _axes(sweep.get("grid", {}), "grid", task)
    zipped = _axes(sweep.get("zip", {}), "zip", task)
    for key in set(grid) & set(zipped):
        raise ConfigError(f'sweep.zip."{key}"', zipped[key], "is also a grid axis")
    lengths = {key: len(values) for key, values in zipped.items()}
    if len(set(lengths.values())) > 1:
        first = next(iter(lengths))
        for key, n in lengths.items():
            if n != lengths[first]:
                raise ConfigError(f'sweep.zip."{key}"', zipped[key],
                                  f"has {n} values but sweep.zip.\"{first}\" has {lengths[first]}; "
                                  "zipped lists must have equal lengths")
    n_points = 1
    for values in grid.values():
        n_points *= len(values)
    if n_points * (len(next(iter(zipped.values()))) if zipped else 1) > MAX_POINTS:
        raise ConfigError("sweep.grid", _describe({k: f"{len(v)} values" for k, v in grid.items()}),
                          f"expands to more than {MAX_POINTS:,} points")
    base = with_folder({k: v for k, v in config.items() if k != "sweep"}, getattr(config, "folder", None))
    points = _points(base, task, grid, zipped)
    return SweepPlan(task=task.name, grid=grid, zip=zipped, points=points,
                     config_hash=digest(canonical_json([config, list(grid), list(zipped)]), 64),
                     config_json=canonical_json(config))


def _axes(table: Any, kind: str, task: Task) -> dict[str, list]:
    """Flattened ``dotted key -> values`` of ``[sweep.<kind>]`` with section checks."""
    if not isinstance(table, Mapping):
        raise ConfigError(f"sweep.{kind}", table, "must be a table of dotted keys -> lists")
    axes: dict[str, list] = {}
    for key, values in flatten(table):
        name = f'sweep.{kind}."{key}"'
        section = key.split(".", 1)[0]
        if "." not in key:
            raise ConfigError(name, values, "axis keys are dotted: \"<section>.<key>\", "
                                            "e.g. \"model.mass\"")
        if section not in SWEEPABLE:
            raise ConfigError(name, values, f"unknown section {section!r}; sweepable sections "
                                            f"are {', '.join(SWEEPABLE)}")
        if section not in task.sections:
            raise ConfigError(name, values, f"task {task.name!r} does not read [{section}] "
                                            f"(it reads {', '.join(task.sections)})")
        if not isinstance(values, list):
            raise ConfigError(name, values, "must be a list of values")
        if not values:
            raise ConfigError(name, values, "empty axis: give at least one value")
        axes[key] = values
    return axes


def _points(base: dict, task: Task, grid: dict[str, list], zipped: dict[str, list]) -> list[SweepPoint]:
    """Every point of grid × zip, validated, with duplicate detection."""
    n_zip = len(next(iter(zipped.values()))) if zipped else 1
    points: list[SweepPoint] = []
    seen: dict[str, int] = {}
    combos = itertools.product(*grid.values()) if grid else [()]
    for combo in combos:
        for z in range(n_zip):
            assignments = dict(zip(grid, combo))
            assignments.update({key: values[z] for key, values in zipped.items()})
            index = len(points)
            resolved = _validated(base, task, assignments, index, grid)
            run_id = run_identity(task.name, resolved)
            if run_id in seen:
                raise ConfigError("sweep", _describe(assignments),
                                  f"point {index} resolves to the same run as point "
                                  f"{seen[run_id]}; an axis changes nothing the task "
                                  f"{task.name!r} reads")
            seen[run_id] = index
            points.append(SweepPoint(index, assignments, resolved, run_id))
    return points


def _validated(base: dict, task: Task, assignments: dict[str, Any], index: int,
               grid: Mapping[str, list]) -> dict[str, Any]:
    config = copy.deepcopy(base)
    for key, value in assignments.items():
        _assign(config, key, copy.deepcopy(value))
    try:
        resolved = task.validate(config)
        return resolved.to_dict() if isinstance(resolved, ResolvedConfig) else dict(resolved)
    except ConfigError as exc:
        where = f"point {index} ({_describe(assignments)})"
        if exc.key in assignments:
            kind = "grid" if exc.key in grid else "zip"
            raise ConfigError(f'sweep.{kind}."{exc.key}"', exc.value,
                              f"{where}: {exc.reason}") from None
        raise ConfigError(exc.key, exc.value, f"{where}: {exc.reason}") from None
    except ResourceError as exc:
        raise ResourceError(f"point {index} ({_describe(assignments)}): {exc}") from None


def _assign(config: dict, dotted: str, value: Any) -> None:
    *parents, leaf = dotted.split(".")
    node = config
    for i, part in enumerate(parents):
        child = node.setdefault(part, {})
        if not isinstance(child, dict):
            raise ConfigError(".".join(parents[:i + 1]), child, "is not a table; cannot sweep "
                                                                  f"{dotted!r} inside it")
        node = child
    node[leaf] = value


def _describe(assignments: Mapping[str, Any]) -> str:
    return ", ".join(f"{k}={v!r}" for k, v in assignments.items())
