"""Hostile files and full disks: symlinks, output checks, stale temporaries, large parameter
lists, unknown layout versions, byte flips, resource errors.

References: POSIX open(2) O_NOFOLLOW/O_EXCL and rename(2) semantics (a rename replaces a link,
it does not write through it); HDF5's 64 KiB object-header message limit for attributes and
the fletcher32 filter (HDF5 User's Guide, "Filters"; h5py docs, "Dataset filters").
"""

from __future__ import annotations

import errno
import os
import shutil
import socket
import subprocess
import sys
import warnings
from pathlib import Path

import h5py
import numpy as np
import pytest

from lgt.errors import ConfigError, FluxlineError, InputError, ResourceError
from lgt.files import atomic_h5, check_output_path, remove_stale_temporaries
from lgt.io import read_run_file, write_run_file
from lgt.results import RunResult, TimeSeries
from lgt.sweep import list_runs, load_sweep, run_sweep
from lgt.sweep.store import parts_dir
from sweep_configs import meson_evolve_sweep, spectrum_sweep

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

SPECTRUM = tomllib.loads(spectrum_sweep(4, 3, '"model.mass" = [0.1, 0.5, 0.9]'))


def _result(n_times: int = 5) -> RunResult:
    times = np.linspace(0.0, 1.0, n_times)
    return RunResult("evolve", {"evolution": {"times": times.tolist()}, "model": {"sites": 4}},
                     series={"energy": TimeSeries(times, np.ones(n_times), "lattice energy")},
                     arrays={"x": np.arange(3.0)}, attributes={"dimension": 6})


# ------------------------------------------------------------------ symbolic links
def test_planted_lock_symlink_is_refused_and_its_target_untouched(tmp_path):
    victim = tmp_path / "precious.txt"
    victim.write_text("do not truncate me")
    out = tmp_path / "out.h5"
    os.symlink(victim, tmp_path / "out.h5.lock")
    with pytest.raises(InputError, match="symbolic link"):
        run_sweep(SPECTRUM, out, progress=False)
    assert victim.read_text() == "do not truncate me"
    assert not out.exists()


def test_symlinked_output_is_followed_and_the_link_kept(tmp_path):
    real = tmp_path / "data"
    real.mkdir()
    link = tmp_path / "out.h5"
    os.symlink(real / "results.h5", link)
    run_sweep(SPECTRUM, link, progress=False)
    assert link.is_symlink() and (real / "results.h5").is_file()
    assert len(load_sweep(link)["run_id"]) == 3
    assert run_sweep(SPECTRUM, link, progress=False).skipped == 3  # resumes through the link
    write_run_file(link, _result())  # single-run files follow the link as well
    assert link.is_symlink() and read_run_file(real / "results.h5").task == "evolve"


def test_symlinked_parts_directory_is_refused(tmp_path):
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    out = tmp_path / "out.h5"
    os.symlink(elsewhere, parts_dir(out))
    with pytest.raises(InputError, match="symbolic link"):
        run_sweep(SPECTRUM, out, progress=False)
    assert list(elsewhere.iterdir()) == []


def test_planted_part_file_link_is_replaced_not_written_through(tmp_path):
    victim = tmp_path / "precious.txt"
    victim.write_text("keep")
    target = tmp_path / "part.h5"
    with atomic_h5(target, follow=False) as f:
        f.attrs["x"] = 1
    os.remove(target)
    os.symlink(victim, target)
    with atomic_h5(target, follow=False) as f:
        f.attrs["x"] = 2
    assert victim.read_text() == "keep" and not target.is_symlink()


# ------------------------------------------------------------------ output checks
def test_output_checks_before_any_work(tmp_path):
    with pytest.raises(InputError, match="does not exist") as info:
        check_output_path(tmp_path / "missing" / "out.h5")
    assert info.value.what == "--output"
    with pytest.raises(InputError, match="is a directory"):
        check_output_path(tmp_path)
    existing = tmp_path / "old.h5"
    existing.write_bytes(b"x")
    with pytest.raises(InputError, match="--overwrite"):
        check_output_path(existing)
    assert check_output_path(existing, overwrite=True) == existing.resolve()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["old.h5"]  # the probe is gone


