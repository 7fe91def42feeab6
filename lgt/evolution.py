"""Exact quench dynamics in the physical subspace (task ``evolve``).

ψ(t) = exp(−iHt) ψ₀ with H the real symmetric Gauss-law Hamiltonian (lattice units, ħ = 1),
propagated by :func:`scipy.sparse.linalg.expm_multiply` (Al-Mohy & Higham 2011) on a complex128
state. −iH is applied without a complex copy of H: the real matrix multiplies the (dim, 2) real
view of ψ, split into row blocks that two threads process. Uniformly spaced stored times use the
start/stop/num form of ``expm_multiply`` in memory-bounded chunks; other time lists are stepped
one interval at a time. Observables (:mod:`lgt.observables`) are taken at every stored time;
energy and norm drifts are recorded and warned on.

``[evolution]`` keys: ``t_final`` and ``dt`` (t = 0, dt, …, t_final) or ``times`` (a strictly
increasing list, t ≥ 0); optional ``cut`` (entanglement cut, default K // 2), ``observables``
(subset of :data:`lgt.observables.OBSERVABLES`), ``drift_tolerance`` (default 1e-8) and
``memory_limit_gb`` (default: the memory available now).
"""

from __future__ import annotations

import os
import sys
import time
import warnings
from collections import deque
from concurrent.futures import Future, ThreadPoolExecutor
from typing import Any, Callable, Iterator, Mapping

import numpy as np
import scipy.sparse as sp
from scipy.sparse.linalg import LinearOperator, expm_multiply

from lgt.basis import PhysicalBasis
from lgt.chebyshev import ChebyshevPropagator, gershgorin_interval
from lgt.config import as_choice, as_float, as_int, check_keys
from lgt.errors import ConfigError
from lgt.hamiltonian import build_hamiltonian
from lgt.model import ModelParams
from circuits.blas_threads import single_threaded_blas
from lgt.observables import OBSERVABLES, Observer
from lgt.resources import (CHUNK_BYTES, available_memory, check_resources, count_physical_states,  # noqa: F401
                           estimate_memory)
from lgt.results import RunResult, TimeSeries
from lgt.states import prepare_initial_state, resolve_initial

EVOLUTION_KEYS = ("t_final", "dt", "times", "cut", "observables", "drift_tolerance", "memory_limit_gb",
                  "method", "bond_dimension", "truncation", "max_step", "trotter_order", "max_discarded_weight")
#: Propagators: Chebyshev series over blocks of stored times (default), or scipy's expm_multiply.
METHODS = ("chebyshev", "expm_multiply", "mps")  # "mps": tensor networks, lgt.mps.evolve
DEFAULT_DRIFT_TOLERANCE = 1e-8
#: Below this many non-zeros H is applied on the calling thread only.
THREADED_NONZEROS = 200_000
#: Below this dimension observables are measured inline instead of in a background thread.
BACKGROUND_MEASURE_DIMENSION = 20_000


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
    steps = int(round(t_final / dt))
    if steps < 1 or abs(steps * dt - t_final) > 1e-9 * t_final:
        raise ConfigError("evolution.dt", dt, f"t_final = {t_final} must be a whole multiple of dt")
    if steps > 1_000_000:
        raise ConfigError("evolution.dt", dt, f"gives {steps} stored times; at most 1e6")
    return np.round(np.arange(steps + 1) * dt, 12)


def validate_evolution_config(config: Mapping[str, Any]) -> dict[str, Any]:
    """Resolve ``[model]``, ``[initial]``, ``[evolution]`` for the evolve task (no heavy work).

    Raises
    ------
    ConfigError
        Naming the offending key.
    ResourceError
        When the estimated memory exceeds ``memory_limit_gb`` (default: available memory).
    """
    if "model" not in config:
        raise ConfigError("model", None, "section is required by the evolve task")
    params = ModelParams.from_dict(config["model"])
    initial = resolve_initial(config.get("initial"), params)
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
        if name not in OBSERVABLES:
            raise ConfigError("evolution.observables", name,
                              f"unknown observable; known: {', '.join(OBSERVABLES)}")
    tol = as_float(section.get("drift_tolerance", DEFAULT_DRIFT_TOLERANCE),
                   "evolution.drift_tolerance", positive=True)
    method = as_choice(section.get("method", METHODS[0]), "evolution.method", METHODS)
    resolved_ev: dict[str, Any] = {"times": [float(t) for t in times], "cut": cut,
                                   "observables": list(dict.fromkeys(observables)),
                                   "drift_tolerance": tol, "method": method}
    limit = None
    if "memory_limit_gb" in section:
        gb = as_float(section["memory_limit_gb"], "evolution.memory_limit_gb", positive=True)
        resolved_ev["memory_limit_gb"] = gb
        limit = int(gb * 2 ** 30)
    if method == "mps":  # MPS keys, memory and time estimate: lgt.mps.evolve
        from lgt.mps.evolve import resolve_mps_evolution
        resolved_ev.update(resolve_mps_evolution(section, params, limit))
    else:
        check_resources(params, limit)
    return {"model": params.to_dict(), "initial": initial, "evolution": resolved_ev}


