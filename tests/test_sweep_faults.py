"""Fault injection at process level: SIGTERM/SIGINT to the coordinator, a dead worker, a
SIGKILLed coordinator. Tiny models (N = 4) so each test takes a few seconds.

Expected behaviour is the POSIX process model (signal(7), prctl(2) PR_SET_PDEATHSIG): after
the coordinator is gone no worker may remain; exit statuses 128 + signal number (common shell
practice, no source beyond POSIX's "128 + n" convention for shells).
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import psutil
import pytest

from lgt.sweep import list_runs
from lgt.sweep.executors import MAX_ATTEMPTS, ProcessPoolRunner, WorkerLost
from lgt.sweep.pinning import single_thread_environ

import fault_helpers
from sweep_configs import meson_evolve_sweep

# 8 evolve runs of ~1 s each (N = 4, d = 3, 6 physical states, 801 stored times): long enough
# that a signal sent after two complete runs lands while the others are still running.
SWEEP = meson_evolve_sweep(8.0, 0.01, ["loschmidt_echo"],
                           '"model.mass" = [0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8]')
POINTS = 8


def _start(tmp_path: Path, *extra: str, stdout=subprocess.DEVNULL) -> subprocess.Popen:
    config = tmp_path / "sweep.toml"
    config.write_text(SWEEP)
    env = {**os.environ, **single_thread_environ(),
           "PYTHONPATH": str(Path(__file__).resolve().parents[1])}
    return subprocess.Popen([sys.executable, "-m", "lgt", "sweep", str(config), "--output",
                             str(tmp_path / "out.h5"), "--no-progress", "--merge-every", "0",
                             "--workers", "2", *extra],
                            env=env, stdout=stdout, stderr=subprocess.PIPE,
                            start_new_session=True)


def _complete(out: Path) -> dict[str, float]:
    if not out.exists():
        return {}
    try:
        return {r["run_id"]: r["finished_at"] for r in list_runs(out) if r["status"] == "complete"}
    except Exception:  # the main file is replaced atomically; a listing may race a merge
        return {}


def _wait_for(proc: subprocess.Popen, out: Path, at_least: int) -> tuple[list[int], list[int]]:
    """Wait until ``at_least`` runs are complete and both pool workers are alive; return the
    worker pids and the pids of every descendant (workers, multiprocessing's resource tracker)."""
    deadline = time.monotonic() + 60
    while True:
        assert proc.poll() is None, proc.stderr.read().decode()
        assert time.monotonic() < deadline, "sweep made no progress"
        children = psutil.Process(proc.pid).children(recursive=True)
        workers = [c.pid for c in children if "spawn_main" in " ".join(_cmdline(c))]
        if len(_complete(out)) >= at_least and len(workers) >= 2:
            return workers, [c.pid for c in children]
        time.sleep(0.05)


def _cmdline(process: psutil.Process) -> list[str]:
    try:
        return process.cmdline()
    except psutil.Error:
        return []


def _gone(pids: list[int], within: float = 5.0) -> bool:
    deadline = time.monotonic() + within
    while time.monotonic() < deadline:
        alive = []
        for pid in pids:
            try:
                if psutil.Process(pid).status() != psutil.STATUS_ZOMBIE:
                    alive.append(pid)
            except psutil.NoSuchProcess:
                pass
        if not alive:
            return True
        time.sleep(0.05)
    return False


def _resume(tmp_path: Path) -> None:
    proc = _start(tmp_path)
    assert proc.wait(timeout=120) == 0, proc.stderr.read().decode()


def test_sigterm_stops_reaps_workers_and_resumes_without_recomputing(tmp_path):
    out = tmp_path / "out.h5"
    proc = _start(tmp_path)
    _, everyone = _wait_for(proc, out, 2)
    proc.send_signal(signal.SIGTERM)
    assert proc.wait(timeout=20) == 143
    err = proc.stderr.read().decode()
    assert "Traceback" not in err
    assert "terminated (SIGTERM)" in err and "To resume" in err and "fluxline sweep" in err
    assert _gone(everyone), "worker processes outlived the coordinator"
    before = _complete(out)
    assert 2 <= len(before) < POINTS
    _resume(tmp_path)
    after = _complete(out)
    assert len(after) == POINTS
    assert {k: after[k] for k in before} == before  # nothing recomputed
    assert not [p for p in tmp_path.iterdir() if p.name.endswith((".tmp", ".lock", ".parts"))]


def test_sighup_is_handled_like_sigterm(tmp_path):
    proc = _start(tmp_path)
    _, everyone = _wait_for(proc, tmp_path / "out.h5", 1)
    proc.send_signal(signal.SIGHUP)
    assert proc.wait(timeout=20) == 143
    assert "terminated (SIGHUP)" in proc.stderr.read().decode()
    assert _gone(everyone)


def test_ctrl_c_twice_ends_at_once_without_traceback_or_orphans(tmp_path):
    proc = _start(tmp_path)
    _, everyone = _wait_for(proc, tmp_path / "out.h5", 1)
    started = time.monotonic()
    os.killpg(proc.pid, signal.SIGINT)  # a terminal's Ctrl-C goes to the whole process group
    os.killpg(proc.pid, signal.SIGINT)
    assert proc.wait(timeout=10) == 130
    assert time.monotonic() - started < 10
    assert "Traceback" not in proc.stderr.read().decode()
    assert _gone(everyone)


def test_killed_worker_costs_only_its_run(tmp_path):
    out = tmp_path / "out.h5"
    proc = _start(tmp_path)
    workers, _ = _wait_for(proc, out, 1)
    os.kill(workers[0], signal.SIGKILL)  # what the OOM killer does
    assert proc.wait(timeout=120) == 0, proc.stderr.read().decode()
    rows = list_runs(out)
    assert len(rows) == POINTS and all(r["status"] == "complete" for r in rows)


def test_sigkilled_coordinator_leaves_no_orphans_and_closes_the_pipe(tmp_path):
    # As in ``fluxline sweep ... | tee log``: the reader sees EOF once the coordinator is gone.
    proc = _start(tmp_path, stdout=subprocess.PIPE)
    _, everyone = _wait_for(proc, tmp_path / "out.h5", 1)
    eof = threading.Event()
    threading.Thread(target=lambda: (proc.stdout.read(), eof.set()), daemon=True).start()
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    assert _gone(everyone), "pool workers survived a SIGKILLed coordinator"
    assert eof.wait(5), "the output pipe stayed open"


# ---------------------------------------------------------------------- the pool's retries
def test_pool_retries_a_run_whose_worker_died(tmp_path):
    marker = tmp_path / "attempted"
    with ProcessPoolRunner(2) as pool:
        results = dict(pool.run(fault_helpers.die_once, [(1, str(marker)), (2, str(marker))]))
    assert marker.exists()
    assert results == {0: 101, 1: 102}


def test_pool_gives_up_after_max_attempts_with_the_reason(tmp_path):
    with ProcessPoolRunner(2) as pool:
        results = dict(pool.run(fault_helpers.square_or_die, [(x, 3) for x in range(6)]))
    assert {k: v for k, v in results.items() if k != 3} == {0: 0, 1: 1, 2: 4, 4: 16, 5: 25}
    lost = results[3]
    assert isinstance(lost, WorkerLost) and lost.attempts == MAX_ATTEMPTS
    assert "killed by SIGKILL" in lost.message()


@pytest.mark.slow
def test_dask_worker_that_disappears_is_reported(tmp_path):
    distributed = pytest.importorskip("distributed")
    import dask
    from lgt.sweep.executors import DaskRunner

    with dask.config.set({"distributed.scheduler.allowed-failures": MAX_ATTEMPTS - 1}), \
            distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                     dashboard_address=None) as cluster, \
            distributed.Client(cluster) as client, DaskRunner(client=client) as runner:
        results = dict(runner.run(fault_helpers.square_or_die, [(x, 2) for x in range(4)]))
    assert results[0] == 0 and results[3] == 9
    assert isinstance(results[2], WorkerLost)


@pytest.mark.slow
def test_many_random_sigterms_lose_and_recompute_nothing(tmp_path):
    import random

    rng = random.Random(143)
    out = tmp_path / "out.h5"
    seen: dict[str, float] = {}
    for _ in range(8):
        proc = _start(tmp_path)
        try:
            _, everyone = _wait_for(proc, out, min(len(seen) + 1, POINTS))
        except AssertionError:  # finished before we could interrupt it
            assert proc.wait(timeout=60) == 0
            break
        time.sleep(rng.uniform(0.0, 0.4))
        proc.send_signal(signal.SIGTERM)
        assert proc.wait(timeout=20) in (0, 143)
        assert "Traceback" not in proc.stderr.read().decode()
        assert _gone(everyone)
        now = _complete(out)
        assert seen.items() <= now.items()  # nothing lost, nothing recomputed
        seen = now
    _resume(tmp_path)
    final = _complete(out)
    assert len(final) == POINTS and {k: final[k] for k in seen} == seen
