"""Configuration → results for the ``fit`` and ``size`` tasks (and their CLI commands).

``fit``: fit one depth step by step over [0, T] and compare with the exact reference.
``size``: scan depths (:mod:`lgt.variational.sizing`), with gate-error budget, Trotter baseline
and shot counts. Both return a :class:`~lgt.results.RunResult`.
"""

from __future__ import annotations

import json
import time
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from lgt.basis import PhysicalBasis
from lgt.config import check_keys, table
from lgt.model import ModelParams
from lgt.resolved import VariationalConfig
from lgt.results import RunResult, Table, TimeSeries, max_deviation
from lgt.states import prepare_initial_state
from lgt.variational.ansatz import LayerOptions
from lgt.variational.budget import Costing
from lgt.variational.comparison import compare_to_exact, make_observer
from lgt.variational.families import available_families, get_family
from lgt.variational.native_cost import model_term_costs
from lgt.variational.settings import VariationalSettings, resolve_variational
from lgt.variational.sizing import (CRITERION_OBSERVABLES, NONE, DepthRow, SizingResult, TrotterRow, meets,
                                    rows_table, trajectory_table)
from lgt.variational.stepper import VariationalTrajectory, fit_trajectory

#: Forms of exported circuit files: native gates only (default), or the circuit's own gates.
EXPORT_FORMS = ("native", "generator")

def validate_variational_config(config: Mapping[str, Any]) -> VariationalConfig:
    """Validate [model], [initial], [variational] (and [evolution] t_final) and the hardware
    profile; return them resolved. A resolved :class:`~lgt.resolved.VariationalConfig` is
    returned as is (validated once).

    ``[evolution]`` is read for ``t_final`` only; its keys are checked against the evolve task's
    keys so that a typo is caught, and the others are left to ``fluxline evolve``.
    """
    if isinstance(config, VariationalConfig):
        return config
    from lgt.errors import ConfigError
    from lgt.evolution import EVOLUTION_KEYS
    from lgt.modelcheck import checked_initial, checked_model, guard_memory
    from lgt.variational.settings import load_checked_profile

    if "evolution" in config:
        check_keys(table(config, "evolution"), EVOLUTION_KEYS, "evolution")
    params = checked_model(config)
    initial = checked_initial(config, params)
    settings = resolve_variational(config, params.levels)
    family = get_family(settings.family)
    reason = family.unavailable(params)
    if reason is not None:
        raise ConfigError("variational.family", settings.family, reason)
    states = 2 * (settings.n_steps + 1)  # fitted and exact state of every step are kept
    register = params.levels ** params.n_links if family.fit_space == "register" else 0
    guard_memory(params, "fit/size", stored_vectors=8 + states, extra_bytes=16 * register * (states + 8))
    profile = load_checked_profile(settings)
    return VariationalConfig(params, initial, settings, profile)


def _setup(resolved: Mapping[str, Any]):
    resolved = validate_variational_config(resolved)
    params, settings = resolved.model, resolved.settings
    basis = PhysicalBasis(params)
    psi0 = prepare_initial_state(basis, resolved["initial"])
    return params, settings, basis, psi0, resolved.profile


def _costing(params: ModelParams, settings: VariationalSettings, profile) -> Costing:
    """Prices of the run's circuits; the term exponentials are compiled (or read from the
    cache) on first use."""
    return Costing(profile, lambda: model_term_costs(params, settings.native_spec(), profile, settings.compile_fidelity,
                                                     compile=settings.compile, seed=settings.seed),
                   exported=settings.compile)


def _progress(total: int, enabled: bool, desc: str):
    if not enabled:
        return None, lambda: None
    import sys

    from tqdm import tqdm

    bar = tqdm(total=total, desc=desc, unit="step", file=sys.stderr)
    return (lambda k: bar.update(1)), bar.close


def trajectory_series(traj: VariationalTrajectory,
                      basis: PhysicalBasis) -> tuple[dict[str, TimeSeries], dict[str, TimeSeries]]:
    """(fit diagnostics and every compared observable of the variational states, the exact
    reference of those observables at the same times) — ``RunResult.series`` and ``.reference``."""
    times = traj.times
    series = {
        "fidelity": TimeSeries(times, traj.fidelity),
        "step_infidelity": TimeSeries(times, traj.step_infidelity),
        "leakage": TimeSeries(times, traj.leakage),
        "optimizer_iterations": TimeSeries(times, traj.iterations.astype(float)),
        "step_seconds": TimeSeries(times, traj.wall_time, unit="seconds"),
    }
    reference = {}
    for name, cmp in compare_to_exact(make_observer(traj, basis), traj).items():
        series[name] = TimeSeries(times, np.asarray(cmp["variational"]))
        reference[name] = TimeSeries(times, np.asarray(cmp["exact"]))
    return series, reference


