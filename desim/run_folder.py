"""The file-system side of a run folder: :class:`StoreError`, atomic writes, and the lock
that keeps a second process out (:class:`FolderLock`). See :mod:`desim.store` for what the
folder holds."""

from __future__ import annotations

import errno
import fcntl
import os
import tempfile
import time
from contextlib import contextmanager, suppress
from pathlib import Path

__all__ = ["StoreError", "FolderLock", "write_atomic", "writing", "LOCK", "TEMP_PREFIX"]

#: The lock file of a folder in use (it holds the owner's process id).
LOCK = ".fluidgap.lock"
#: Prefix of the temporary files of :func:`write_atomic` (removed by the next run).
TEMP_PREFIX = ".tmp-"


class StoreError(ValueError):
    """A run directory that cannot be used as asked (bad input for the command line: exit 2)."""


@contextmanager
def writing(path: Path):
    """Turn a failure of the file system (full disk, read-only, permissions, a name too long)
    into a :class:`StoreError` naming ``path``."""
    try:
        yield
    except OSError as exc:
        raise StoreError(f"cannot write {path}: {exc.strerror or exc}") from exc


# --- one process per directory -------------------------------------------------------------------

#: Folders this process has locked: real path -> [file descriptor, times acquired].
_HELD: dict[str, list[int]] = {}


class FolderLock:
    """An exclusive lock of ``directory`` (which must exist) against other processes:
    ``fcntl.flock`` on its ``.fluidgap.lock``, which holds the owner's process id. Taken again by
    the same process it nests (a count). Use as a context manager or with :meth:`acquire` and
    :meth:`release`; :meth:`acquire` raises :class:`StoreError` when another process holds it."""

    def __init__(self, directory: str | os.PathLike):
        self.directory = Path(directory)
        self._key: str | None = None

    def acquire(self) -> "FolderLock":
        if self._key is not None:
            return self
        key = os.path.realpath(self.directory)
        held = _HELD.get(key)
        if held is not None:
            held[1] += 1
            self._key = key
            return self
        path = os.path.join(key, LOCK)
        with writing(Path(path)):
            fd = self._lock_file(path)
            try:
                os.ftruncate(fd, 0)
                os.write(fd, f"{os.getpid()}\n".encode("ascii"))
            except BaseException:
                self._remove(path, fd)
                raise
        _HELD[key] = [fd, 1]
        self._key = key
        return self

    def _lock_file(self, path: str) -> int:
        for _ in range(100):
            fd = os.open(path, os.O_RDWR | os.O_CREAT | os.O_CLOEXEC, 0o644)
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError as exc:
                if exc.errno not in (errno.EAGAIN, errno.EACCES, errno.EWOULDBLOCK):
                    os.close(fd)
                    raise
                owner = _read_pid(fd)
                # (the holder writes its pid just after taking the lock: a loser that comes in
                # between reads an empty file, so it waits a moment for the pid, at most 1 s)
                for _ in range(20):
                    if owner:
                        break
                    time.sleep(0.05)
                    owner = _read_pid(fd)
                os.close(fd)
                who = "another fluidgap process" + (f" (pid {owner})" if owner else "")
                raise StoreError(f"{self.directory} is in use by {who}; wait for it to end or "
                                 "use another directory") from None
            # the owner before us removes the file when it is done: a lock on a file that is no
            # longer the one at ``path`` locks nothing, so try again
            try:
                st = os.stat(path)
            except FileNotFoundError:
                st = None
            here = os.fstat(fd)
            if st is not None and (st.st_dev, st.st_ino) == (here.st_dev, here.st_ino):
                return fd
            os.close(fd)
        raise StoreError(f"{self.directory}: cannot take the lock {LOCK}")  # pragma: no cover

    @staticmethod
    def _remove(path: str, fd: int) -> None:
        # unlink while still holding the lock, then close: whoever opened the old file finds
        # that it is gone and tries again
        with suppress(OSError):
            os.unlink(path)
        os.close(fd)

    def release(self) -> None:
        key, self._key = self._key, None
        if key is None or key not in _HELD:
            return
        held = _HELD[key]
        held[1] -= 1
        if held[1] == 0:
            del _HELD[key]
            self._remove(os.path.join(key, LOCK), held[0])

    def __enter__(self) -> "FolderLock":
        return self.acquire()

    def __exit__(self, *exc) -> None:
        self.release()


def _read_pid(fd: int) -> int | None:
    try:
        text = os.pread(fd, 32, 0).decode("ascii", "replace").strip()
    except OSError:
        return None
    return int(text) if text.isdigit() else None


# --- files -------------------------------------------------------------------------------------


def fsync_dir(directory: Path) -> None:
    """Make the renames in ``directory`` durable (not every platform can open or sync a
    folder: it then goes without)."""
    try:
        fd = os.open(directory, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def write_atomic(path: str | os.PathLike, text: str) -> Path:
    """Write ``text`` to ``path`` so that a reader (or a crash) sees the old file or the whole
    new one, never a part: temporary file in the same directory, fsync, ``os.replace``."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=TEMP_PREFIX, suffix=".part", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as f:
            f.write(text)
            f.flush()
            os.fsync(f.fileno())
        os.replace(tmp, path)
    except BaseException:
        with suppress(OSError):
            os.unlink(tmp)
        raise
    fsync_dir(path.parent)
    return path
