"""Exact quench dynamics in the physical subspace (task ``evolve``).

ψ(t) = exp(−iHt) ψ₀ with H the real symmetric Gauss-law Hamiltonian (lattice units, ħ = 1),
propagated by the one exact propagator :class:`lgt.propagation.ExactPropagator` (Chebyshev by
default, or ``expm_multiply``). Observables (:mod:`lgt.observables`) are taken at every stored
time — the entanglement entropies at their own stride on large cuts (:func:`entropy_stride`) —
in a background thread; energy and norm drifts are recorded and warned on.

``[evolution]`` keys: ``t_final`` and ``dt`` (t = 0, dt, …, t_final) or ``times`` (a strictly
increasing list, t ≥ 0); optional ``cut`` (entanglement cut, default K // 2), ``observables``
(subset of :data:`lgt.observables.OBSERVABLES`), ``drift_tolerance`` (default 1e-8),
``memory_limit_gb`` (default: the memory available now), ``method`` and ``entropy_stride``
(integer ≥ 1 or ``"auto"``, the default)."""

from __future__ import annotations

import sys
import time
import warnings
from collections import deque
from concurrent.futures import Future, ThreadPoolExecutor
from typing import Any, Callable, Iterator, Mapping

import numpy as np

from lgt.basis import PhysicalBasis
from lgt.config import as_choice, as_float, as_int, check_keys
from lgt.errors import ConfigError
from lgt.hamiltonian import build_hamiltonian
from lgt.observables import OBSERVABLES, Observer, cut_structure
from lgt.propagation import MAX_BLOCK_TIMES, METHODS, ExactPropagator, SchrodingerOperator, product_threads  # noqa: F401
from lgt.resources import (available_memory, check_resources, count_physical_states,  # noqa: F401
                           estimate_memory)
from lgt.resolved import EvolutionConfig
from lgt.results import RunResult, TimeSeries
from lgt.states import prepare_initial_state

EVOLUTION_KEYS = ("t_final", "dt", "times", "cut", "observables", "drift_tolerance", "memory_limit_gb",
                  "method", "entropy_stride", "bond_dimension", "truncation", "max_step", "trotter_order",
                  "max_discarded_weight")
#: Methods of ``[evolution] method``: the exact propagators, or "mps" (tensor networks, lgt.mps.evolve).
EVOLUTION_METHODS = METHODS + ("mps",)
DEFAULT_DRIFT_TOLERANCE = 1e-8
#: Most stored times a run may ask for.
MAX_STORED_TIMES = 1_000_000
#: Below this dimension observables are measured inline instead of in a background thread.
BACKGROUND_MEASURE_DIMENSION = 20_000
#: States waiting for the measurement thread at most (bounds memory: each is 16·dim bytes).
MAX_PENDING = 2
#: With ``entropy_stride = "auto"`` the entropies take at most 1/ENTROPY_SHARE of the propagation.
ENTROPY_SHARE = 4
#: Below this many eigensolve flops in total (n_times × side³) the entropies take every stored time.
ENTROPY_FREE_FLOPS = 1e9
ENTROPIES = ("entanglement_entropy", "renyi2_entropy")


# ---------------------------------------------------------------------- configuration
def resolve_times(section: Mapping[str, Any]) -> np.ndarray:
    """Stored times from ``t_final``/``dt`` or ``times`` (lattice time units)."""
    has_grid = "t_final" in section or "dt" in section
    if "times" in section:
        if has_grid:
            raise ConfigError("evolution.times", section["times"], "give either times or t_final and dt, not both")
        raw = section["times"]
        if not isinstance(raw, (list, tuple)) or not raw:
            raise ConfigError("evolution.times", raw, "must be a non-empty list of times")
        if len(raw) > MAX_STORED_TIMES:
            raise ConfigError("evolution.times", raw, f"more than {MAX_STORED_TIMES:.0e} stored times")
        times = np.array([as_float(t, "evolution.times", minimum=0.0) for t in raw])
        if np.any(np.diff(times) <= 0):
            raise ConfigError("evolution.times", raw, "must be strictly increasing")
        return times
    if "t_final" not in section:
        raise ConfigError("evolution.t_final", None, "is required (or give evolution.times)")
    t_final = as_float(section["t_final"], "evolution.t_final", positive=True)
    if "dt" not in section:
        raise ConfigError("evolution.dt", None, "is required with t_final")
    dt = as_float(section["dt"], "evolution.dt", positive=True)
    if t_final / dt > MAX_STORED_TIMES:
        raise ConfigError("evolution.dt", dt, f"gives more than {MAX_STORED_TIMES:.0e} stored times")
    steps = int(round(t_final / dt))
    if steps < 1 or abs(steps * dt - t_final) > 1e-9 * t_final:
        raise ConfigError("evolution.dt", dt, f"t_final = {t_final} must be a whole multiple of dt")
    if steps > MAX_STORED_TIMES:
        raise ConfigError("evolution.dt", dt, f"gives {steps} stored times; at most 1e6")
    return np.round(np.arange(steps + 1) * dt, 12)