def run_fit(resolved: Mapping[str, Any], progress: bool = False) -> RunResult:
    """Fit the configured depth over [0, T]; compare with the exact trajectory."""
    from lgt.variational.sizing import trotter_rows

    resolved = validate_variational_config(resolved)
    params, settings, basis, psi0, profile = _setup(resolved)
    t0 = time.perf_counter()
    family = get_family(settings.family)
    ansatz = family.build(basis, settings.layers, LayerOptions.from_settings(settings))
    update, close = _progress(settings.n_steps, progress, "fit")
    try:
        traj = fit_trajectory(ansatz, psi0, settings.dt, settings.n_steps, settings.step_tolerance,
                              settings.maxiter, settings.mode, settings.restarts, settings.seed, update,
                              fast=settings.fast_fit)
    finally:
        close()
    t1 = time.perf_counter()
    series, reference = trajectory_series(traj, basis)
    costing = _costing(params, settings, profile)
    cost = family.native_cost(ansatz, costing)
    trotter = trotter_rows(basis, psi0, settings, costing.terms())
    obs_err = max(float(np.max(max_deviation(series[n].values, reference[n].values))) for n in CRITERION_OBSERVABLES)
    attributes = {
        "family": settings.family, "layers": settings.layers, "parameters": ansatz.n_params,
        "space": ansatz.space, "dimension": basis.dimension,
        "max_infidelity": traj.max_infidelity, "final_fidelity": float(traj.fidelity[-1]),
        "sum_step_infidelity": float(traj.step_infidelity.sum()),
        "max_leakage": float(traj.leakage.max()), "max_observable_error": obs_err,
        "two_qudit_gates": cost.two_qudit, "single_qudit_gates": cost.single_qudit,
        "duration_us": cost.duration_us, "noise_fidelity": cost.fidelity, "cost_source": cost.source,
        **_profile_attributes(profile),
        **_tolerance_attributes(settings, meets(settings, traj.max_infidelity, obs_err)),
    }
    tables = {"trotter": rows_table(TrotterRow, trotter, TROTTER_DESCRIPTION)}
    return RunResult("fit", dict(resolved), series, arrays={"parameters": traj.params},
                     attributes=attributes, timings={"fit": t1 - t0, "compare": time.perf_counter() - t1},
                     tables=tables, reference=reference)


TROTTER_DESCRIPTION = ("least Trotter steps meeting the tolerance per order (steps = -1: not reached "
                       "within trotter_max_steps), with the native cost of the whole circuit to T")


def _profile_attributes(profile) -> dict[str, str]:
    """``hardware_profile`` (name), ``hardware_profile_path`` and ``hardware_profile_sha256``."""
    ident = profile.identity()
    return {"hardware_profile": ident["name"], "hardware_profile_path": ident["path"],
            "hardware_profile_sha256": ident["sha256"]}


def _tolerance_attributes(settings: VariationalSettings, met: bool) -> dict[str, Any]:
    """``meets_tolerance`` and the numbers it was decided with (see :func:`~lgt.variational.sizing.meets`)."""
    return {"meets_tolerance": bool(met), "criterion": settings.criterion, "tolerance": settings.tolerance,
            "observable_tolerance": settings.observable_tolerance}


def trotter_summary(result: RunResult) -> list[dict[str, Any]]:
    """The Trotter rows of a fit or size result as plain dicts (``steps`` None when not reached)."""
    rows = result.tables["trotter"].rows()
    for row in rows:
        if row["steps"] == NONE:
            row["steps"] = None
    return rows


