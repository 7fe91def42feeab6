"""Depth sizing on worker processes: the same search as :func:`lgt.variational.sizing.size_depth`,
with the depths (and families) fitted side by side and the same results.

The serial search fits D = 1, 2, … of each family in turn; depth D may stop early once it can no
longer win, at a bound that depends on the shallower depths (:meth:`DepthScan.abort`). Here a
pool of ``workers`` processes fits the depths the search will need next, and one depth ahead
per family speculatively. A depth fitted while shallower ones still run uses the bound of the
shallower depths *finished so far*, which is never tighter than the serial bound and tightens
as they finish (shared memory, read after every step); when its turn comes its trajectory is
cut at the serial bound (:func:`lgt.variational.stepper.truncated`). Each step's fit depends
only on the steps before it, so the rows, trajectories and chosen depths are those of the
serial run; only the timing columns differ. Depths the search turns out not to need are
cancelled (their fits stop at the next step). The noise simulations of finished depths run on
the pool too. Log lines come in the serial order; the step bar follows the depth the serial
search would be fitting.

Workers are forked where the platform can (Linux: they start at once with this process's
imports and compiled kernels, and a calling script needs no ``if __name__ == "__main__"``
guard), else spawned; they run BLAS on one thread each, and are used only when the run is worth
their start-up (see :func:`sizing_workers`).
"""

from __future__ import annotations

import multiprocessing
import os
import queue as queue_module
from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
from dataclasses import replace
from typing import Callable

import numpy as np

from lgt.basis import PhysicalBasis
from lgt.variational.budget import Costing
from lgt.variational.settings import VariationalSettings
from lgt.variational.sizing import DepthScan, SizingResult, depth_noise_columns, fit_depth, simulates_noise

#: Fit spaces smaller than this (amplitudes of the register or physical subspace) are sized in
#: this process when ``workers`` is left at its default: the whole search then takes a few
#: seconds, less than starting the workers (measured: 4-site chain, both families, 2.6 s).
PARALLEL_MIN_DIMENSION = 200
#: Seconds between checks of the workers' step reports while waiting for results.
POLL_SECONDS = 0.2

# worker-side state, set by _init_worker (shared arrays and the progress queue)
_SHARED: dict = {}


def default_workers() -> int:
    """min(2, usable cores): the documented default of ``[variational] workers``."""
    try:
        cores = len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        cores = os.cpu_count() or 1
    return max(1, min(2, cores))


def sizing_workers(settings: VariationalSettings, basis: PhysicalBasis) -> int:
    """Worker processes for a ``size`` run: ``settings.workers`` when given (≥ 1), else
    :func:`default_workers` for fit spaces of at least :data:`PARALLEL_MIN_DIMENSION`
    amplitudes and 1 below. Always 1 inside a daemonic process (a sweep's pool worker cannot
    start processes of its own) and with warm starts (depth D + 1 then needs depth D's fit)."""
    from lgt.variational import sizing

    if multiprocessing.current_process().daemon or (settings.fast_fit and sizing.WARM_STARTS):
        return 1
    if settings.workers:
        return settings.workers
    big = max(basis.dimension, basis.register_dimension if basis.params.n_links >= 2 else 0)
    return default_workers() if big >= PARALLEL_MIN_DIMENSION else 1


def _init_worker(totals, cancel, steps, n_depths: int) -> None:
    from lgt.sweep.pinning import pin_blas_threads

    pin_blas_threads()
    _SHARED.update(totals=totals, cancel=cancel, steps=steps, n_depths=n_depths)


def _slot(family: int, layers: int) -> int:
    return family * _SHARED["n_depths"] + layers


