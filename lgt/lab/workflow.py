"""``predict`` (fit → exported circuits → noisy simulation → shots → mitigation) and ``analyze``
(measured outcomes → mitigation), both reported raw, mitigated and exact (``docs/lab.md``)."""

from __future__ import annotations

import json
import sys
import tempfile
import time
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from circuits.density import MAX_DENSITY_DIM, simulate_density
from circuits.export import from_dict
from circuits.noise_program import NoisyProgram, noisy_program
from circuits.trajectories import simulate_trajectories
from lgt.lab.mitigation import StringObservables, analyze_counts, apply_response
from lgt.lab.noise import LabNoise, lab_noise
from lgt.lab.settings import LabSettings, resolve_lab
from lgt.model import ModelParams
from lgt.lab.report import finite, report_result
from lgt.results import RunResult

__all__ = ["OBSERVABLES", "split_config", "simulate_outcomes", "sample_shots", "run_predict", "run_analyze",
           "exact_observables"]

#: Observables reported by predict and analyze.
OBSERVABLES = ("particle_density", "electric_field")
#: Largest register (d^K strings) whose outcome distributions are mitigated (arrays of d^K floats
#: per bootstrap resample and per string-level table).
MAX_STRINGS = 2_000_000


def split_config(config: Mapping[str, Any]) -> tuple[dict[str, Any], LabSettings]:
    """(the configuration without ``[lab]``, the resolved ``[lab]`` settings); validates both."""
    from lgt.config import config_folder, with_folder
    from lgt.errors import ConfigError
    from lgt.tasks import get_task

    # the fit task's sections and policy; relative paths still resolve against the config's folder
    rest = with_folder({k: v for k, v in config.items() if k != "lab"}, config_folder(config))
    lab = resolve_lab(config.get("lab"))
    resolved = get_task("fit").validate(rest)
    m = resolved["model"]
    strings = m["levels"] ** (m["sites"] - 1)
    if strings > MAX_STRINGS:
        raise ConfigError("model", {"sites": m["sites"], "levels": m["levels"]},
                          f"{strings:,} register strings exceed the {MAX_STRINGS:,} that predict/analyze handle")
    return resolved, lab


def _noise_for(resolved: Mapping[str, Any], lab: LabSettings) -> LabNoise:
    noise = lab_noise(resolved["variational"].get("hardware_profile"), lab.noise)
    d = resolved["model"]["levels"]
    noise.model.confusion(d)  # a confusion matrix of the wrong size is a named error now
    return noise


def simulate_outcomes(program: NoisyProgram, psi0: np.ndarray, lab: LabSettings, seed: int) -> tuple[np.ndarray, float, dict]:
    """(true-string probabilities, lost population, simulation info) of one noisy circuit."""
    dim = program.d ** program.n_qudits
    use_density = lab.method == "density" or (lab.method == "auto" and dim <= MAX_DENSITY_DIM)
    if use_density:
        res = simulate_density(program, psi0)
        return res.probabilities(), res.lost, {"method": "density", "trajectories": 0, "trajectory_error": 0.0}
    tr = simulate_trajectories(program, psi0, lab.trajectory_error, seed=seed, max_trajectories=lab.max_trajectories)
    return tr.probabilities, tr.lost, {"method": "trajectories", "trajectories": tr.n_trajectories,
                                       "trajectory_error": tr.standard_error}


def sample_shots(p_true: np.ndarray, lost: float, program: NoisyProgram, shots: int,
                 rng: np.random.Generator) -> tuple[np.ndarray, int, np.ndarray]:
    """(counts per read string, heralded leaked shots, read-string distribution) of ``shots`` shots."""
    mats = [program.confusion] * program.n_qudits
    p_read = apply_response(p_true[None, :], mats)[0]
    herald = lost
    if program.leaked_outcome == "random":
        p_read = p_read + lost / p_read.size
        herald = 0.0
    pv = np.clip(np.append(p_read, herald), 0, None)
    counts = rng.multinomial(shots, pv / pv.sum())
    return counts[:-1], int(counts[-1]), p_read


