"""The ``evolve`` task with ``[evolution] method = "mps"``: quenches on long chains.

Same model, initial states, observables and result layout as the exact evolution
(:mod:`lgt.evolution`): product initial states (vacuum, meson, string, fields) are bond-dimension-1
MPS, ``kind = "ground"`` is the DMRG ground state of the pre-quench model. The state is evolved
by :class:`lgt.mps.tebd.GateEvolver` (TEBD-type 3-link gates, which grow the bond dimension from
a product state, so nothing stalls). Observables per stored time, from one canonical sweep:
⟨L_n⟩, ⟨L_n²⟩, ⟨n_n⟩ and ⟨Q_n⟩ (linear in ⟨L⟩ by Gauss's law), ν, string length, Loschmidt
echo and rate, entanglement (von Neumann and Rényi-2) at the configured cut, energy (MPO), norm.
``charge_correlation`` (⟨Q_i Q_j⟩ − ⟨Q_i⟩⟨Q_j⟩) is opt-in (name it in ``observables``): by the linear
Gauss law it is the double difference of the link-field covariance, one O(K² d χ³) transfer-matrix
pass per stored time (:meth:`ChainMPS.diagonal_covariance`; ≈ 15–20 % of the evolution cost, measured
at N = 40 and scaled by K² to N = 100, χ = 64, docs/mps.md). Extra series: ``entanglement_profile`` (von Neumann
at every cut 1..K−1), ``bond_dimension`` (largest χ), ``discarded_weight`` (summed since t = 0),
``energy_drift`` (|E(t) − E(0)| / max(|E(0)|, 1)) and ``leakage`` (weight outside the
physical subspace, 1 − ⟨P⟩).

Extra ``[evolution]`` keys: ``bond_dimension`` (χ cap, default 64), ``truncation`` (largest
discarded weight per SVD, default 1e-12), ``max_step`` (longest Trotter step, default 0.1),
``trotter_order`` (2 or 4, default 4), ``max_discarded_weight`` (flag threshold on the summed
discarded weight, default 1e-5). ``drift_tolerance`` defaults to 1e-4 here (relative energy drift).
When a threshold is exceeded a RuntimeWarning is issued and the result attributes
``flag_discarded_weight`` / ``flag_energy_drift`` are True (written to the HDF5 file).
"""

from __future__ import annotations

import sys
import time
import warnings
from types import SimpleNamespace
from typing import Any, Callable, Mapping

import numpy as np

from fluxline_threads import single_threaded_blas
from lgt.config import as_float, as_int
from lgt.errors import ConfigError, ResourceError
from lgt.model import ModelParams
from lgt.mps.chain import ChainMPS, Truncation, entropies
from lgt.mps.guards import estimate_mps_memory, estimate_mps_seconds
from lgt.mps.mpo import hamiltonian_mpo, physical_projector_mpo
from lgt.mps.tebd import ORDERS, GateEvolver
from lgt.observables import OBSERVABLES, occupations_from_mean_levels, particle_density
from lgt.basis import staggering
from lgt.gauss import implied_occupations
from lgt.resources import available_memory, count_physical_states
from lgt.results import RunResult, TimeSeries
from lgt.states import initial_fields, quench_params

MPS_KEYS = ("bond_dimension", "truncation", "max_step", "trotter_order", "max_discarded_weight")
DEFAULTS: dict[str, Any] = {"bond_dimension": 64, "truncation": 1e-12, "max_step": 0.1,
                            "trotter_order": 4, "max_discarded_weight": 1e-5}
#: Relative energy drift tolerated by default (Trotter and truncation errors; common practice).
MPS_DRIFT_TOLERANCE = 1e-4
#: Observables of the exact evolution that the MPS backend does not compute.
UNSUPPORTED: tuple[str, ...] = ()
#: Observables computed only when named in ``observables`` (their cost is not small; docs/mps.md).
OPT_IN = ("charge_correlation",)
#: MPS diagnostics stored as extra series (name → unit).
DIAGNOSTICS = {"entanglement_profile": "dimensionless", "bond_dimension": "dimensionless",
               "discarded_weight": "dimensionless", "energy_drift": "dimensionless",
               "leakage": "dimensionless"}