def test_unwritable_folder_is_detected(tmp_path, monkeypatch):
    import tempfile

    def refuse(*args, **kwargs):
        raise OSError(errno.EROFS, os.strerror(errno.EROFS))
    monkeypatch.setattr(tempfile, "mkstemp", refuse)
    with pytest.raises(InputError, match="not writable.*Read-only file system"):
        check_output_path(tmp_path / "out.h5")


def test_sweep_into_a_missing_folder_fails_before_any_run(tmp_path):
    env = {**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parents[1])}
    config = tmp_path / "s.toml"
    config.write_text('[model]\nsites = 4\n[spectrum]\ncount = 2\n[sweep]\ntask = "spectrum"\n')
    proc = subprocess.run([sys.executable, "-m", "lgt", "sweep", str(config), "-o",
                           str(tmp_path / "nowhere" / "out.h5"), "--workers", "2"],
                          capture_output=True, text=True, env=env, timeout=60)
    assert proc.returncode == 2
    assert "folder" in proc.stderr and "does not exist" in proc.stderr
    assert "Traceback" not in proc.stderr and "1 runs" not in proc.stderr


# ------------------------------------------------------------------ stale temporaries
def test_stale_temporary_of_a_killed_run_is_cleaned(tmp_path):
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    host = socket.gethostname()
    stale = tmp_path / f".run.h5.{host}-{dead.pid}.abcd1234.tmp"
    live = tmp_path / f".run.h5.{host}-{os.getpid()}.efgh5678.tmp"
    other_host = tmp_path / f".run.h5.elsewhere-{dead.pid}.ijkl9012.tmp"
    for p in (stale, live, other_host):
        p.write_bytes(b"\0" * 1000)
    write_run_file(tmp_path / "run.h5", _result())
    assert not stale.exists()
    assert live.exists() and other_host.exists()  # still running / not ours to judge
    assert remove_stale_temporaries(tmp_path / "run.h5") == []


# ------------------------------------------------------------------ sizes and layout
def test_nine_thousand_stored_times_are_saved(tmp_path):
    # 9,000 floats of JSON exceed HDF5's 64 KiB attribute message limit.
    result = _result(9001)
    path = write_run_file(tmp_path / "long.h5", result)
    back = read_run_file(path)
    assert back.parameters == result.parameters
    np.testing.assert_array_equal(back.series["energy"].times, result.series["energy"].times)


LONG_EVOLVE = meson_evolve_sweep(0.9, 0.0001, ["energy"], '"model.mass" = [0.5]')


def test_sweep_of_an_evolution_with_nine_thousand_times(tmp_path):
    cfg = tomllib.loads(LONG_EVOLVE)
    out = tmp_path / "ev.h5"
    assert run_sweep(cfg, out, progress=False).completed == 1
    data = load_sweep(out)
    assert data["energy"].shape == (1, 9001)


def test_unknown_layout_version_is_refused_by_every_reader(tmp_path, capsys):
    single = write_run_file(tmp_path / "run.h5", _result())
    with h5py.File(single, "r+") as f:
        f.attrs["fluxline_layout"] = 99
    with pytest.raises(InputError, match="layout version 99"):
        read_run_file(single)
    out = tmp_path / "s.h5"
    run_sweep(SPECTRUM, out, progress=False)
    with h5py.File(out, "r+") as f:
        f.attrs["fluxline_layout"] = 99
    for reader in (list_runs, load_sweep):
        with pytest.raises(InputError, match="layout version 99"):
            reader(out)
    with pytest.raises(ConfigError, match="layout version 99"):  # resume refused
        run_sweep(SPECTRUM, out, progress=False)
    from lgt.cli import main
    assert main(["runs", str(out)]) == 2
    assert "layout version 99" in capsys.readouterr().err