def _report(task: str, times: np.ndarray, per_time: list[dict], exact: dict[str, np.ndarray],
            extra: dict[str, Any]) -> dict[str, Any]:
    report: dict[str, Any] = {"task": task, "times": [float(t) for t in times],
                              "discarded_fraction": [r["discarded_fraction"] for r in per_time],
                              "shots": [r["shots"] for r in per_time]}
    for name in OBSERVABLES:
        entry = {kind: np.array([r[name][kind] for r in per_time]).tolist()
                 for kind in ("raw", "raw_error", "mitigated", "mitigated_error")}
        entry["exact"] = np.asarray(exact[name]).tolist()
        if "expected" in per_time[0]:
            entry["noisy_expected"] = np.array([r["expected"][name] for r in per_time]).tolist()
        if "zne" in per_time[0]:
            entry["zne"] = np.array([r["zne"][name][0] for r in per_time]).tolist()
            entry["zne_error"] = np.array([r["zne"][name][1] for r in per_time]).tolist()
        report[name] = entry
    report.update(extra)
    return finite(report)


def _result(task: str, resolved: Mapping[str, Any], report: dict[str, Any], timings: dict[str, float]) -> RunResult:
    return report_result(task, resolved, report, timings, OBSERVABLES)


def load_fit(path: str | Path, resolved: Mapping[str, Any]) -> RunResult:
    """A ``fluxline fit --output`` run file, checked to belong to this configuration."""
    from lgt.errors import InputError
    from lgt.io import read_run_file

    try:
        fit = read_run_file(path)
    except (OSError, ValueError, KeyError) as exc:
        raise InputError(str(path), f"cannot be read as a Fluxline run file ({exc})") from None
    if fit.task != "fit" or "parameters" not in fit.arrays:
        raise InputError(str(path), f"is a {fit.task!r} run, not a fit run with fitted parameters")
    missing = [name for name in OBSERVABLES if name not in fit.reference]
    if missing:
        raise InputError(str(path), f"holds no exact reference of {', '.join(missing)}")
    for section in ("model", "initial", "variational"):
        if json.dumps(fit.parameters.get(section), sort_keys=True) != json.dumps(resolved[section], sort_keys=True):
            raise InputError(str(path), f"was fitted with a different [{section}] section than the configuration")
    return fit


def run_predict(config: Mapping[str, Any], progress: bool = False,
                fit_file: str | Path | None = None) -> tuple[dict[str, Any], RunResult]:
    """Fit the ``[variational]`` circuits (or reuse ``fit_file``), simulate each stored step's
    exported circuit under the profile's noise model, sample ``[lab] shots`` shots and analyse them
    like measured data."""
    from lgt.variational.workflow import export_circuits, initial_state_from_document, run_fit

    resolved, lab = split_config(config)
    noise = _noise_for(resolved, lab)  # before any work
    params = ModelParams.from_dict(resolved["model"])
    K, d = params.n_links, params.levels
    reused = load_fit(fit_file, resolved) if fit_file is not None else None
    t0 = time.perf_counter()
    fit = reused if reused is not None else run_fit(resolved, progress=progress)
    t1 = time.perf_counter()
    obs = StringObservables.for_model(params)
    mats = [noise.model.confusion(d)] * K
    spec = noise.spec()
    per_time, info = [], []
    with tempfile.TemporaryDirectory() as tmp:
        paths = export_circuits(resolved, fit.arrays["parameters"], tmp)
        docs = [json.loads(Path(p).read_text()) for p in paths]
    times = np.array([doc["time"] for doc in docs])
    bar = None
    if progress:
        from tqdm import tqdm

        bar = tqdm(total=len(docs), desc="noisy simulation", unit="step", file=sys.stderr)
    for k, doc in enumerate(docs):
        circuit = from_dict(doc)
        psi0 = initial_state_from_document(doc["initial_state"], K, d)
        program = noisy_program(circuit, None, noise.model, spec)
        p_true, lost, sim = simulate_outcomes(program, psi0, lab, lab.seed + k)
        rng = np.random.default_rng([lab.seed, k])
        counts, leaked, p_read = sample_shots(p_true, lost, program, lab.shots, rng)
        res = analyze_counts(counts, obs, mats, leaked, lab.bootstrap, lab.unfold_iterations, seed=lab.seed + k)
        expected = obs.values(p_read[None, :])
        res["expected"] = {name: expected[name][0] for name in OBSERVABLES}
        if lab.zne_scales:
            res["zne"] = _zne(circuit, psi0, noise, lab, obs, mats, k, res)
        per_time.append(res)
        sim.update(lost=lost, duration_us=program.duration_us)
        info.append(sim)
        if bar is not None:
            bar.update(1)
    if bar is not None:
        bar.close()
    t2 = time.perf_counter()
    exact = {name: fit.reference[name].values for name in OBSERVABLES}
    extra = {"noise": noise.describe(), "lab": lab.to_dict(),
             "simulation": {key: [s[key] for s in info] for key in info[0]},
             "fit": {"max_infidelity": fit.attributes["max_infidelity"], "family": fit.attributes["family"],
                     "layers": fit.attributes["layers"], "reused": None if fit_file is None else str(fit_file)}}
    report = _report("predict", times, per_time, exact, extra)
    for name in OBSERVABLES:  # the fitted circuits without noise (fit error only)
        report[name]["circuit"] = np.asarray(fit.series[name].values).tolist()
    report["timings"] = {"fit_seconds": t1 - t0, "simulate_and_mitigate_seconds": t2 - t1}
    return report, _result("predict", resolved, report, {})