def resolve_mps_evolution(section: Mapping[str, Any], params: ModelParams,
                          limit_bytes: int | None) -> dict[str, Any]:
    """Validate the MPS keys of ``[evolution]``; check the memory estimate (no heavy work).

    Returns the keys to merge into the resolved ``evolution`` section.

    Raises
    ------
    ConfigError naming the key; ResourceError when the memory estimate exceeds the limit.
    """
    p = "evolution."
    chi = as_int(section.get("bond_dimension", DEFAULTS["bond_dimension"]), p + "bond_dimension", minimum=1)
    trunc = as_float(section.get("truncation", DEFAULTS["truncation"]), p + "truncation", minimum=0.0)
    if trunc >= 1:
        raise ConfigError(p + "truncation", trunc, "is a discarded weight per SVD and must be below 1")
    step = as_float(section.get("max_step", DEFAULTS["max_step"]), p + "max_step", positive=True)
    order = as_int(section.get("trotter_order", DEFAULTS["trotter_order"]), p + "trotter_order")
    if order not in ORDERS:
        raise ConfigError(p + "trotter_order", order, f"must be one of {ORDERS}")
    max_w = as_float(section.get("max_discarded_weight", DEFAULTS["max_discarded_weight"]),
                     p + "max_discarded_weight", positive=True)
    if params.n_links < 3:
        raise ConfigError("model.sites", params.sites, "method = \"mps\" needs at least 4 sites")
    requested = section.get("observables")
    if requested is not None:
        for name in requested:
            if name in UNSUPPORTED:
                raise ConfigError("evolution.observables", name, "is not available with method = \"mps\"")
    out: dict[str, Any] = {"bond_dimension": chi, "truncation": trunc, "max_step": step,
                           "trotter_order": order, "max_discarded_weight": max_w}
    if "drift_tolerance" not in section:
        out["drift_tolerance"] = MPS_DRIFT_TOLERANCE
    if requested is None:
        out["observables"] = [k for k in OBSERVABLES if k not in UNSUPPORTED + OPT_IN]
    need = estimate_mps_memory(params.n_links, params.levels, chi)
    limit = available_memory() if limit_bytes is None else limit_bytes
    if need > limit:
        raise ResourceError(f"N = {params.sites}, d = {params.levels}, bond dimension {chi}: the MPS run "
                            f"needs about {need / 2 ** 30:.1f} GiB, more than the {limit / 2 ** 30:.1f} GiB "
                            "available (lower evolution.bond_dimension or set memory_limit_gb)")
    return out


def estimates(params: ModelParams, ev: Mapping[str, Any], start_chi: float = 1.0) -> tuple[int, float]:
    """(peak bytes, single-core CPU seconds) estimated for a resolved MPS ``evolution`` section."""
    chi = int(ev["bond_dimension"])
    return (estimate_mps_memory(params.n_links, params.levels, chi),
            estimate_mps_seconds(params.n_links, params.levels, chi, np.asarray(ev["times"]),
                                 float(ev["max_step"]), int(ev["trotter_order"]), start_chi))


def load_factor() -> float:
    """Expected wall/CPU ratio of a single-threaded run now: max(1, (load average + 1) / cores)."""
    import os

    try:
        load, cores = os.getloadavg()[0], os.cpu_count() or 1
    except (OSError, AttributeError):  # pragma: no cover - platform without load average
        return 1.0
    return max(1.0, (load + 1.0) / cores)


def trotter_steps(times: np.ndarray, max_step: float) -> int:
    """Number of Trotter steps over the stored-time intervals."""
    gaps = np.diff(np.concatenate([[0.0], np.asarray(times, dtype=float)]))
    return int(sum(max(1, int(np.ceil(g / max_step - 1e-9))) for g in gaps if g > 0))