# ------------------------------------------------------------------ byte flips
@pytest.fixture(scope="module")
def sweep_file(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("flip") / "s.h5"
    run_sweep(SPECTRUM, out, progress=False)
    return out


def _flipped(source: Path, dest: Path, offset: int) -> Path:
    shutil.copyfile(source, dest)
    with open(dest, "r+b") as f:
        f.seek(offset)
        byte = f.read(1)
        f.seek(offset)
        f.write(bytes([byte[0] ^ 0xFF]))
    return dest


def _readable(path: Path, run_id: str) -> bool:
    from lgt.io import read_run
    try:
        with h5py.File(path, "r") as f:
            group = f["runs"][run_id]
            read_run(group)
            group.visititems(lambda n, o: o[()] if isinstance(o, h5py.Dataset) else None)
        return True
    except Exception:
        return False


def test_byte_flips_give_named_errors_and_never_a_false_complete(sweep_file, tmp_path, capsys):
    from lgt.cli import main
    size = sweep_file.stat().st_size
    offsets = sorted({int(x) for x in np.random.default_rng(14).integers(0, size, 40)})
    for k, offset in enumerate(offsets):
        bad = _flipped(sweep_file, tmp_path / f"flip{k}.h5", offset)
        try:
            rows = list_runs(bad)  # a small file: every dataset is read by default
        except InputError:
            rows = []
        for row in rows:
            if row["status"] == "complete":
                assert _readable(bad, row["run_id"]), f"flip at {offset}: complete but unreadable"
        for args in (["runs", str(bad)], ["runs", "--verify", str(bad)]):
            assert main(args) in (0, 1, 2)  # and no exception escaped
        resumed = _flipped(sweep_file, tmp_path / f"resume{k}.h5", offset)
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")  # "part file is damaged" and the like
                run_sweep(SPECTRUM, resumed, progress=False)
        except FluxlineError:
            continue  # a named error (e.g. not a readable HDF5 file; pass --overwrite)
        assert [r["status"] for r in list_runs(resumed)] == ["complete"] * 3, offset
    capsys.readouterr()


def test_flip_in_result_data_is_caught_by_the_checksum(sweep_file, tmp_path):
    with h5py.File(sweep_file, "r") as f:
        run_id = sorted(f["runs"])[1]
        ds = f["runs"][run_id]["arrays/energies"]
        assert ds.fletcher32
        offset = ds.id.get_chunk_info(0).byte_offset
    bad = _flipped(sweep_file, tmp_path / "data_flip.h5", offset)
    for verify in (None, True):
        rows = {r["run_id"]: r for r in list_runs(bad, verify=verify)}
        assert rows[run_id]["status"] == "corrupt" and "energies" in rows[run_id]["error"]
        assert sum(r["status"] == "complete" for r in rows.values()) == 2
    # the structure-only check (used for files over 256 MiB) does not read the data
    assert {r["status"] for r in list_runs(bad, verify=False)} == {"complete"}
    with pytest.warns(UserWarning, match=f"run {run_id} cannot be read"):
        assert len(load_sweep(bad)["run_id"]) == 2


# ------------------------------------------------------------------ resource errors
def test_full_disk_gives_a_resource_error_and_keeps_the_old_file(tmp_path, monkeypatch):
    path = write_run_file(tmp_path / "run.h5", _result())
    before = path.read_bytes()

    def full(self):
        raise OSError("Can't write data (file write failed: errno = 28, "
                      "error message = 'No space left on device')")
    monkeypatch.setattr(h5py.File, "flush", full)
    with pytest.raises(ResourceError, match="No space left on device; the previous file is unchanged"):
        write_run_file(path, _result(7))
    assert path.read_bytes() == before
    assert [p.name for p in tmp_path.iterdir()] == ["run.h5"]


def test_full_tmpfs_gives_the_cli_message(tmp_path):
    mount = tmp_path / "small"
    mount.mkdir()
    if os.geteuid() != 0 or subprocess.run(["mount", "-t", "tmpfs", "-o", "size=256k", "tmpfs",
                                            str(mount)], capture_output=True).returncode != 0:
        pytest.skip("needs root to mount a small tmpfs")
    try:
        path = write_run_file(mount / "run.h5", _result())
        before = path.read_bytes()
        with pytest.raises(ResourceError, match="No space left on device"):
            write_run_file(path, _result(40000))
        assert path.read_bytes() == before
        assert [p.name for p in mount.iterdir()] == ["run.h5"]
        config = tmp_path / "long.toml"
        config.write_text(LONG_EVOLVE)
        env = {**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parents[1])}
        proc = subprocess.run([sys.executable, "-m", "lgt", "sweep", str(config), "-o",
                               str(mount / "s.h5"), "--no-progress"],
                              capture_output=True, text=True, env=env, timeout=120)
        assert proc.returncode == 2, proc.stderr
        assert "No space left on device" in proc.stderr
        assert "Traceback" not in proc.stderr and "Exception ignored" not in proc.stderr
    finally:
        subprocess.run(["umount", str(mount)], check=False)