def _zne(circuit, psi0: np.ndarray, noise: LabNoise, lab: LabSettings, obs: StringObservables, mats,
         k: int, unfolded: dict) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Mitigated values at every folding scale (scale 1 = ``unfolded``), extrapolated to zero noise."""
    from lgt.lab.zne import extrapolate, fold_circuit

    runs = [unfolded]
    for scale in lab.zne_scales[1:]:
        program = noisy_program(fold_circuit(circuit, scale), None, noise.model, noise.spec())
        p_true, lost, _ = simulate_outcomes(program, psi0, lab, lab.seed + 1000 * scale + k)
        counts, leaked, _ = sample_shots(p_true, lost, program, lab.shots, np.random.default_rng([lab.seed, k, scale]))
        runs.append(analyze_counts(counts, obs, mats, leaked, lab.bootstrap, lab.unfold_iterations,
                                   seed=lab.seed + 1000 * scale + k))
    return {name: extrapolate(lab.zne_scales, [r[name]["mitigated"] for r in runs],
                              [r[name]["mitigated_error"] for r in runs]) for name in OBSERVABLES}


def exact_observables(resolved: Mapping[str, Any], steps: np.ndarray) -> dict[str, np.ndarray]:
    """Exact ⟨ν⟩ and ⟨L_n⟩ at the grid steps ``steps`` (t_k = k dt) from the configured initial state."""
    from lgt.basis import PhysicalBasis
    from lgt.observables import Observer
    from lgt.states import prepare_initial_state
    from lgt.variational.ansatz import symmetric_ansatz
    from lgt.variational.stepper import exact_trajectory

    params = ModelParams.from_dict(resolved["model"])
    basis = PhysicalBasis(params)
    psi0 = prepare_initial_state(basis, resolved["initial"])
    v = resolved["variational"]
    n_steps = int(round(v["t_final"] / v["dt"]))
    states = exact_trajectory(symmetric_ansatz(basis, 1), psi0, v["dt"], n_steps)[steps]
    observer = Observer(basis, which=OBSERVABLES)
    rows = [observer.measure(s) for s in states]
    return {name: np.array([r[name] for r in rows]) for name in OBSERVABLES}


def run_analyze(measured: str | Path, config: Mapping[str, Any]) -> tuple[dict[str, Any], RunResult]:
    """Mitigate measured outcomes (CSV or HDF5, validated against the model and time grid)."""
    from lgt.lab.measured import read_measured

    resolved, lab = split_config(config)
    noise = _noise_for(resolved, lab)
    params = ModelParams.from_dict(resolved["model"])
    K, d = params.n_links, params.levels
    v = resolved["variational"]
    n_steps = int(round(v["t_final"] / v["dt"]))
    data = read_measured(measured, K, d, v["dt"], n_steps)  # before any work
    t0 = time.perf_counter()
    obs = StringObservables.for_model(params)
    mats = [noise.model.confusion(d)] * K
    per_time = [analyze_counts(c, obs, mats, 0, lab.bootstrap, lab.unfold_iterations, seed=lab.seed + int(k))
                for k, c in zip(data.steps, data.counts)]
    exact = exact_observables(resolved, data.steps)
    extra = {"noise": noise.describe(), "lab": lab.to_dict(), "measured": str(measured)}
    report = _report("analyze", data.steps * v["dt"], per_time, exact, extra)
    return report, _result("analyze", resolved, report, {"analyze": time.perf_counter() - t0})
