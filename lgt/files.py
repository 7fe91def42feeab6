"""Safe file writing: output-path checks, atomic HDF5 replacement, no symlink surprises.

* :func:`check_output_path` checks an ``--output`` *before* any computation (missing folder,
  a directory, an unwritable or read-only folder, an existing file without ``--overwrite``).
  A symbolic link as output is **followed on purpose**: the file it points to is written
  (atomically, in the target's folder) and the link is kept.
* :func:`atomic_h5` writes a temporary file beside the target and moves it into place with
  :func:`os.replace`; the temporary is created with ``O_EXCL`` (never through a planted link),
  and ``os.replace`` replaces a link rather than writing through it.
* Temporaries left by killed processes (``.NAME.<host>-<pid>.XXXX.tmp``) are removed by the
  next write to the same path when their process is gone.
* Resource failures (disk full, quota, permission denied, read-only file system, out of
  memory) become :class:`~lgt.errors.ResourceError` naming the path; the previous file is kept.
"""

from __future__ import annotations

import errno
import os
import re
import shutil
import socket
import stat
import sys
import tempfile
import time
from contextlib import contextmanager
from pathlib import Path
from typing import Any, Iterator

import h5py

from lgt.errors import InputError, ResourceError

#: errno values that mean "a resource ran out or is not granted" (→ ResourceError).
RESOURCE_ERRNOS = {errno.ENOSPC, errno.EDQUOT, errno.EACCES, errno.EPERM, errno.EROFS,
                   errno.EFBIG, errno.ENOMEM}
#: Temporaries of the old naming scheme (no pid) older than this are removed (seconds).
STALE_AGE = 3600.0
#: Files up to this size (bytes) are modified in memory and written with os.write; larger
#: ones are modified on disk after a free-space check.
IN_MEMORY_BYTES = 256 * 2**20
#: HDF5 format bounds for new files: v110 object headers carry metadata checksums.
LIBVER = ("v110", "latest")


def resolve_output(path: str | Path) -> Path:
    """``path`` with symbolic links resolved (the file a link points to is the one written)."""
    return Path(os.path.realpath(path))


def check_output_path(path: str | Path, overwrite: bool = False) -> Path:
    """Check before any work that ``path`` can be written; return the path to write.

    Raises
    ------
    InputError
        (``what = "--output"``) the folder is missing, the path is a directory, the file exists
        and ``overwrite`` is false, or the folder is not writable (permission denied or a
        read-only file system; checked by creating and removing a probe file).
    """
    given = Path(path)
    target = resolve_output(given)
    shown = str(given) if target == given.absolute() else f"{given} (a link to {target})"
    if target.is_dir():
        raise InputError("--output", f"{shown} is a directory; give a file name")
    folder = target.parent
    if not folder.exists():
        raise InputError("--output", f"{shown}: folder {folder} does not exist")
    if not folder.is_dir():
        raise InputError("--output", f"{shown}: {folder} is not a folder")
    if target.exists() and not overwrite:
        raise InputError("--output", f"{shown} exists; pass --overwrite to replace it")
    try:
        fd, probe = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".probe", dir=folder)
        os.close(fd)
        os.unlink(probe)
    except OSError as exc:
        raise InputError("--output", f"{shown}: folder {folder} is not writable "
                                     f"({os.strerror(exc.errno) if exc.errno else exc})") from None
    return target


def resource_error(path: str | Path, exc: BaseException, kept: bool = True) -> ResourceError | None:
    """The ResourceError for a failed write of ``path``, or None if ``exc`` is not one."""
    if isinstance(exc, MemoryError) or isinstance(exc.__context__, MemoryError):
        reason = "out of memory"
    else:
        code = _errno_of(exc)
        if code not in RESOURCE_ERRNOS:
            return None
        reason = os.strerror(code)
    after = "; the previous file is unchanged" if kept else ""
    return ResourceError(f"cannot write {path}: {reason}{after}")


def _errno_of(exc: BaseException | None) -> int | None:
    """errno of an OSError, also when h5py only mentions it in the message (h5py raises
    RuntimeError for failed flushes) or in the error it was handling."""
    seen = 0
    while exc is not None and seen < 8:
        if isinstance(exc, OSError) and exc.errno:
            return exc.errno
        if isinstance(exc, (OSError, RuntimeError)):
            found = re.search(r"errno = (\d+)", str(exc))
            if found:
                return int(found.group(1))
        exc, seen = exc.__cause__ or exc.__context__, seen + 1
    return None


def _quiet_h5py_cleanup() -> None:
    """After a failed write, h5py's object destructors retry the write and report each
    failure as an "Exception ignored" traceback; drop those (the error is already raised)."""
    previous = sys.unraisablehook
    if getattr(previous, "_fluxline", False):
        return

    def hook(unraisable: Any) -> None:
        if "h5py" in str(getattr(unraisable, "object", "")) and isinstance(
                unraisable.exc_value, (OSError, RuntimeError)):
            return
        previous(unraisable)
    hook._fluxline = True  # type: ignore[attr-defined]
    sys.unraisablehook = hook


def _tmp_prefix(path: Path) -> str:
    return f".{path.name}.{socket.gethostname()}-{os.getpid()}."


