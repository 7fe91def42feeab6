"""Run a sweep: validate everything, skip complete runs, execute the rest, store as they finish."""

from __future__ import annotations

import sys
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping, TextIO

from lgt.sweep.executors import Executor, SerialExecutor
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

    @property
    def exit_code(self) -> int:
        """0 when every run is complete, 1 if any failed, 130 when interrupted."""
        return 130 if self.interrupted else (1 if self.failed else 0)


def run_sweep(config: Mapping[str, Any], output: str | Path, executor: Executor | None = None,
              *, overwrite: bool = False, progress: bool = True, merge_every: float = 30.0,
              stream: TextIO | None = None, resume_hint: str | None = None,
              plan: SweepPlan | None = None) -> SweepSummary:
    """Expand, validate and run the sweep in ``config``, storing runs in ``output``.

    Every point is validated and the output checked before the first run starts. Complete
    runs already in ``output`` are skipped. On Ctrl-C the runs finished so far are kept and a
    message says how to resume; the summary then has ``interrupted=True``. ``plan`` may pass
    the result of ``expand_sweep(config)`` when the caller already has it.

    Raises
    ------
    ConfigError
        Bad sweep configuration (naming key and point) or an output from another config.
    """
    stream = stream or sys.stderr
    started = time.perf_counter()
    plan = plan or expand_sweep(config)
    store = SweepStore(output, plan, overwrite=overwrite, merge_every=merge_every)
    done = store.open()
    todo = [p for p in plan.points if p.run_id not in done]
    executor = executor or SerialExecutor()
    completed = failed = 0
    interrupted = False
    bar = _progress(len(plan.points), len(plan.points) - len(todo), progress, stream)
    try:
        jobs = [(plan.task, p.config) for p in todo]
        for index, outcome in executor.run(execute_point, jobs):
            point = todo[index]
            if outcome.error is None:
                store.add(point, outcome.result, outcome.info)
                completed += 1
            else:
                store.add_failure(point, outcome.error, outcome.info)
                failed += 1
                print(f"run {point.run_id} (point {point.index}) failed: "
                      f"{outcome.error.splitlines()[0]}", file=stream)
            if bar is not None:
                bar.update(1)
                bar.set_postfix(failed=failed, refresh=False)
    except KeyboardInterrupt:
        interrupted = True
    finally:
        if bar is not None:
            bar.close()
        executor.shutdown(cancel=interrupted)
        store.close()
    summary = SweepSummary(total=len(plan.points), skipped=len(plan.points) - len(todo),
                           completed=completed, failed=failed, interrupted=interrupted,
                           seconds=time.perf_counter() - started)
    if interrupted:
        done_now = summary.skipped + completed
        print(f"interrupted: {done_now} of {summary.total} runs are complete in {output}. "
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
