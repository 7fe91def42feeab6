"""Crash-safe, resumable storage of a sweep: ``OUT.h5`` plus a sidecar ``OUT.h5.parts/``.

Why this design: HDF5 updates a file in place (superblock, B-trees, heaps), and a process killed
in the middle of such an update can leave the whole file unreadable — flushing after every run
narrows the window but does not close it. So the main file is never modified in place:

* each finished run is written by the coordinator to its own small file ``OUT.h5.parts/<id>.h5``
  through a temporary file + fsync + :func:`os.replace` (atomic), so a part exists only when
  complete;
* from time to time (and at the end) the parts are merged copy-on-write: the main file is copied,
  the runs are added to the copy, the copy is flushed, fsynced and moved over ``OUT.h5``. A kill
  at any moment leaves either the old or the new main file, and the parts not yet merged.

On start the store merges leftover parts, drops incomplete, failed and unreadable groups (by
writing a fresh main file of the readable runs) so their runs are redone, sets damaged part
files aside, and refuses an output written for another configuration or layout. An advisory
lock ``OUT.h5.lock`` (opened with ``O_NOFOLLOW``) keeps a second coordinator off the same
output; the parts folder must be a real folder, not a link.
"""

from __future__ import annotations

import fcntl
import json
import os
import shutil
import socket
import time
import warnings
from pathlib import Path
from typing import Any, Callable, Mapping

import h5py

from lgt.errors import ConfigError, InputError
from lgt.files import (atomic_h5, check_output_path, open_no_follow, real_directory,
                       resolve_output, resource_error)
from lgt.hashing import canonical_json
from lgt.io import (DAMAGE, LAYOUT_VERSION, STATUS_COMPLETE, check_layout, check_run, get_attr,
                    run_status, set_attr, write_h5md_root, write_run_group)
from lgt.results import RunResult
from lgt.sweep.plan import SweepPlan, SweepPoint

#: A merge waits at least this many times the duration of the previous merge.
MERGE_COST_FACTOR = 20.0
#: Run status of a run whose task raised an exception (redone on the next start).
STATUS_FAILED = "failed"


#: Sweep files up to this size (bytes, main file plus parts) are read in full when runs are
#: listed or a sweep resumes, so a run whose data does not read is never taken as complete.
AUTO_VERIFY_BYTES = 256 * 2**20


def full_check_by_default(path: str | Path) -> bool:
    """Whether checks of the sweep file ``path`` read every dataset (size up to
    :data:`AUTO_VERIFY_BYTES`) or only attributes and dataset headers."""
    path = Path(path)
    try:
        size = path.stat().st_size + sum(p.stat().st_size for p in parts_dir(path).glob("*.h5"))
    except OSError:
        return False
    return size <= AUTO_VERIFY_BYTES


def usable(group: h5py.Group, read_data: bool = False) -> bool:
    """A run counts as done only if its status is ``complete`` and it reads (its structure;
    with ``read_data`` every dataset in full)."""
    return check_run(group, read_data) is None and run_status(group) == STATUS_COMPLETE


def _created(f: h5py.File) -> str:
    try:
        return str(get_attr(f, "created", ""))
    except DAMAGE:
        return ""


def parts_dir(path: str | Path) -> Path:
    """Sidecar directory holding finished runs not yet merged into ``path`` (symlinks of
    ``path`` resolved)."""
    path = resolve_output(path)
    return path.with_name(path.name + ".parts")