# ---------------------------------------------------------------------- propagation
def product_threads() -> int:
    """Threads for sparse products: OMP_NUM_THREADS if set (sweep workers pin it to 1), else
    the CPUs this process may use, at most 4."""
    env = os.environ.get("OMP_NUM_THREADS", "")
    if env.isdigit() and int(env) > 0:
        return int(env)
    try:
        available = len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not on Linux
        available = os.cpu_count() or 1
    return max(1, min(available, 4))


class SchrodingerOperator(LinearOperator):
    """A = sign · (−i) (H − shift) for real symmetric sparse H, applied blockwise by threads.

    ``sign = −1`` gives the adjoint (needed by the 1-norm estimator of ``expm_multiply``).
    ``shift`` defaults to the midpoint of the diagonal, which minimises the diagonal's share of
    ‖A‖₁ (about 10 % below scipy's own trace/n shift at N = 20), so fewer Taylor terms are needed.
    """

    def __init__(self, H: sp.csr_matrix, threads: int | None = None, sign: int = 1,
                 shift: float | None = None, _blocks: list | None = None,
                 _pool: ThreadPoolExecutor | None = None) -> None:
        super().__init__(np.complex128, H.shape)
        self.matrix = H
        self.sign = sign
        if shift is None:
            diag = H.diagonal()
            shift = 0.5 * float(diag.max() + diag.min()) if diag.size else 0.0
        self.shift = shift
        if _blocks is None:
            if threads is None:  # thread dispatch costs more than it saves on small matrices
                threads = 1 if H.nnz < THREADED_NONZEROS else product_threads()
            edges = np.linspace(0, H.shape[0], threads + 1).astype(int)
            _blocks = [H[a:b] for a, b in zip(edges[:-1], edges[1:]) if b > a]
        self.blocks = _blocks
        self.pool = _pool if _pool is not None else (ThreadPoolExecutor(len(_blocks)) if len(_blocks) > 1 else None)

    def real_apply(self, x: np.ndarray) -> np.ndarray:
        """H x for real x of shape (dim, k)."""
        if self.pool is None:
            return self.matrix @ x
        return np.concatenate(list(self.pool.map(lambda B: B @ x, self.blocks)))

    def _matmat(self, X: np.ndarray) -> np.ndarray:
        X = np.ascontiguousarray(X, dtype=np.complex128)
        n, k = X.shape
        xr = X.view(np.float64).reshape(n, 2 * k)
        hx = self.real_apply(xr)
        if self.shift:
            hx -= self.shift * xr
        hx = hx.reshape(n, k, 2)
        out = np.empty((n, k), dtype=np.complex128)
        parts = out.view(np.float64).reshape(n, k, 2)
        # ∓i (a + ib) = ±b ∓ ia, written straight into the real view (no complex multiply)
        np.multiply(hx[..., 1], self.sign, out=parts[..., 0])
        np.multiply(hx[..., 0], -self.sign, out=parts[..., 1])
        return out

    def _matvec(self, x: np.ndarray) -> np.ndarray:
        return self._matmat(np.reshape(x, (-1, 1))).ravel()

    def _adjoint(self) -> "SchrodingerOperator":
        return SchrodingerOperator(self.matrix, sign=-self.sign, shift=self.shift,
                                   _blocks=self.blocks, _pool=self.pool)

    def hamiltonian_matvec(self, psi: np.ndarray) -> np.ndarray:
        """H ψ (complex ψ, real H; the shift added back)."""
        return self._matvec(psi) * (1j * self.sign) + self.shift * psi

    def close(self) -> None:
        if self.pool is not None:
            self.pool.shutdown()


def _uniform(times: np.ndarray) -> bool:
    if times.size < 3:
        return True
    steps = np.diff(times)
    return bool(np.allclose(steps, steps[0], rtol=1e-12, atol=0))