def _fit_task(family: int, layers: int, basis: PhysicalBasis, psi0: np.ndarray, settings: VariationalSettings,
              threshold: float | None, noise: float, fast: bool):
    """Worker: fit one depth with the bound of the shallower depths finished so far."""
    totals, cancel, steps = _SHARED["totals"], _SHARED["cancel"], _SHARED["steps"]
    first = _slot(family, 0)

    def bound() -> float | None:
        if cancel[_slot(family, layers)]:
            return -1.0  # not needed any more: stop after this step
        if threshold is None or not fast or noise <= 0:
            return threshold
        best = max(totals[first:first + layers], default=0.0)
        return max(settings.tolerance, min(threshold, 1.0 - best / noise))

    def progress(k: int) -> None:
        steps.put((family, layers, k))

    traj, seconds, _ = fit_depth(basis, psi0, settings, layers, progress, bound, fast)
    return traj, seconds


def _noise_task(basis: PhysicalBasis, settings: VariationalSettings, profile, layers: int, traj):
    """Worker: the noise columns of one fitted depth (exceptions go back to the caller)."""
    return depth_noise_columns(basis, settings, profile, layers, traj)


class _Family:
    """Book-keeping of one family's search in the parallel run."""

    def __init__(self, index: int, basis, settings, costing, fast, baselines) -> None:
        self.index, self.settings, self.baselines = index, settings, baselines
        self.scan = DepthScan(basis, settings, costing, fast)
        self.submitted = 0  # deepest depth submitted
        self.fits: dict[int, Future] = {}
        self.noise: dict[int, Future] = {}
        self.simulate = False
        self.noise_logged = False
        self.messages: list[str] = []

    def wanted(self, layers: int) -> bool:
        """Whether the serial search may still fit ``layers``."""
        s = self.scan
        if s.finished or layers > self.settings.max_layers:
            return False
        return s.chosen is None or layers <= s.chosen + 1

    def done(self) -> bool:
        """All depths fitted and the noise lines written."""
        return self.scan.finished and self.noise_logged


def _futures(fams: list[_Family]) -> list[Future]:
    """The submitted tasks of every family that still run."""
    return [f for fam in fams for f in (*fam.fits.values(), *fam.noise.values())
            if isinstance(f, Future) and not f.done()]


def size_families(basis: PhysicalBasis, psi0: np.ndarray, families: list[VariationalSettings],
                  costing: Costing, log=None, fast: bool = True, workers: int = 2) -> dict[str, SizingResult]:
    """Size every family of ``families`` (the first with baselines) on ``workers`` processes;
    the same results as :func:`~lgt.variational.sizing.size_depth` run on each in turn."""
    methods = multiprocessing.get_all_start_methods()
    context = multiprocessing.get_context("fork" if "fork" in methods else "spawn")
    n_depths = max(s.max_layers for s in families) + 1
    totals = context.RawArray("d", len(families) * n_depths)
    cancel = context.RawArray("b", len(families) * n_depths)
    steps = context.Queue()
    fams = [_Family(i, basis, s, costing, fast, i == 0) for i, s in enumerate(families)]
    emit = log if log is not None else (lambda msg: None)
    step = getattr(log, "step", None)
    shown = 0  # families whose messages are all out
    pool = ProcessPoolExecutor(workers, mp_context=context, initializer=_init_worker,
                               initargs=(totals, cancel, steps, n_depths))
    try:
        while shown < len(fams):
            _fill(pool, workers, fams, basis, psi0, fast)
            running = _futures(fams)
            if running:
                wait(running, timeout=POLL_SECONDS, return_when=FIRST_COMPLETED)
            _relay_steps(steps, fams, shown, step)
            for fam in fams:
                _advance(fam, basis, costing, totals, cancel, n_depths, pool, log)
            while shown < len(fams) and fams[shown].done():
                for msg in fams[shown].messages:
                    emit(msg)
                fams[shown].messages.clear()
                shown += 1
            if shown < len(fams):  # the family being shown streams its lines as they come
                for msg in fams[shown].messages:
                    emit(msg)
                fams[shown].messages.clear()
    except BaseException:
        for i in range(len(cancel)):
            cancel[i] = 1
        pool.shutdown(wait=False, cancel_futures=True)
        raise
    pool.shutdown(wait=True)
    results = {}
    for fam in fams:
        columns = (lambda layers, fam=fam: fam.noise[layers].result()) if fam.simulate else None
        # the noise lines were shown already: the result is assembled silently
        results[fam.settings.family] = fam.scan.result(psi0, fam.baselines, None, columns)
    return results


