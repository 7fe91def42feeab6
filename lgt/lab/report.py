"""A ``predict`` / ``analyze`` report and its structured :class:`~lgt.results.RunResult` (the file form).

The report is the dict ``--json`` prints (``docs/lab.md``). In the run result each observable is
one :class:`~lgt.results.TimeSeries` whose values carry a trailing ``kind`` axis (``raw``,
``raw_error``, ``mitigated``, ``mitigated_error``, ``exact``, …, listed in ``kinds``); shots and
discarded fraction are series; the per-time simulation record is the table ``simulation``;
the metadata sections (``noise``, ``lab``, ``fit``, ``measured``) are attributes with dotted
names (``noise.noise_model.name``; list values are arrays of the same name; the names of
``null`` values are listed in the string array ``null_metadata``). :func:`report_from_result` is the inverse (used by ``fluxline plot``).
"""

from __future__ import annotations

import json
from typing import Any, Iterable, Mapping

import numpy as np

from lgt.hashing import flatten
from lgt.results import RunResult, Table, TimeSeries

__all__ = ["report_result", "report_from_result", "finite"]

#: Per-time report entries stored as series (besides the observables).
PER_TIME = {"discarded_fraction": "dimensionless", "shots": "shots"}
#: Report sections stored as dotted attributes (``measured`` is a plain string).
METADATA = ("noise", "lab", "fit", "measured")
#: Per-time simulation record of ``predict`` (one table row per stored time).
SIMULATION = "simulation"
#: Tasks whose report carries its own ``timings`` (``<phase>_seconds``; the result's timings).
TIMED_TASKS = ("predict",)
_SECONDS = "_seconds"
#: Array listing the dotted names of metadata whose value is null.
NULLS = "null_metadata"


def finite(value: Any) -> Any:
    """NaN / inf (an error bar of a time without shots) as None, so the report is strict JSON."""
    if isinstance(value, dict):
        return {k: finite(v) for k, v in value.items()}
    if isinstance(value, list):
        return [finite(v) for v in value]
    if isinstance(value, float) and not np.isfinite(value):
        return None
    return value


def report_result(task: str, resolved: Mapping[str, Any], report: Mapping[str, Any],
                  timings: Mapping[str, float], observables: Iterable[str]) -> RunResult:
    """The structured run result of a report (``timings`` is used when the report has none)."""
    times = np.asarray(report["times"], dtype=float)
    series = {name: TimeSeries(times, np.asarray(report[name], dtype=np.int64 if name == "shots" else float), unit)
              for name, unit in PER_TIME.items()}
    for name in observables:
        entry = report[name]
        series[name] = TimeSeries(times, np.stack([np.asarray(v, dtype=float) for v in entry.values()], axis=-1),
                                  kinds=tuple(entry))
    attributes: dict[str, Any] = {}
    arrays: dict[str, np.ndarray] = {}
    nulls: list[str] = []
    for section in METADATA:
        if section not in report:
            continue
        value = report[section]
        for key, leaf in (flatten(value, section + ".") if isinstance(value, Mapping) else [(section, value)]):
            if isinstance(leaf, list):
                arrays[key] = np.asarray(leaf)
            elif leaf is None:
                nulls.append(key)
            else:
                attributes[key] = leaf
    if nulls:
        arrays[NULLS] = np.array(nulls, dtype=str)
    tables = {}
    if SIMULATION in report:
        tables[SIMULATION] = Table({k: np.asarray(v) for k, v in report[SIMULATION].items()}, {"duration_us": "us"},
                                   "one row per stored time: how its noisy circuit was simulated")
    if "timings" in report:
        timings = {k[:-len(_SECONDS)]: v for k, v in report["timings"].items()}
    return RunResult(task, dict(resolved), series, arrays, attributes, dict(timings), tables)


def report_from_result(result: RunResult) -> dict[str, Any]:
    """The report dict of a ``predict`` / ``analyze`` run result (e.g. read from its file)."""
    if "report_json" in result.attributes:  # files of layout 1-2 held the report as JSON text
        return json.loads(result.attributes["report_json"])
    report: dict[str, Any] = {"task": result.task,
                              "times": np.asarray(result.series["shots"].times, dtype=float).tolist()}
    for name in PER_TIME:
        report[name] = np.asarray(result.series[name].values).tolist()
    for name, ts in result.series.items():
        if ts.kinds:
            report[name] = {kind: ts.kind(kind).tolist() for kind in ts.kinds}
    leaves = [*result.attributes.items(), *((k, None) for k in np.asarray(result.arrays.get(NULLS, [])).tolist()),
              *((k, np.asarray(v).tolist()) for k, v in result.arrays.items() if k != NULLS)]
    for key, leaf in leaves:
        *path, last = key.split(".")
        node = report
        for part in path:
            node = node.setdefault(part, {})
        node[last] = leaf
    if SIMULATION in result.tables:
        report[SIMULATION] = {k: v.tolist() for k, v in result.tables[SIMULATION].columns.items()}
    if result.task in TIMED_TASKS:
        report["timings"] = {k + _SECONDS: v for k, v in result.timings.items()}
    return finite(report)