def export_circuits(resolved: Mapping[str, Any], parameters: np.ndarray, outdir: str | Path,
                    form: str = "native") -> list[Path]:
    """Write one circuit JSON file per stored time (``step_0000.json`` …) for a lab to run.

    ``form="native"``: only the hardware profile's native gates (:mod:`circuits.native_export`),
    angles resolved, each gate with ``duration_us``; the document adds ``compile_fidelity``,
    ``hardware_profile`` (name, path, sha256) and ``cost``. ``form="generator"``: the circuit's
    own gates (generator exponentials of the model's terms; for simulation). Every family writes
    its register form (:meth:`~lgt.variational.families.base.LayerFamily.export`). Every document
    adds ``form``, ``time``, ``initial_state`` (register product levels, or the non-zero register
    amplitudes) and ``model``.
    """
    if form not in EXPORT_FORMS:
        raise ValueError(f"form must be one of {EXPORT_FORMS}, got {form!r}")
    resolved = validate_variational_config(resolved)
    params, settings, basis, psi0, profile = _setup(resolved)
    docs = get_family(settings.family).export(basis, settings.layers, LayerOptions.from_settings(settings),
                                              np.atleast_2d(parameters), profile, form)
    outdir = Path(outdir)
    outdir.mkdir(parents=True, exist_ok=True)
    initial = initial_state_document(basis, psi0)
    paths = []
    for k, doc in enumerate(docs):
        doc["form"] = form
        doc["time"] = k * settings.dt
        doc["initial_state"] = initial
        doc["model"] = resolved["model"]
        path = outdir / f"step_{k:04d}.json"
        path.write_text(json.dumps(doc))
        paths.append(path)
    return paths


def initial_state_document(basis: PhysicalBasis, psi0: np.ndarray) -> dict[str, Any]:
    """``{"levels": [...]}`` for a register product state, else the non-zero register amplitudes."""
    nonzero = np.flatnonzero(np.abs(psi0) > 1e-14)
    if nonzero.size == 1:
        return {"kind": "product", "levels": basis.levels[nonzero[0]].astype(int).tolist()}
    return {"kind": "amplitudes", "indices": basis.codes[nonzero].tolist(),
            "real": psi0[nonzero].real.tolist(), "imag": psi0[nonzero].imag.tolist()}


def initial_state_from_document(doc: Mapping[str, Any], n_qudits: int, d: int) -> np.ndarray:
    """Register vector of an exported ``initial_state``."""
    from circuits.register import product_state

    if doc["kind"] == "product":
        return product_state(doc["levels"], d)
    out = np.zeros(d ** n_qudits, dtype=np.complex128)
    out[np.asarray(doc["indices"], dtype=np.int64)] = np.asarray(doc["real"]) + 1j * np.asarray(doc["imag"])
    return out


def run_size(resolved: Mapping[str, Any], log=None) -> RunResult:
    """Depth sizing with budget, Trotter baseline and shots (see :mod:`lgt.variational.sizing`).

    With ``compare_families`` every other registered family that can run this model is sized
    too (no baselines). Tables: ``depth_<family>`` and ``trajectories_<family>`` per family,
    ``families``, ``trotter``, ``shots``, ``term_costs``.
    """
    from dataclasses import replace

    from lgt.variational.parallel import size_families, sizing_workers
    from lgt.variational.sizing import size_depth

    resolved = validate_variational_config(resolved)
    params, settings, basis, psi0, profile = _setup(resolved)
    t0 = time.perf_counter()
    costing = _costing(params, settings, profile)
    costs = costing.terms()
    t1 = time.perf_counter()
    families = [settings]
    if settings.compare_families:
        families += [replace(settings, family=name) for name in available_families(params) if name != settings.family]
    workers = sizing_workers(settings, basis)
    if workers > 1:
        results = size_families(basis, psi0, families, costing, log, settings.fast_fit, workers)
    else:
        results = {s.family: size_depth(basis, psi0, s, costing, log, baselines=s is settings, fast=settings.fast_fit)
                   for s in families}
    t2 = time.perf_counter()
    result = results[settings.family]
    arrays = {}
    if result.chosen is not None:  # the chosen depth's fitted angles, ready for export_circuits
        arrays["parameters"] = result.trajectories[result.chosen].params
    attributes = {
        "layers": NONE if result.chosen is None else result.chosen,
        "best_layers_under_noise": NONE if result.best_under_noise is None else result.best_under_noise,
        "best_layers_under_noise_simulated": NONE if result.best_under_noise_simulated is None else result.best_under_noise_simulated,
        "family": settings.family, "cost_source": costing.source(settings.family), **_profile_attributes(profile),
        **_tolerance_attributes(settings, result.chosen is not None),
    }
    return RunResult("size", dict(resolved), {}, arrays, attributes,
                     timings={"compile": t1 - t0, "size": t2 - t1}, tables=size_tables(results, costs))


