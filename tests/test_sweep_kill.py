"""SIGKILL during a sweep: the output stays readable, no complete run is lost or recomputed,
and the resumed sweep equals an uninterrupted one."""

from __future__ import annotations

import os
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

import h5py
import numpy as np
import pytest

from lgt.config import load_config
from lgt.sweep import list_runs, load_sweep, run_sweep
from lgt.sweep.executors import ProcessPoolRunner
from lgt.sweep.pinning import single_thread_environ
from sweep_configs import spectrum_sweep

HEAVY = spectrum_sweep(14, 3, '"model.mass" = [0.1, 0.3, 0.5, 0.7, 0.9]')

LIGHT = spectrum_sweep(8, 3, '"model.mass" = [0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 1.0, 1.1, 1.2, 1.3, 1.4, 1.5]\n'
                          '"model.coupling" = [0.5, 1.0, 1.5, 2.0]')


def _start(config: Path, out: Path) -> subprocess.Popen:
    env = {**os.environ, **single_thread_environ(),
           "PYTHONPATH": str(Path(__file__).resolve().parents[1])}
    return subprocess.Popen([sys.executable, "-m", "lgt.sweep", str(config), "--output", str(out),
                             "--no-progress", "--merge-every", "0"],
                            env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)


def _complete(out: Path) -> dict[str, float]:
    """run id -> finished_at of complete runs; opening the file must always work."""
    if not out.exists():
        return {}
    with h5py.File(out, "r") as f:  # readable whatever the moment of the kill
        assert f.attrs["sweep_config_hash"]
    return {r["run_id"]: r["finished_at"] for r in list_runs(out) if r["status"] == "complete"}


def _kill_when(proc: subprocess.Popen, out: Path, at_least: int, extra_delay: float) -> None:
    deadline = time.monotonic() + 120
    while len(_complete(out)) < at_least:
        assert proc.poll() is None, proc.stderr.read().decode()
        assert time.monotonic() < deadline, "sweep made no progress"
        time.sleep(0.02)
    time.sleep(extra_delay)
    proc.send_signal(signal.SIGKILL)
    proc.wait()


def _kill_and_resume(tmp_path: Path, text: str, kills: list[tuple[int, float]]) -> Path:
    config = tmp_path / "sweep.toml"
    config.write_text(text)
    out = tmp_path / "killed.h5"
    before_kill: dict[str, float] = {}
    for at_least, delay in kills:
        proc = _start(config, out)
        _kill_when(proc, out, at_least, delay)
        assert proc.returncode == -signal.SIGKILL
        now = _complete(out)
        assert before_kill.items() <= now.items()  # nothing complete was lost or redone
        before_kill = now
    n_points = len(load_config(config)["sweep"]["grid"]["model.mass"]) * len(
        load_config(config)["sweep"]["grid"].get("model.coupling", [0]))
    assert len(before_kill) < n_points, "the kills came too late to test anything"
    proc = _start(config, out)
    assert proc.wait(timeout=300) == 0, proc.stderr.read().decode()
    final = _complete(out)
    assert len(final) == n_points
    assert {k: final[k] for k in before_kill} == before_kill  # not recomputed
    assert not (tmp_path / "killed.h5.parts").exists()
    assert not [p for p in tmp_path.iterdir() if p.name.endswith(".tmp")]
    return config


def _assert_equal_to_uninterrupted(config: Path, killed: Path, tmp_path: Path) -> None:
    reference = tmp_path / "reference.h5"
    with ProcessPoolRunner(2) as pool:  # one BLAS thread per run, as in the killed sweep
        run_sweep(load_config(config), reference, pool, progress=False)
    a, b = load_sweep(killed), load_sweep(reference)
    assert list(a["run_id"]) == list(b["run_id"])
    np.testing.assert_allclose(a["energies"], b["energies"], rtol=0, atol=1e-10)
    np.testing.assert_array_equal(a["model.mass"], b["model.mass"])


def test_sigkill_mid_run_then_resume(tmp_path):
    # Each run takes ~1-2 s (one BLAS thread): kill once during the third run and once just after a run
    # finished (while its part file is written and merged).
    config = _kill_and_resume(tmp_path, HEAVY, [(2, 0.3), (3, 0.0)])
    _assert_equal_to_uninterrupted(config, tmp_path / "killed.h5", tmp_path)


@pytest.mark.slow
def test_many_random_sigkills_during_writes(tmp_path):
    # Runs of a few milliseconds with a merge after every run: most kills land inside HDF5
    # writes (part files or copy-on-write merges of the main file).
    rng = random.Random(7)
    kills = [(k, rng.uniform(0.0, 0.05)) for k in range(1, 46, 3)]  # the last kill well before run 60
    config = _kill_and_resume(tmp_path, LIGHT, kills)
    _assert_equal_to_uninterrupted(config, tmp_path / "killed.h5", tmp_path)