def validate_evolution_config(config: Mapping[str, Any]) -> EvolutionConfig:
    """Resolve ``[model]``, ``[initial]``, ``[evolution]`` for the evolve task (no heavy work).

    A resolved :class:`~lgt.resolved.EvolutionConfig` is returned as is (validated once).

    Raises
    ------
    ConfigError
        Naming the offending key.
    ResourceError
        When the estimated memory exceeds ``memory_limit_gb`` (default: available memory).
    """
    if isinstance(config, EvolutionConfig):
        return config
    from lgt.modelcheck import checked_initial, checked_model, guard_memory

    params = checked_model(config)
    initial = checked_initial(config, params)
    section = config.get("evolution")
    if not isinstance(section, Mapping):
        raise ConfigError("evolution", section, "section (a table with t_final and dt, or times) is required")
    check_keys(section, EVOLUTION_KEYS, "evolution")
    times = resolve_times(section)
    K = params.n_links
    if K < 2:
        raise ConfigError("model.sites", params.sites, "evolution needs at least 4 sites (2 links for a cut)")
    cut = as_int(section.get("cut", K // 2), "evolution.cut", minimum=1)
    if cut > K - 1:
        raise ConfigError("evolution.cut", cut, f"must be in 1..{K - 1} (K = {K} links)")
    observables = section.get("observables", list(OBSERVABLES))
    if not isinstance(observables, (list, tuple)) or not observables:
        raise ConfigError("evolution.observables", observables, "must be a non-empty list of names")
    for name in observables:
        if not isinstance(name, str) or name not in OBSERVABLES:
            raise ConfigError("evolution.observables", name,
                              f"unknown observable; known: {', '.join(OBSERVABLES)}")
    tol = as_float(section.get("drift_tolerance", DEFAULT_DRIFT_TOLERANCE),
                   "evolution.drift_tolerance", positive=True, maximum=1.0)
    method = as_choice(section.get("method", METHODS[0]), "evolution.method", EVOLUTION_METHODS)
    stride = section.get("entropy_stride", "auto")
    if stride != "auto":
        stride = as_int(stride, "evolution.entropy_stride", minimum=1, maximum=MAX_STORED_TIMES)
    gb = None
    if "memory_limit_gb" in section:
        gb = as_float(section["memory_limit_gb"], "evolution.memory_limit_gb", positive=True)
    limit = None if gb is None else int(gb * 2 ** 30)
    mps = None
    if method == "mps":  # MPS keys, memory and time estimate: lgt.mps.evolve
        from lgt.mps.evolve import resolve_mps_evolution

        mps = resolve_mps_evolution(section, params, limit)
        tol = mps.pop("drift_tolerance", tol)
        observables = mps.pop("observables", observables)
    else:
        guard_memory(params, "evolve", limit_bytes=limit, limit_key="[evolution] memory_limit_gb")
    return EvolutionConfig(params, initial, tuple(float(t) for t in times), cut,
                           tuple(dict.fromkeys(observables)), tol, method, gb, stride, mps)


# ---------------------------------------------------------------------- propagation
def propagate(prop: ExactPropagator, psi0: np.ndarray, times: np.ndarray) -> Iterator[tuple[int, np.ndarray]]:
    """Yield (index, ψ(times[index])) for every stored time (see :class:`ExactPropagator`)."""
    return prop.states(psi0, times)


def entropy_stride(setting: int | str, basis: PhysicalBasis, cut: int, times: np.ndarray,
                   nonzeros: int, half_width: float) -> int:
    """Stored-time stride of the entanglement entropies (``[evolution] entropy_stride``).

    An integer is used as given. ``"auto"`` (default): the entropies may take at most
    1/:data:`ENTROPY_SHARE` of the propagation's time. One eigensolve of the reduced density
    matrix costs about side³ flops (side: the kept side of the cut), a stored time's share of
    the propagation about nonzeros × products per stored time; the two constants agree within a
    factor 2 on this machine (measured, docs/performance.md). When all the eigensolves together
    stay below :data:`ENTROPY_FREE_FLOPS` (about a second) every stored time is taken. The last
    stored time is always included.
    """
    if setting != "auto":
        return int(setting)
    side = min(cut_structure(basis, cut).shape)
    n = times.size
    if n * side ** 3 <= ENTROPY_FREE_FLOPS or n <= 2:
        return 1
    span = float(times[-1] - times[0])
    per_time = max(1.0, 2.0 * half_width * span / (n - 1)) + 35.0 / MAX_BLOCK_TIMES
    ratio = side ** 3 / (nonzeros * per_time)
    return max(1, min(n - 1, int(np.ceil(ENTROPY_SHARE * ratio))))


# ---------------------------------------------------------------------- the task
def run_evolution(config: Mapping[str, Any], progress: bool = False,
                  callback: Callable[[int, np.ndarray], None] | None = None) -> RunResult:
    """Run a quench: validate (if needed), build, propagate, measure at every stored time.

    Parameters
    ----------
    config : raw or resolved configuration (validated again either way) (``[model]``, ``[initial]``, ``[evolution]``).
    progress : show a tqdm bar on stderr.
    callback : called as ``callback(index, psi)`` at each stored time (e.g. to keep states).

    Returns
    -------
    RunResult
        ``series``: each selected observable (values per stored time; per-link arrays (T, K),
        per-site (T, N), correlations (T, N, N)); ``attributes``: dimension, cut,
        energy_drift (max |E(t) − E(0)| / max(|E(0)|, 1)), norm_drift (max |‖ψ‖² − 1|).
    """
    resolved = validate_evolution_config(config)  # idempotent on resolved configs
    if resolved.method == "mps":
        from lgt.mps.evolve import run_mps_evolution

        return run_mps_evolution(resolved, progress=progress, callback=callback)
    params = resolved.model
    ev = resolved["evolution"]
    times = np.asarray(ev["times"], dtype=float)
    t0 = time.perf_counter()
    basis = PhysicalBasis(params)
    H = build_hamiltonian(basis).tocsr()
    t1 = time.perf_counter()
    psi0 = prepare_initial_state(basis, resolved["initial"])
    # the propagator may hold H in its pattern format only: the CSR is freed here
    prop = ExactPropagator(H, method=ev.get("method", METHODS[0]), keep_matrix=False)
    nonzeros = int(H.nnz)
    del H
    which = list(ev["observables"])
    internal = list(dict.fromkeys(which + ["energy", "norm"]))
    observer = Observer(basis, None, reference=psi0, cut=ev["cut"], which=internal,
                        matvec=prop.hamiltonian_matvec, energy=prop.energy)
    stride = 1
    if set(ENTROPIES) & set(which):
        lo, hi = prop.interval_for(float(times[-1]))
        stride = entropy_stride(ev.get("entropy_stride", "auto"), basis, ev["cut"], times, nonzeros,
                                0.5 * (hi - lo))
    entropy_at = np.zeros(times.size, dtype=bool)
    entropy_at[::stride] = True
    entropy_at[-1] = True
    t2 = time.perf_counter()
    records: dict[str, list] = {name: [] for name in internal}
    bar = _progress_bar(times.size, progress)
    # measurements run in one background thread (the kernels release the GIL, so it overlaps the
    # products); at most MAX_PENDING states wait (bounded memory)
    pending: deque[Future] = deque()
    results: list[dict] = []

    def drain(limit: int) -> None:
        while len(pending) > limit:
            results.append(pending.popleft().result())
            bar.update(1)

    measurer = ThreadPoolExecutor(1)
    try:
        for index, psi in propagate(prop, psi0, times):
            if callback is not None:
                callback(index, psi)
            if basis.dimension < BACKGROUND_MEASURE_DIMENSION:
                results.append(observer.measure(psi, bool(entropy_at[index])))
                bar.update(1)
                continue
            pending.append(measurer.submit(observer.measure, psi, bool(entropy_at[index])))
            drain(MAX_PENDING)
        drain(0)
    finally:
        measurer.shutdown(cancel_futures=True)
        bar.close()
        prop.close()
    for values in results:
        for name, value in values.items():
            records[name].append(value)
    t3 = time.perf_counter()
    energy = np.asarray(records["energy"])
    norm = np.asarray(records["norm"])
    energy_drift = float(np.max(np.abs(energy - energy[0])) / max(abs(energy[0]), 1.0))
    norm_drift = float(np.max(np.abs(norm - 1.0)))
    tol = float(ev["drift_tolerance"])
    if energy_drift > tol or norm_drift > tol:
        warnings.warn(f"evolution drift above {tol:g}: relative energy drift {energy_drift:.2e}, "
                      f"norm drift {norm_drift:.2e}", RuntimeWarning, stacklevel=2)
    series = {name: TimeSeries(times=times[entropy_at] if name in ENTROPIES else times,
                               values=np.asarray(records[name]), unit=OBSERVABLES[name])
              for name in which}
    attributes = {"dimension": basis.dimension, "register_dimension": basis.register_dimension,
                  "cut": int(ev["cut"]), "energy_drift": energy_drift, "norm_drift": norm_drift,
                  "initial_energy": float(energy[0]), "hamiltonian_nonzeros": nonzeros,
                  "entropy_stride": int(stride), "hamiltonian_products": int(prop.products)}
    return RunResult(task="evolve", parameters=dict(resolved), series=series,
                     arrays={"field_values": params.field_values},
                     attributes=attributes,
                     timings={"build": t1 - t0, "prepare": t2 - t1, "evolve": t3 - t2})


class _NoBar:
    def update(self, n: int) -> None:
        pass

    def close(self) -> None:
        pass


def _progress_bar(total: int, enabled: bool):
    if not enabled:
        return _NoBar()
    from tqdm import tqdm

    return tqdm(total=total, desc="evolve", unit="t", file=sys.stderr)


__all__ = ["validate_evolution_config", "run_evolution", "propagate", "SchrodingerOperator", "entropy_stride",
           "product_threads",
           "count_physical_states", "estimate_memory", "check_resources", "resolve_times",
           "available_memory"]
