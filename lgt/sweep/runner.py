"""Run a sweep: validate everything, skip complete runs, execute the rest, store as they finish."""

from __future__ import annotations

import sys
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping, TextIO

from lgt.errors import EXIT_INTERRUPTED
from lgt.signals import deferred, describe, status_of, stop_on_signals
from lgt.sweep.executors import Executor, SerialExecutor, WorkerLost
from lgt.sweep.plan import SweepPlan, expand_sweep
from lgt.sweep.store import SweepStore
from lgt.sweep.work import execute_point


@dataclass
class SweepSummary:
    """Counts of one sweep invocation."""

    total: int
    skipped: int
    completed: int
    failed: int
    interrupted: bool
    seconds: float
    #: Exit status of the interruption (130 SIGINT, 143 SIGTERM/SIGHUP) when interrupted.
    interrupt_status: int = EXIT_INTERRUPTED

    @property
    def exit_code(self) -> int:
        """0 when every run is complete, 1 if any failed, 130/143 when interrupted."""
        return self.interrupt_status if self.interrupted else (1 if self.failed else 0)


def run_sweep(config: Mapping[str, Any], output: str | Path, executor: Executor | None = None,
              *, overwrite: bool = False, progress: bool = True, merge_every: float = 30.0,
              stream: TextIO | None = None, resume_hint: str | None = None,
              plan: SweepPlan | None = None) -> SweepSummary:
    """Expand, validate and run the sweep in ``config``, storing runs in ``output``.

    Every point is validated and the output checked before the first run starts. Complete
    runs already in ``output`` are skipped. On Ctrl-C, SIGTERM or SIGHUP no new run starts,
    the runs finished so far are kept, every worker is stopped and reaped, and a message says
    how to resume; the summary then has ``interrupted=True`` (exit code 130 or 143). A second
    signal ends the process at once (:mod:`lgt.signals`). A run whose worker process died is
    retried on a fresh worker, then recorded as failed with the reason. ``plan`` may pass
    the result of ``expand_sweep(config)`` when the caller already has it.

    Raises
    ------
    ConfigError
        Bad sweep configuration (naming key and point) or an output from another config.
    """
    stream = stream or sys.stderr
    with stop_on_signals():
        return _run(config, output, executor, overwrite, progress, merge_every, stream,
                    resume_hint, plan)


def _run(config: Mapping[str, Any], output: str | Path, executor: Executor | None,
         overwrite: bool, progress: bool, merge_every: float, stream: TextIO,
         resume_hint: str | None, plan: SweepPlan | None) -> SweepSummary:
    started = time.perf_counter()
    plan = plan or expand_sweep(config)
    store = SweepStore(output, plan, overwrite=overwrite, merge_every=merge_every)
    done = store.open()
    todo = [p for p in plan.points if p.run_id not in done]
    executor = executor or SerialExecutor()
    completed = failed = 0
    stop: KeyboardInterrupt | None = None
    finished = False
    bar = _progress(len(plan.points), len(plan.points) - len(todo), progress, stream)
    try:
        jobs = [(plan.task, p.config) for p in todo]
        for index, outcome in executor.run(execute_point, jobs):
            point = todo[index]
            if isinstance(outcome, WorkerLost):
                error, info = outcome.message(), {}
            else:
                error, info = outcome.error, outcome.info
            with deferred():  # a stop signal waits until this finished run is stored
                if error is None:
                    store.add(point, outcome.result, info)
                    completed += 1
                else:
                    store.add_failure(point, error, info)
                    failed += 1
            if error is not None:
                print(f"run {point.run_id} (point {point.index}) failed: "
                      f"{error.splitlines()[0]}", file=stream)
            if bar is not None:
                bar.update(1)
                bar.set_postfix(failed=failed, refresh=False)
        finished = True
    except KeyboardInterrupt as exc:
        stop = exc
    finally:
        if bar is not None:
            bar.close()
        try:
            with deferred():  # a signal now waits for the workers' reaping and the merge
                executor.shutdown(cancel=not finished)  # every worker is stopped and reaped
                store.close()
        except KeyboardInterrupt as exc:
            stop = stop or exc
    summary = SweepSummary(total=len(plan.points), skipped=len(plan.points) - len(todo),
                           completed=completed, failed=failed, interrupted=stop is not None,
                           seconds=time.perf_counter() - started,
                           interrupt_status=status_of(stop) if stop else EXIT_INTERRUPTED)
    if stop is not None:
        done_now = summary.skipped + completed
        print(f"{describe(stop)}: {done_now} of {summary.total} runs are complete in {output}. "
              f"To resume, run the same command again"
              + (f":\n  {resume_hint}" if resume_hint else ".")
              + "\nComplete runs are kept and skipped.", file=stream)
    return summary


def _progress(total: int, initial: int, enabled: bool, stream: TextIO) -> Any:
    if not enabled:
        return None
    from tqdm import tqdm

    return tqdm(total=total, initial=initial, unit="run", file=stream, dynamic_ncols=True,
                desc="sweep")