def test_sweep_on_a_full_disk_stops_with_a_named_error(tmp_path, monkeypatch):
    import lgt.sweep.store as store

    real = store.write_run_group
    calls = []

    def fail_second(group, result, extra=None):
        calls.append(1)
        if len(calls) == 2:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        real(group, result, extra)
    monkeypatch.setattr(store, "write_run_group", fail_second)
    out = tmp_path / "s.h5"
    with pytest.raises(ResourceError, match="No space left on device"):
        run_sweep(SPECTRUM, out, progress=False)
    monkeypatch.setattr(store, "write_run_group", real)
    assert [r["status"] for r in list_runs(out)] == ["complete"]  # the first run was kept
    assert run_sweep(SPECTRUM, out, progress=False).completed == 2


def test_runs_on_a_missing_file_or_a_directory_is_a_named_error(tmp_path, capsys):
    from lgt.cli import main
    assert main(["runs", str(tmp_path / "missing.h5")]) == 2
    assert main(["runs", str(tmp_path)]) == 2
    err = capsys.readouterr().err
    assert "does not exist" in err and "is a directory" in err


def test_damaged_part_file_is_set_aside_and_its_run_recomputed(tmp_path):
    from lgt.sweep.plan import expand_sweep
    from lgt.sweep.store import SweepStore
    from lgt.sweep.work import execute_point

    out = tmp_path / "s.h5"
    plan = expand_sweep(SPECTRUM)
    store = SweepStore(out, plan, merge_every=1e9)
    store.open()
    outcome = execute_point(plan.task, plan.points[0].config)
    store.add(plan.points[0], outcome.result, outcome.info)
    part = parts_dir(out) / f"{plan.points[0].run_id}.h5"
    store._unlock()  # as if the coordinator had been killed before merging
    part.write_bytes(part.read_bytes()[:200])  # torn by something outside Fluxline
    with pytest.warns(UserWarning, match="is damaged"):
        summary = run_sweep(SPECTRUM, out, progress=False)
    assert summary.completed == 3
    assert part.with_name(part.name + ".damaged").exists()
    assert [r["status"] for r in list_runs(out)] == ["complete"] * 3


def test_merge_on_a_full_disk_keeps_the_main_file(tmp_path, monkeypatch):
    import lgt.files as files

    out = tmp_path / "s.h5"
    run_sweep(SPECTRUM, out, progress=False)
    before = out.read_bytes()

    def full(fd, data):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
    monkeypatch.setattr(files, "_write_all", full)
    with pytest.raises(ResourceError, match="No space left on device"):
        with atomic_h5(out, copy_from=out, follow=False) as f:
            f["runs"].create_group("extra")
    assert out.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["s.h5"]
