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

from circuits.export import to_dict
from lgt.basis import PhysicalBasis
from lgt.config import check_keys, table
from lgt.resolved import VariationalConfig
from lgt.results import RunResult, TimeSeries
from lgt.states import prepare_initial_state
from lgt.variational.ansatz import ModelAnsatz, make_ansatz, symmetric_ansatz
from lgt.variational.comparison import compare_to_exact, make_observer
from lgt.variational.native_cost import model_term_costs
from lgt.variational.settings import resolve_variational
from lgt.variational.stepper import VariationalTrajectory, fit_trajectory

#: Largest register (d^K) on which hardware layers are fitted.
MAX_HARDWARE_REGISTER = 2_000_000


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
    if settings.family == "hardware" and params.levels ** params.n_links > MAX_HARDWARE_REGISTER:
        raise ConfigError("variational.family", "hardware",
                          f"hardware layers run on the full register, {params.levels}^{params.n_links} "
                          "amplitudes is too large; use family = \"symmetric\"")
    states = 2 * (settings.n_steps + 1)  # fitted and exact state of every step are kept
    register = params.levels ** params.n_links if settings.family == "hardware" else 0
    guard_memory(params, "fit/size", stored_vectors=8 + states, extra_bytes=16 * register * (states + 8))
    profile = load_checked_profile(settings)
    return VariationalConfig(params, initial, settings, profile)


def _setup(resolved: Mapping[str, Any]):
    resolved = validate_variational_config(resolved)
    params, settings = resolved.model, resolved.settings
    basis = PhysicalBasis(params)
    psi0 = prepare_initial_state(basis, resolved["initial"])
    return params, settings, basis, psi0, resolved.profile


def _progress(total: int, enabled: bool, desc: str):
    if not enabled:
        return None, lambda: None
    import sys

    from tqdm import tqdm

    bar = tqdm(total=total, desc=desc, unit="step", file=sys.stderr)
    return (lambda k: bar.update(1)), bar.close


def trajectory_series(traj: VariationalTrajectory, basis: PhysicalBasis) -> dict[str, TimeSeries]:
    """Fit diagnostics and every compared observable (variational and ``exact_`` reference)."""
    times = traj.times
    series = {
        "fidelity": TimeSeries(times, traj.fidelity),
        "step_infidelity": TimeSeries(times, traj.step_infidelity),
        "leakage": TimeSeries(times, traj.leakage),
        "optimizer_iterations": TimeSeries(times, traj.iterations.astype(float)),
        "step_seconds": TimeSeries(times, traj.wall_time, unit="seconds"),
    }
    for name, cmp in compare_to_exact(make_observer(traj, basis), traj).items():
        series[name] = TimeSeries(times, np.asarray(cmp["variational"]))
        series[f"exact_{name}"] = TimeSeries(times, np.asarray(cmp["exact"]))
        series[f"error_{name}"] = TimeSeries(times, np.asarray(cmp["error"]))
    return series


def run_fit(resolved: Mapping[str, Any], progress: bool = False) -> RunResult:
    """Fit the configured depth over [0, T]; compare with the exact trajectory."""
    resolved = validate_variational_config(resolved)
    params, settings, basis, psi0, profile = _setup(resolved)
    t0 = time.perf_counter()
    ansatz = make_ansatz(basis, settings.family, settings.layers, settings.angles, settings.native_spec())
    update, close = _progress(settings.n_steps, progress, "fit")
    try:
        traj = fit_trajectory(ansatz, psi0, settings.dt, settings.n_steps, settings.step_tolerance,
                              settings.maxiter, settings.mode, settings.restarts, settings.seed, update)
    finally:
        close()
    t1 = time.perf_counter()
    series = trajectory_series(traj, basis)
    costs = model_term_costs(params, settings.native_spec(), profile, settings.compile_fidelity,
                             compile=settings.compile, seed=settings.seed)
    from dataclasses import asdict

    from lgt.variational.budget import ansatz_cost
    from lgt.variational.sizing import trotter_rows

    cost = ansatz_cost(ansatz, profile, costs)
    trotter = [asdict(r) for r in trotter_rows(basis, psi0, settings, costs)]
    attributes = {
        "family": settings.family, "layers": settings.layers, "parameters": ansatz.n_params,
        "space": ansatz.space, "dimension": basis.dimension,
        "max_infidelity": traj.max_infidelity, "final_fidelity": float(traj.fidelity[-1]),
        "sum_step_infidelity": float(traj.step_infidelity.sum()),
        "max_leakage": float(traj.leakage.max()),
        "two_qudit_gates": cost.two_qudit, "single_qudit_gates": cost.single_qudit,
        "duration_us": cost.duration_us, "noise_fidelity": cost.fidelity,
        "hardware_profile": profile.name,
        "trotter_json": json.dumps(trotter),
    }
    return RunResult("fit", dict(resolved), series, arrays={"parameters": traj.params},
                     attributes=attributes, timings={"fit": t1 - t0, "compare": time.perf_counter() - t1})