def initial_mps(params: ModelParams, initial: Mapping[str, Any], chi: int) -> ChainMPS:
    """The initial state: a product state of the field pattern, or the DMRG ground state."""
    if initial["kind"] == "ground":
        from lgt.mps import require_tenpy
        from lgt.mps.dmrg import ground_state

        require_tenpy("initial.kind")  # the DMRG start needs physics-tenpy

        return ground_state(quench_params(params, initial), chi=max(chi, 32))[1]
    levels = np.rint(initial_fields(params, initial) + params.spin).astype(int)
    return ChainMPS.product(levels, params.levels)


class MPSObserver:
    """Measures the observables of :mod:`lgt.observables` (and MPS diagnostics) on a ChainMPS."""

    def __init__(self, params: ModelParams, reference: ChainMPS, cut: int, which: list[str]) -> None:
        self.params = params
        self.reference = reference.copy()
        self.cut = cut
        self.which = which
        self.mpo = hamiltonian_mpo(params)
        self.projector = physical_projector_mpo(params)
        self._model = SimpleNamespace(params=params)  # what occupations_from_mean_levels reads

    def measure(self, psi: ChainMPS) -> dict[str, Any]:
        p = self.params
        norm = psi.norm() ** 2
        weights, schmidt = psi.sweep_measure()
        values = p.field_values
        mean_levels = weights @ np.arange(p.levels)
        occ = occupations_from_mean_levels(mean_levels, self._model, norm)
        profile = [entropies(s) for s in schmidt]
        energy = psi.expectation(self.mpo).real
        overlap = self.reference.overlap(psi)
        echo = float(abs(overlap) ** 2)
        full = {
            "electric_field": weights @ values,
            "electric_field_squared": weights @ values ** 2,
            "occupation": occ,
            "charge": occ - staggering(p.sites),
            "particle_density": particle_density(occ),
            "string_length": float((weights @ np.abs(values - p.boundary_field)).sum()),
            "loschmidt_echo": echo,
            "loschmidt_rate": float(-np.log(echo) / p.sites) if echo > 0 else np.inf,
            "entanglement_entropy": profile[self.cut - 1][0],
            "renyi2_entropy": profile[self.cut - 1][1],
            "energy": float(energy),
            "norm": float(norm),
            "entanglement_profile": np.array([s[0] for s in profile]),
            "bond_dimension": psi.max_bond(),
            "discarded_weight": psi.discarded,
            "leakage": float(max(0.0, norm - psi.expectation(self.projector).real)),
        }
        if "charge_correlation" in self.which:
            full["charge_correlation"] = self.charge_covariance(psi)
        return full

    def charge_covariance(self, psi: ChainMPS) -> np.ndarray:
        """⟨Q_i Q_j⟩ − ⟨Q_i⟩⟨Q_j⟩ (N, N): Q_n = L_n − L_{n−1} + const (Gauss's law, linear), so the
        covariance is the double difference of the field covariance; ``norm = 0`` makes the
        Gauss map homogeneous (boundary links and site steps are constants)."""
        p = self.params
        field = psi.diagonal_covariance(np.tile(p.field_values, (p.n_links, 1)))
        rows = implied_occupations(field, p, 0.0)          # (K, N)
        return implied_occupations(rows.T, p, 0.0)         # (N, N), symmetric