def propagate(op: SchrodingerOperator, psi0: np.ndarray, times: np.ndarray,
              chunk_bytes: int = CHUNK_BYTES, method: str = "chebyshev") -> Iterator[tuple[int, np.ndarray]]:
    """Yield (index, ψ(times[index])) for every stored time, ψ(0) = psi0.

    ``method="chebyshev"``: one Chebyshev recurrence per block of stored times (blocks hold at
    most ``chunk_bytes`` of vectors; see :mod:`lgt.chebyshev`). ``method="expm_multiply"``:
    uniform grids go through the start/stop/num form of ``expm_multiply`` in such chunks,
    other grids one call per interval.
    """
    if method == "chebyshev":
        yield from _propagate_chebyshev(op, psi0, times, chunk_bytes)
        return
    psi = np.ascontiguousarray(psi0, dtype=np.complex128)
    t_now = 0.0
    i = 0
    per_chunk = max(1, int(chunk_bytes // (16 * max(psi.size, 1))) - 1)
    uniform = _uniform(times)
    while i < times.size:
        if times[i] == t_now:
            yield i, psi
            i += 1
            continue
        k = min(per_chunk, times.size - i) if uniform and i > 0 else 1
        t_end = times[i + k - 1]
        with single_threaded_blas():  # vector algebra only; H products are threaded by ``op``
            # traceA = 0: ``op`` is already shifted, scipy must not shift again
            out = expm_multiply(op, psi, start=0.0, stop=t_end - t_now, num=k + 1, endpoint=True,
                                traceA=0.0)
        phases = np.exp(-1j * op.sign * op.shift * (np.asarray(times[i:i + k]) - t_now))
        for r in range(1, k + 1):
            out[r] *= phases[r - 1]  # restore the global phase of the shift
            yield i + r - 1, out[r]
        psi = np.ascontiguousarray(out[k])
        t_now = float(t_end)
        i += k
        del out


def _propagate_chebyshev(op: SchrodingerOperator, psi0: np.ndarray, times: np.ndarray,
                         chunk_bytes: int) -> Iterator[tuple[int, np.ndarray]]:
    """:func:`propagate` by Chebyshev blocks (H products threaded by ``op``)."""
    psi = np.ascontiguousarray(psi0, dtype=np.complex128)
    per_chunk = max(1, int(chunk_bytes // (16 * max(psi.size, 1))) - 1)
    prop = ChebyshevPropagator(op.real_apply, gershgorin_interval(op.matrix), 1.0)
    t_now, i = 0.0, 0
    while i < times.size:
        if times[i] == t_now:
            yield i, psi
            i += 1
            continue
        k = min(per_chunk, times.size - i)
        with single_threaded_blas():  # small dense algebra; H products are threaded by ``op``
            out = prop.block(psi, np.asarray(times[i:i + k]) - t_now)
        for r in range(k):
            yield i + r, out[r]
        psi = np.ascontiguousarray(out[k - 1])
        t_now = float(times[i + k - 1])
        i += k
        del out


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
    if resolved["evolution"]["method"] == "mps":
        from lgt.mps.evolve import run_mps_evolution
        return run_mps_evolution(resolved, progress=progress, callback=callback)
    params = ModelParams.from_dict(resolved["model"])
    ev = resolved["evolution"]
    times = np.asarray(ev["times"], dtype=float)
    t0 = time.perf_counter()
    basis = PhysicalBasis(params)
    H = build_hamiltonian(basis).tocsr()
    t1 = time.perf_counter()
    psi0 = prepare_initial_state(basis, resolved["initial"])
    op = SchrodingerOperator(H)
    which = list(ev["observables"])
    internal = list(dict.fromkeys(which + ["energy", "norm"]))
    observer = Observer(basis, H, reference=psi0, cut=ev["cut"], which=internal,
                        matvec=op.hamiltonian_matvec)
    t2 = time.perf_counter()
    records: dict[str, list] = {name: [] for name in internal}
    bar = _progress_bar(times.size, progress)
    # measurements run in one background thread, overlapping the single-threaded vector algebra
    # of expm_multiply; at most ``max_pending`` states wait (bounded memory)
    max_pending = max(2, int(CHUNK_BYTES // (16 * basis.dimension)))
    pending: deque[Future] = deque()
    results: list[dict] = []

    def drain(limit: int) -> None:
        while len(pending) > limit:
            results.append(pending.popleft().result())
            bar.update(1)

    measurer = ThreadPoolExecutor(1)
    try:
        for index, psi in propagate(op, psi0, times, method=ev.get("method", METHODS[0])):
            if callback is not None:
                callback(index, psi)
            if basis.dimension < BACKGROUND_MEASURE_DIMENSION:
                results.append(observer.measure(psi))
                bar.update(1)
                continue
            pending.append(measurer.submit(observer.measure, psi))
            drain(max_pending)
        drain(0)
    finally:
        measurer.shutdown(cancel_futures=True)
        bar.close()
        op.close()
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
    series = {name: TimeSeries(times=times, values=np.asarray(records[name]), unit=OBSERVABLES[name])
              for name in which}
    attributes = {"dimension": basis.dimension, "register_dimension": basis.register_dimension,
                  "cut": int(ev["cut"]), "energy_drift": energy_drift, "norm_drift": norm_drift,
                  "initial_energy": float(energy[0]), "hamiltonian_nonzeros": int(H.nnz)}
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


def _register() -> None:
    try:
        from lgt.tasks import register_task
    except ImportError:  # task registry not available in this checkout
        return
    register_task("evolve", validate_evolution_config, run_evolution,
                  sections=("model", "initial", "evolution"))


_register()

__all__ = ["validate_evolution_config", "run_evolution", "propagate", "SchrodingerOperator",
           "count_physical_states", "estimate_memory", "check_resources", "resolve_times",
           "available_memory"]