class SweepStore:
    """The output of one sweep configuration.

    Parameters
    ----------
    path : path of the main HDF5 file.
    plan : the expanded sweep (its config hash identifies the output).
    overwrite : delete an existing output (of any configuration) first.
    merge_every : seconds between copy-on-write merges of finished runs into the main file.
    """

    def __init__(self, path: str | Path, plan: SweepPlan, overwrite: bool = False,
                 merge_every: float = 30.0) -> None:
        self.path = resolve_output(path)  # a symlinked output is followed on purpose
        self.parts = parts_dir(self.path)
        self.lock_path = self.path.with_name(self.path.name + ".lock")
        self.plan = plan
        self.overwrite = overwrite
        self.merge_every = merge_every
        self._lock_fd: int | None = None
        self._last_merge = time.monotonic()
        self._merge_seconds = 0.0
        self._read_data = False  # decided on open: full checks for small files

    # ------------------------------------------------------------------ lifecycle
    def open(self) -> set[str]:
        """Lock, check or create the output, merge leftovers; return the complete run ids."""
        check_output_path(self.path, overwrite=True)  # folder, directory, writability
        self._lock()
        try:
            if self.overwrite:
                self.path.unlink(missing_ok=True)
                shutil.rmtree(self.parts, ignore_errors=True)
            self._remove_stale_temporaries()
            real_directory(self.parts)
            if self.path.exists():
                self._check_identity(self.path)
            else:
                self._create_main()
            for part in self._part_files():
                self._check_part(part)
            self._read_data = full_check_by_default(self.path)
            self.merge(drop_incomplete=True)
            return self.complete_ids()
        except BaseException:
            self._unlock()
            raise

    def close(self) -> None:
        """Merge every finished run into the main file and release the lock."""
        try:
            self.merge()
            if self.parts.is_dir() and not any(self.parts.iterdir()):
                self.parts.rmdir()
        finally:
            self._unlock()

    def __enter__(self) -> "SweepStore":
        self.open()
        return self

    def __exit__(self, *exc: Any) -> None:
        self.close()

    # ------------------------------------------------------------------ adding runs
    def add(self, point: SweepPoint, result: RunResult, info: Mapping[str, Any]) -> None:
        """Store a finished run durably (as a part file) and merge if one is due."""
        extra = self._run_attrs(point, info)
        self._write_part(point.run_id, lambda g: write_run_group(g, result, extra))
        self.maybe_merge()

    def add_failure(self, point: SweepPoint, message: str, info: Mapping[str, Any]) -> None:
        """Record a run whose task raised (status ``failed``; redone on the next start)."""
        attrs = {**self._run_attrs(point, info), "task": self.plan.task, "error": message,
                 "parameters": canonical_json(point.config), "status": STATUS_FAILED}

        def fill(group: h5py.Group) -> None:
            group.attrs.update(attrs)
        self._write_part(point.run_id, fill)
        self.maybe_merge()

    def _run_attrs(self, point: SweepPoint, info: Mapping[str, Any]) -> dict[str, Any]:
        return {"run_id": point.run_id, "sweep_point": point.index,
                "sweep_assignments": canonical_json(point.assignments), **info}

    def _write_part(self, run_id: str, fill: Callable[[h5py.Group], None]) -> None:
        with atomic_h5(self.parts / f"{run_id}.h5", follow=False) as f:
            write_h5md_root(f)
            f.attrs["sweep_config_hash"] = self.plan.config_hash
            fill(f.create_group("runs").create_group(run_id))

    # ------------------------------------------------------------------ merging
    def maybe_merge(self) -> None:
        """Merge when ``merge_every`` seconds have passed since the last merge.

        A positive interval stretches to 20 times the duration of the last merge, so copying a
        large main file takes at most ~5 % of the coordinator's time; 0 merges after every run.
        """
        interval = self.merge_every and max(self.merge_every, MERGE_COST_FACTOR * self._merge_seconds)
        if time.monotonic() - self._last_merge >= interval:
            self.merge()

    def merge(self, drop_incomplete: bool = False) -> int:
        """Fold part files into the main file copy-on-write; return the number merged."""
        self._last_merge = time.monotonic()
        if drop_incomplete and self._has_incomplete():
            self._rebuild()
        parts = self._part_files()
        if not parts:
            return 0
        started = time.perf_counter()
        reserve = 2 * sum(p.stat().st_size for p in parts) + 2**20  # copies + HDF5 slack
        with atomic_h5(self.path, copy_from=self.path, follow=False, reserve=reserve) as f:
            f.attrs["fluxline_layout"] = LAYOUT_VERSION  # this layout's readers read the groups of every older layout
            runs = f.require_group("runs")
            for part in parts:
                self._merge_part(part, runs)
        for part in parts:
            part.unlink(missing_ok=True)
        self._merge_seconds = time.perf_counter() - started
        self._last_merge = time.monotonic()
        return len(parts)

    @staticmethod
    def _merge_part(part: Path, runs: h5py.Group) -> None:
        with h5py.File(part, "r") as src:
            for run_id, group in src["runs"].items():
                if run_id in runs:
                    if (run_status(runs[run_id]) == STATUS_COMPLETE
                            and run_status(group) != STATUS_COMPLETE):
                        continue
                    del runs[run_id]
                src.copy(group, runs, name=run_id)

    def _has_incomplete(self) -> bool:
        try:
            with h5py.File(self.path, "r") as f:
                return any(not usable(g, self._read_data) for g in f["runs"].values())
        except DAMAGE:
            return True

    def _rebuild(self) -> None:
        """Write a fresh main file holding only the usable runs of the old one (incomplete,
        failed and damaged runs are dropped and so recomputed; a damaged group cannot even be
        deleted in place)."""
        with h5py.File(self.path, "r") as old, atomic_h5(self.path, follow=False) as f:
            try:
                names = list(old["runs"])
            except DAMAGE:
                raise ConfigError("--output", str(self.path),
                                  "is damaged (its list of runs cannot be read); pass "
                                  "--overwrite to start again") from None
            self._write_root(f, created=_created(old))
            runs = f["runs"]
            for run_id in names:
                try:
                    group = old["runs"][run_id]
                    if usable(group, self._read_data):
                        old.copy(group, runs, name=run_id)
                except DAMAGE:
                    if run_id in runs:
                        del runs[run_id]

    def complete_ids(self) -> set[str]:
        """Run ids complete (and readable) in the main file or in part files."""
        done: set[str] = set()
        for file in [self.path, *self._part_files()]:
            with h5py.File(file, "r") as f:
                done.update(r for r, g in f.get("runs", {}).items()
                            if usable(g, self._read_data))
        return done

    # ------------------------------------------------------------------ identity
    def _create_main(self) -> None:
        with atomic_h5(self.path, follow=False) as f:
            self._write_root(f, created=time.strftime("%Y-%m-%dT%H:%M:%S%z"))

    def _write_root(self, f: h5py.File, created: str) -> None:
        """Root metadata of a main file and an empty ``runs`` group."""
        plan = self.plan
        write_h5md_root(f)
        for key, value in {
            "sweep_config_hash": plan.config_hash, "sweep_config": plan.config_json,
            "sweep_task": plan.task, "sweep_points": len(plan.points),
            "sweep_grid": canonical_json(list(plan.grid.items())),
            "sweep_zip": canonical_json(list(plan.zip.items())), "created": created,
        }.items():
            set_attr(f, key, value)
        f.create_group("runs")

    def _check_identity(self, file: Path) -> None:
        try:
            with h5py.File(file, "r") as f:
                found = f.attrs.get("sweep_config_hash")
                if found is not None:
                    check_layout(f, str(file))
        except InputError as exc:
            raise ConfigError("--output", str(file), f"{exc.reason}; pass --overwrite to "
                                                     "replace it") from None
        except OSError as exc:
            raise ConfigError("--output", str(file), f"exists but is not a readable HDF5 file "
                                                     f"({exc}); pass --overwrite to replace it") from None
        if found is None:
            raise ConfigError("--output", str(file), "exists but is not a Fluxline sweep file; "
                                                     "choose another path or pass --overwrite")
        if found != self.plan.config_hash:
            raise ConfigError("--output", str(file),
                              f"holds results of a different sweep configuration (hash "
                              f"{str(found)[:12]}…, this configuration {self.plan.config_hash[:12]}…); "
                              "choose another output or pass --overwrite to discard them")

    # ------------------------------------------------------------------ housekeeping
    def _part_files(self) -> list[Path]:
        return sorted(self.parts.glob("*.h5")) if self.parts.is_dir() else []

    def _remove_stale_temporaries(self) -> None:
        """Delete temporaries left by a killed coordinator (safe: we hold the lock)."""
        stale = list(self.path.parent.glob(f".{self.path.name}.*.tmp"))
        if self.parts.is_dir():
            stale += list(self.parts.glob(".*.tmp"))
        for tmp in stale:
            tmp.unlink(missing_ok=True)

    def _check_part(self, part: Path) -> None:
        """A part of another configuration is refused; an unreadable one is set aside as
        ``<id>.h5.damaged`` (its run is recomputed) with a warning."""
        try:
            with h5py.File(part, "r") as f:
                readable = all(check_run(g, read_data=True) is None for g in f["runs"].values())
        except (OSError, KeyError, ValueError, RuntimeError):
            readable = False
        if readable:
            self._check_identity(part)
            return
        damaged = part.with_name(part.name + ".damaged")
        os.replace(part, damaged)
        warnings.warn(f"part file {part} is damaged; moved to {damaged.name}, its run will be "
                      "recomputed", stacklevel=3)

    def _lock(self) -> None:
        while True:
            # O_NOFOLLOW: a planted OUT.h5.lock symlink must not redirect our write
            fd = open_no_follow(self.lock_path, os.O_RDWR | os.O_CREAT, 0o644)
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except BlockingIOError:
                os.close(fd)
                raise ConfigError("--output", str(self.path),
                                  f"is in use by another running sweep (lock {self.lock_path})") from None
            except OSError as exc:  # file systems without flock support
                warnings.warn(f"cannot lock {self.lock_path} ({exc}); make sure only one sweep "
                              "writes this output", stacklevel=2)
                break
            try:
                same = os.stat(self.lock_path).st_ino == os.fstat(fd).st_ino
            except FileNotFoundError:
                same = False
            if same:
                break
            os.close(fd)  # the lock file was removed by a finishing sweep: retry
        self._lock_fd = fd
        try:  # who holds the lock, for humans; the flock itself is what counts
            os.ftruncate(fd, 0)
            os.write(fd, json.dumps({"host": socket.gethostname(), "pid": os.getpid()}).encode())
        except OSError as exc:
            self._unlock()
            raise (resource_error(self.lock_path, exc, kept=False) or exc) from None

    def _unlock(self) -> None:
        if self._lock_fd is None:
            return
        self.lock_path.unlink(missing_ok=True)
        os.close(self._lock_fd)
        self._lock_fd = None