def remove_stale_temporaries(path: str | Path) -> list[Path]:
    """Delete temporaries of ``path`` whose writing process (on this host) no longer runs."""
    path = Path(path)
    host = socket.gethostname()
    pattern = re.compile(re.escape(f".{path.name}.") + r"(?:(?P<host>.+)-(?P<pid>\d+)\.)?[^.]+\.tmp")
    removed = []
    try:
        candidates = list(path.parent.glob(f".{path.name}.*.tmp"))
    except OSError:
        return removed
    for tmp in candidates:
        found = pattern.fullmatch(tmp.name)
        if found is None:
            continue
        if found["pid"] is not None:
            if found["host"] != host or _alive(int(found["pid"])):
                continue
        else:
            try:
                if time.time() - tmp.lstat().st_mtime < STALE_AGE:
                    continue
            except OSError:
                continue
        try:
            tmp.unlink()
            removed.append(tmp)
        except OSError:
            pass
    return removed


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


@contextmanager
def atomic_h5(path: str | Path, copy_from: str | Path | None = None, follow: bool = True,
              reserve: int = 0) -> Iterator[h5py.File]:
    """Open a temporary HDF5 file that replaces ``path`` only if the block succeeds.

    A new file is built in memory (HDF5 "core" driver) and its image written to a temporary
    file beside the target with plain ``os.write`` calls, so a full disk is an ordinary
    ``ENOSPC`` and never leaves the HDF5 library in a failed state. With ``copy_from`` the
    new file starts as a copy of that file: modified in memory too when it is at most
    :data:`IN_MEMORY_BYTES`, else copied to the temporary and modified on disk, where
    ``reserve`` bytes (the data about to be added) must be free beyond the copy or the write
    is refused before it starts. On success the temporary is fsynced and moved over ``path`` with
    :func:`os.replace` (atomic on POSIX), and the directory is fsynced. On any exception, or
    if the process is killed, ``path`` is untouched. A symbolic link at ``path`` is followed
    (its target is replaced) unless ``follow`` is false (then the link itself is replaced;
    sweep files use this so a planted link cannot redirect the write). Resource failures
    raise :class:`~lgt.errors.ResourceError`.
    """
    path = resolve_output(path) if follow else Path(path)
    remove_stale_temporaries(path)
    try:
        fd, tmp = tempfile.mkstemp(prefix=_tmp_prefix(path), suffix=".tmp", dir=path.parent)
    except OSError as exc:
        raise (resource_error(path, exc) or exc) from None
    try:
        try:
            os.fchmod(fd, _file_mode(path))
            if copy_from is None:
                with h5py.File(tmp + ".image", "w", driver="core", backing_store=False,
                               libver=LIBVER) as f:
                    yield f
                    f.flush()
                    image = f.id.get_file_image()
                _write_all(fd, image)
                del image
            elif Path(copy_from).stat().st_size <= IN_MEMORY_BYTES:
                # the core driver reads the file into memory; nothing is written back to it
                with h5py.File(copy_from, "r+", driver="core", backing_store=False,
                               locking=False, libver=LIBVER) as f:
                    yield f
                    f.flush()
                    image = f.id.get_file_image()
                _write_all(fd, image)
                del image
            else:
                os.close(fd)
                fd = -1
                _check_free_space(path, Path(copy_from).stat().st_size + reserve)
                shutil.copyfile(copy_from, tmp)
                with h5py.File(tmp, "r+", libver=LIBVER) as f:
                    yield f
            _fsync(tmp)
            os.replace(tmp, path)
            _fsync(path.parent)  # make the rename itself durable (power loss)
        except (OSError, RuntimeError, MemoryError) as exc:
            error = resource_error(path, exc)
            if error is None:
                raise
            _quiet_h5py_cleanup()
            raise error from None
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    finally:
        if fd >= 0:
            os.close(fd)


def _write_all(fd: int, data: bytes) -> None:
    view = memoryview(data)
    while view:
        view = view[os.write(fd, view):]


def _check_free_space(path: Path, needed: int) -> None:
    """Refuse (ResourceError) a write that needs more than the free space of ``path``'s folder."""
    try:
        free = shutil.disk_usage(path.parent).free
    except OSError:
        return
    if needed > free:
        raise ResourceError(f"cannot write {path}: {os.strerror(errno.ENOSPC)} (needs about "
                            f"{needed / 2**20:.1f} MiB, {free / 2**20:.1f} MiB free); the "
                            "previous file is unchanged")


def _file_mode(path: Path) -> int:
    """Mode of the existing ``path``, else the default for new files under the umask."""
    try:
        return path.stat().st_mode & 0o777
    except FileNotFoundError:
        umask = os.umask(0)
        os.umask(umask)
        return 0o666 & ~umask


def _fsync(path: str | Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def open_no_follow(path: str | Path, flags: int, mode: int = 0o644) -> int:
    """``os.open`` that refuses a symbolic link or a non-regular file at ``path``.

    Raises
    ------
    InputError
        ``path`` is a symbolic link (``O_NOFOLLOW``) or not a regular file.
    """
    try:
        fd = os.open(path, flags | os.O_NOFOLLOW | os.O_CLOEXEC, mode)
    except OSError as exc:
        if exc.errno == errno.ELOOP:
            raise InputError(str(path), "is a symbolic link; refusing to follow it "
                                        "(remove it if you did not create it)") from None
        raise (resource_error(path, exc, kept=False) or exc) from None
    if not stat.S_ISREG(os.fstat(fd).st_mode):
        os.close(fd)
        raise InputError(str(path), "is not a regular file")
    return fd


def real_directory(path: str | Path) -> Path:
    """Create the folder ``path`` if needed; refuse a symbolic link or a non-folder there."""
    path = Path(path)
    if path.is_symlink():
        raise InputError(str(path), "is a symbolic link; refusing to write through it "
                                    "(remove it if you did not create it)")
    try:
        path.mkdir(exist_ok=True)
    except FileExistsError:
        raise InputError(str(path), "exists and is not a folder") from None
    except OSError as exc:
        raise (resource_error(path, exc, kept=False) or exc) from None
    return path