def size_tables(results: dict[str, SizingResult], costs) -> dict[str, Table]:
    """Result tables of a sizing run; the first entry of ``results`` is the configured family."""
    primary = next(iter(results.values()))
    tables: dict[str, Table] = {}
    for name, res in results.items():
        tables[f"depth_{name}"] = rows_table(DepthRow, res.rows, f"{name} layers: one row per depth D fitted "
                                             "(fidelities over the window reached, native cost of one circuit)")
        tables[f"trajectories_{name}"] = trajectory_table(res.trajectories, name)
    tables["families"] = Table(
        {"family": np.array(list(results)),
         "layers": np.array([NONE if r.chosen is None else r.chosen for r in results.values()]),
         "best_layers_under_noise": np.array([NONE if r.best_under_noise is None else r.best_under_noise
                                              for r in results.values()]),
         "best_layers_under_noise_simulated": np.array([NONE if r.best_under_noise_simulated is None else r.best_under_noise_simulated for r in results.values()])},
        description="per family: least depth meeting the tolerance and depth of highest predicted total "
                    "fidelity, and of least simulated predicted observable error (-1: none up to max_layers, or not simulated); the first row is the configured family")
    tables["trotter"] = rows_table(TrotterRow, primary.trotter, TROTTER_DESCRIPTION)
    tables["shots"] = Table({"observable": np.array(list(primary.shots), dtype=str),
                             "shots": np.array(list(primary.shots.values()), dtype=np.int64)},
                            description="shots for the configured standard error, largest over the window")
    keys = sorted({k for c in costs.values() for k in c.counts})
    columns = {"term": np.array(list(costs), dtype=str)}
    columns.update({f"count_{k}": np.array([c.counts.get(k, 0) for c in costs.values()], dtype=np.int64)
                    for k in keys})
    columns.update(fidelity=np.array([c.fidelity for c in costs.values()]),
                   duration_us=np.array([c.duration_us for c in costs.values()]),
                   compiled_layers=np.array([c.layers for c in costs.values()], dtype=np.int64),
                   compile_fidelity=np.array([c.compile_fidelity for c in costs.values()]))
    tables["term_costs"] = Table(columns, {"duration_us": "us"},
                                 "native cost of each term exponential (count_<gate kind>: native gates)")
    return tables


def size_summary_dict(result: RunResult) -> dict[str, Any]:
    """JSON-ready summary of a ``size`` result (what ``fluxline size --json`` prints): chosen depth,
    table, Trotter baseline, budget, shots, term costs, every family's table, ``meets_tolerance``."""
    a, t = result.attributes, result.tables
    none = (lambda v: None if v == NONE else v)
    families = {}
    for row in t["families"].rows():
        entry = {"layers": none(row["layers"]), "table": t[f"depth_{row['family']}"].rows()}
        if row["family"] != a["family"]:
            entry["best_layers_under_noise"] = none(row["best_layers_under_noise"])
        families[row["family"]] = entry
    table = families[a["family"]]["table"]
    count_cols = [c for c in t["term_costs"].columns if c.startswith("count_")]
    term_costs = {}
    for row in t["term_costs"].rows():
        term_costs[row["term"]] = {"counts": {c[len("count_"):]: row[c] for c in count_cols if row[c]},
                                   "fidelity": row["fidelity"], "duration_us": row["duration_us"],
                                   "compiled_layers": row["compiled_layers"],
                                   "compile_fidelity": row["compile_fidelity"]}
    return {
        "family": a["family"],
        "families": families,
        "layers": none(a["layers"]),
        "table": table,
        "trotter": trotter_summary(result),
        "budget": {"best_layers_under_noise": none(a["best_layers_under_noise"]),
                   "best_layers_under_noise_simulated": none(a.get("best_layers_under_noise_simulated", NONE)),
                   "rows": [{"layers": r["layers"], "noise_fidelity": r["noise_fidelity"],
                             "total_fidelity": r["total_fidelity"]} for r in table]},
        "shots": {r["observable"]: r["shots"] for r in t["shots"].rows()},
        "term_costs": term_costs,
        "meets_tolerance": bool(a["meets_tolerance"]),
        "criterion": a["criterion"], "tolerance": a["tolerance"],
        "observable_tolerance": a["observable_tolerance"],
    }