def export_circuits(resolved: Mapping[str, Any], parameters: np.ndarray, outdir: str | Path,
                    form: str = "native") -> list[Path]:
    """Write one circuit JSON file per stored time (``step_0000.json`` …) for a lab to run.

    ``form="native"``: only the hardware profile's native gates (:mod:`circuits.native_export`),
    angles resolved, each gate with ``duration_us``; the document adds ``compile_fidelity``,
    ``hardware_profile`` (name, path, sha256) and ``cost``. ``form="generator"``: the circuit's
    own gates (generator exponentials of the model's terms; for simulation). Symmetric circuits
    are written in register form. Every document adds ``form``, ``time``, ``initial_state``
    (register product levels, or the non-zero register amplitudes) and ``model``.
    """
    from circuits.native_export import native_circuit, native_document

    if form not in ("native", "generator"):
        raise ValueError(f"form must be 'native' or 'generator', got {form!r}")
    resolved = validate_variational_config(resolved)
    params, settings, basis, psi0, profile = _setup(resolved)
    if settings.family == "symmetric":
        ansatz: ModelAnsatz = symmetric_ansatz(basis, settings.layers, settings.angles, space="register")
    else:
        ansatz = make_ansatz(basis, "hardware", settings.layers, spec=settings.native_spec())
    outdir = Path(outdir)
    outdir.mkdir(parents=True, exist_ok=True)
    initial = initial_state_document(basis, psi0)
    gate_set, blocks = profile.gate_set(params.levels), {}
    paths = []
    for k, row in enumerate(np.atleast_2d(parameters)):
        if form == "native":
            doc = native_document(native_circuit(ansatz.circuit, row, gate_set, blocks), profile)
        else:
            doc = to_dict(ansatz.circuit, row)
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
    """Depth sizing with budget, Trotter baseline and shots (see :mod:`lgt.variational.sizing`)."""
    from lgt.variational.sizing import size_depth

    resolved = validate_variational_config(resolved)
    params, settings, basis, psi0, profile = _setup(resolved)
    t0 = time.perf_counter()
    costs = model_term_costs(params, settings.native_spec(), profile, settings.compile_fidelity,
                             compile=settings.compile, seed=settings.seed)
    t1 = time.perf_counter()
    result = size_depth(basis, psi0, settings, profile, costs, log)
    other = None
    other_family = "hardware" if settings.family == "symmetric" else "symmetric"
    if settings.compare_families and (other_family == "symmetric" or basis.register_dimension <= MAX_HARDWARE_REGISTER):
        from dataclasses import replace

        other = size_depth(basis, psi0, replace(settings, family=other_family), profile, costs, log, baselines=False)
    t2 = time.perf_counter()
    table = result.table()
    arrays = {f"table_{key}": np.array([row[key] for row in table], dtype=float) for key in table[0]}
    if result.chosen is not None:  # the chosen depth's fitted angles, ready for export_circuits
        arrays["parameters"] = result.trajectories[result.chosen].params
    series = {}
    for layers, traj in result.trajectories.items():
        series[f"fidelity_D{layers}"] = TimeSeries(traj.times, traj.fidelity)
        series[f"leakage_D{layers}"] = TimeSeries(traj.times, traj.leakage)
    attributes = {
        "layers": -1 if result.chosen is None else result.chosen,
        "best_layers_under_noise": -1 if result.best_under_noise is None else result.best_under_noise,
        "family": settings.family, "hardware_profile": profile.name,
        "summary_json": json.dumps(size_summary(result, costs, settings.family, other_family, other)),
    }
    return RunResult("size", dict(resolved), series, arrays, attributes,
                     timings={"compile": t1 - t0, "size": t2 - t1})


def size_summary(result, costs, family: str, other_family: str, other=None) -> dict[str, Any]:
    """JSON-ready summary: chosen depth, table, Trotter baseline, budget, shots, term costs,
    and (``other``) the comparison family's table."""
    from dataclasses import asdict

    families = {family: {"layers": result.chosen, "table": result.table()}}
    if other is not None:
        families[other_family] = {"layers": other.chosen, "table": other.table(),
                                  "best_layers_under_noise": other.best_under_noise}
    return {
        "family": family,
        "families": families,
        "layers": result.chosen,
        "table": result.table(),
        "trotter": [asdict(t) for t in result.trotter],
        "budget": {"best_layers_under_noise": result.best_under_noise,
                   "rows": [{"layers": r.layers, "noise_fidelity": r.noise_fidelity,
                             "total_fidelity": r.total_fidelity} for r in result.rows]},
        "shots": result.shots,
        "term_costs": {k: {"counts": v.counts, "fidelity": v.fidelity, "duration_us": v.duration_us,
                           "compiled_layers": v.layers, "compile_fidelity": v.compile_fidelity}
                       for k, v in costs.items()},
    }
