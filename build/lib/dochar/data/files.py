"""Files and folders written whole or not at all, and a located error when they cannot be.

Every output (run folders, saved models, checkpoints, reports, gate outputs, sweep tables,
predict and import outputs) is written to a scratch name beside its final name and renamed over
it only once complete: ``os.replace`` is atomic on one file system, so a crash, a full disk or a
SIGKILL leaves the old file (or none), never half of a new one.

A kill inside a write leaves its scratch file, named ``<name>.<pid>-<random>.partial``. The next
write into the same folder removes every partial whose writer (the pid in its name) is no longer
running on this machine (a process that took its pid later does not count); a partial of a live
writer is left alone. A folder that cannot be
written (permissions, read-only, full disk, file size limit) raises :class:`OutputWriteError`
naming the path, never a deep traceback.
"""

from __future__ import annotations

import contextlib
import errno
import logging
import os
import re
import secrets
import shutil
from collections.abc import Iterator
from pathlib import Path

from dochar.errors import DocharError

log = logging.getLogger(__name__)

PARTIAL_SUFFIX = ".partial"
_PARTIAL = re.compile(r"\.(?P<pid>\d+)-[0-9a-f]+\.partial$")
_REASONS = {errno.ENOSPC: "the disk is full", errno.EDQUOT: "the disk quota is used up",
            errno.EFBIG: "the file size limit is reached", errno.EACCES: "permission denied",
            errno.EPERM: "permission denied", errno.EROFS: "the file system is read-only"}


class OutputWriteError(DocharError):
    """An output could not be written; the message names the path and why."""


def write_error(path: str | Path, error: OSError) -> OutputWriteError:
    reason = _REASONS.get(error.errno or 0, error.strerror or str(error))
    return OutputWriteError(f"cannot write {path}: {reason} ({type(error).__name__} "
                            f"errno {error.errno}); nothing half-written is left there")


def partial_path(path: str | Path) -> Path:
    """The scratch name of one write of ``path`` by this process."""
    path = Path(path)
    return path.with_name(f"{path.name}.{os.getpid()}-{secrets.token_hex(4)}{PARTIAL_SUFFIX}")


def writer_pid(partial: Path) -> int | None:
    found = _PARTIAL.search(partial.name)
    return int(found["pid"]) if found else None


def process_running(pid: int) -> bool:
    try:
        os.kill(pid, 0)          # signal 0: only asks whether the process exists
    except ProcessLookupError:
        return False
    except PermissionError:      # it exists, under another user
        return True
    return True


def process_started(pid: int) -> float | None:
    """When the process ``pid`` started (seconds since the epoch), from Linux's /proc; None
    where that cannot be read."""
    try:
        fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
        boot = next(float(line.split()[1]) for line in Path("/proc/stat").read_text().splitlines()
                    if line.startswith("btime "))
        return boot + int(fields[19]) / os.sysconf("SC_CLK_TCK")  # field 22: start, in ticks
    except (OSError, ValueError, IndexError, StopIteration):
        return None


def writer_alive(pid: int, since: float) -> bool:
    """The process that wrote something last modified at ``since`` still runs: a process with
    its pid runs and did not start after ``since`` (on a busy machine pids are reused within
    minutes)."""
    if not process_running(pid):
        return False
    started = process_started(pid)
    return started is None or started <= since + 1.0   # /proc's start time is in whole ticks


def remove_stale_partials(folder: str | Path) -> list[Path]:
    """Delete the partial files and folders in ``folder`` whose writer no longer runs (it was
    killed while writing). Partials of this process or of a running one stay. Returns those
    removed."""
    removed = []
    folder = Path(folder)
    if not folder.is_dir():
        return removed
    for path in folder.glob(f"*{PARTIAL_SUFFIX}"):
        pid = writer_pid(path)
        try:
            modified = path.lstat().st_mtime
        except FileNotFoundError:       # removed meanwhile by another writer
            continue
        if pid is None or pid == os.getpid() or writer_alive(pid, modified):
            continue
        if path.is_dir() and not path.is_symlink():
            shutil.rmtree(path, ignore_errors=True)
        else:
            path.unlink(missing_ok=True)
        removed.append(path)
        log.info("removed %s, a write its killed process left unfinished", path)
    return removed


def make_folder(folder: str | Path) -> Path:
    """``mkdir -p`` with the located error of an unwritable place."""
    folder = Path(folder)
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as error:
        raise write_error(folder, error) from error
    return folder


def _fsync_folder(folder: Path) -> None:
    """Make the rename itself durable (a power cut, not only a kill)."""
    with contextlib.suppress(OSError):
        handle = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(handle)
        finally:
            os.close(handle)


@contextlib.contextmanager
def atomic_write(path: str | Path) -> Iterator[Path]:
    """Yield a scratch path beside ``path``; on success it is synced and replaces ``path``.

    On an exception the scratch file is removed and ``path`` is left as it was; an OSError of
    the file system becomes :class:`OutputWriteError` naming ``path``."""
    path = Path(path)
    make_folder(path.parent)
    remove_stale_partials(path.parent)
    scratch = partial_path(path)
    try:
        yield scratch
        with open(scratch, "rb+") as written:
            os.fsync(written.fileno())
        os.chmod(scratch, 0o644)
        os.replace(scratch, path)
    except BaseException as error:
        with contextlib.suppress(OSError):
            os.unlink(scratch)
        if isinstance(error, OSError) and not isinstance(error, DocharError):
            raise write_error(path, error) from error
        raise
    _fsync_folder(path.parent)


@contextlib.contextmanager
def atomic_folder(path: str | Path) -> Iterator[Path]:
    """Yield an empty scratch folder beside ``path``; on success it takes ``path``'s place.

    An older folder at ``path`` is first renamed to a partial name, then removed: a kill between
    the two renames leaves no folder at ``path`` (absent, never mixed) and a partial the next
    writer removes."""
    path = Path(path)
    make_folder(path.parent)
    remove_stale_partials(path.parent)
    staging = partial_path(path)
    try:
        staging.mkdir()
        yield staging
        old = partial_path(path) if path.exists() else None
        if old is not None:
            os.replace(path, old)
        os.replace(staging, path)
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)
    except BaseException as error:
        shutil.rmtree(staging, ignore_errors=True)
        if isinstance(error, OSError) and not isinstance(error, DocharError):
            raise write_error(path, error) from error
        raise
    _fsync_folder(path.parent)


def write_text_atomic(path: str | Path, text: str) -> Path:
    with atomic_write(path) as scratch:
        scratch.write_text(text, encoding="utf-8")
    return Path(path)


def write_bytes_atomic(path: str | Path, data: bytes) -> Path:
    with atomic_write(path) as scratch:
        scratch.write_bytes(data)
    return Path(path)