def run_mps_evolution(resolved: Mapping[str, Any], progress: bool = False,
                      callback: Callable[[int, ChainMPS], None] | None = None) -> RunResult:
    """Run a validated ``method = "mps"`` evolution (see the module docstring).

    ``callback(index, psi)`` receives the ChainMPS at every stored time (do not modify it).
    """
    from lgt.evolution import _progress_bar

    params = ModelParams.from_dict(resolved["model"])
    ev = resolved["evolution"]
    times = np.asarray(ev["times"], dtype=float)
    chi = int(ev["bond_dimension"])
    trunc = Truncation(chi, float(ev["truncation"]))
    est_bytes, est_seconds = estimates(params, ev, 1.0 if resolved["initial"]["kind"] != "ground" else 32.0)
    if progress:
        load = load_factor()
        print(f"MPS run: about {est_bytes / 2 ** 30:.2f} GiB and {est_seconds:.0f} s of CPU"
              + (f" (≈ {est_seconds * load:.0f} s wall at the current load)" if load > 1.05 else "")
              + " (estimate, docs/mps.md)", file=sys.stderr)
    t0 = time.perf_counter()
    with single_threaded_blas():
        evolver = GateEvolver(params, trunc, order=int(ev["trotter_order"]), max_step=float(ev["max_step"]))
        t1 = time.perf_counter()
        psi = initial_mps(params, resolved["initial"], chi)
        observer = MPSObserver(params, psi, int(ev["cut"]), list(ev["observables"]))
        t2 = time.perf_counter()
        records: list[dict[str, Any]] = []
        bar = _progress_bar(times.size, progress)
        t_now = 0.0
        observe = 0.0
        try:
            for index, t in enumerate(times):
                evolver.evolve(psi, float(t) - t_now)
                t_now = float(t)
                if callback is not None:
                    callback(index, psi)
                tm = time.perf_counter()
                records.append(observer.measure(psi))
                observe += time.perf_counter() - tm
                bar.update(1)
        finally:
            bar.close()
    t3 = time.perf_counter()
    energy = np.array([r["energy"] for r in records])
    drift = np.abs(energy - energy[0]) / max(abs(energy[0]), 1.0)
    for r, dr in zip(records, drift):
        r["energy_drift"] = float(dr)
    norm = np.array([r["norm"] for r in records])
    discarded = float(records[-1]["discarded_weight"])
    tol = float(ev["drift_tolerance"])
    flag_w = discarded > float(ev["max_discarded_weight"])
    flag_e = float(drift.max()) > tol
    if flag_w or flag_e:
        warnings.warn(f"MPS run not converged: summed discarded weight {discarded:.2e} "
                      f"(threshold {ev['max_discarded_weight']:g}), relative energy drift "
                      f"{drift.max():.2e} (threshold {tol:g}); raise evolution.bond_dimension "
                      "or lower evolution.max_step", RuntimeWarning, stacklevel=2)
    names = list(ev["observables"]) + list(DIAGNOSTICS)
    units = {**OBSERVABLES, **DIAGNOSTICS}
    series = {n: TimeSeries(times=times, values=np.asarray([r[n] for r in records]), unit=units[n])
              for n in names}
    dim = count_physical_states(params)
    attributes = {"method": "mps", "dimension": dim if dim < 2 ** 62 else float(dim),
                  "register_dimension": float(params.levels) ** params.n_links,
                  "cut": int(ev["cut"]), "energy_drift": float(drift.max()),
                  "norm_drift": float(np.max(np.abs(norm - 1.0))), "initial_energy": float(energy[0]),
                  "bond_dimension": chi, "max_bond_dimension": int(max(r["bond_dimension"] for r in records)),
                  "discarded_weight": discarded, "max_leakage": float(max(r["leakage"] for r in records)),
                  "flag_discarded_weight": bool(flag_w), "flag_energy_drift": bool(flag_e),
                  "trotter_steps": trotter_steps(times, float(ev["max_step"])),
                  "estimated_bytes": est_bytes, "estimated_seconds": est_seconds}
    return RunResult(task="evolve", parameters=dict(resolved), series=series,
                     arrays={"field_values": params.field_values}, attributes=attributes,
                     timings={"build": t1 - t0, "prepare": t2 - t1, "evolve": t3 - t2 - observe,
                              "observe": observe})


__all__ = ["resolve_mps_evolution", "run_mps_evolution", "MPSObserver", "initial_mps", "MPS_KEYS",
           "DEFAULTS", "UNSUPPORTED", "OPT_IN", "DIAGNOSTICS"]