def _fill(pool, workers: int, fams: list[_Family], basis, psi0, fast: bool) -> None:
    """Submit work while fewer than ``workers`` tasks run: first depths the serial search needs
    now, then noise simulations, then one speculative depth ahead per family."""
    def busy() -> int:
        return len(_futures(fams))

    def submit_fit(fam: _Family) -> None:
        layers = fam.submitted + 1
        scan = fam.scan
        fam.fits[layers] = pool.submit(_fit_task, fam.index, layers, basis, psi0, fam.settings,
                                       scan.thresholds[layers], scan.noise[layers], fast)
        fam.submitted = layers

    for needed in (True, False):
        for fam in fams:
            while busy() < workers and fam.wanted(fam.submitted + 1):
                ahead = fam.submitted + 1 - (fam.scan.next_depth() or 0)
                if ahead > (0 if needed else 1):
                    break
                submit_fit(fam)
        if needed:
            for fam in fams:
                for layers, fut in list(fam.noise.items()):
                    if isinstance(fut, _Deferred) and busy() < workers:
                        fam.noise[layers] = pool.submit(_noise_task, *fut.args)


class _Deferred:
    """A noise task waiting for a free worker (looks like an unfinished future)."""

    def __init__(self, *args) -> None:
        self.args = args

    def done(self) -> bool:
        return False


def _relay_steps(steps, fams: list[_Family], shown: int, step: Callable[[int], None] | None) -> None:
    """Pass on the step reports of the depth the serial search would be fitting."""
    current = next(((i, f.scan.next_depth()) for i, f in enumerate(fams[shown:], shown)
                    if f.scan.next_depth() is not None), None)
    while True:
        try:
            family, layers, k = steps.get_nowait()
        except queue_module.Empty:
            return
        if step is not None and (family, layers) == current:
            step(k)


def _advance(fam: _Family, basis, costing, totals, cancel, n_depths: int, pool, log) -> None:
    """Take the family's finished depths in order into its search; queue their noise runs."""
    scan = fam.scan
    while (layers := scan.next_depth()) is not None and layers in fam.fits and fam.fits[layers].done():
        traj, seconds = fam.fits.pop(layers).result()
        row, message = scan.add(layers, traj, seconds)
        totals[fam.index * n_depths + layers] = row.total_fidelity
        fam.messages.append(message)
        if layers == 1:
            fam.simulate = simulates_noise(basis, fam.settings)
        if fam.simulate:
            fam.noise[layers] = _Deferred(basis, fam.settings, costing.profile, layers, scan.trajectories[layers])
    if scan.finished:
        for layers, fut in list(fam.fits.items()):  # beyond the search: not needed
            cancel[fam.index * n_depths + layers] = 1
            fut.cancel()
        fam.fits.clear()
        if not fam.noise_logged and all(isinstance(f, Future) and f.done() for f in fam.noise.values()):
            fam.noise_logged = True
            _noise_messages(fam)


def _noise_messages(fam: _Family) -> None:
    """The noise log lines of a finished family (or why it was not simulated), as the serial
    search writes them."""
    from lgt.variational.sizing import add_noise_sizing

    rows = [replace(r) for r in fam.scan.rows]  # copies: the result is assembled later
    add_noise_sizing(fam.scan.basis, fam.settings, fam.scan.costing.profile, rows, fam.scan.trajectories,
                     fam.messages.append, lambda layers: fam.noise[layers].result())
