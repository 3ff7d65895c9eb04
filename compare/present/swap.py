"""Output written whole or not at all: a folder swapped in at once, a file replaced atomically.

:func:`replace_folder` builds the complete new folder as a hidden sibling (every file written,
fsynced, the folder fsynced), then swaps it with the old one in one step where the system can
(Linux ``renameat2(RENAME_EXCHANGE)``), else by two renames (old folder aside, new one in), and
removes the old. A process killed at any instant leaves the old folder or the new one whole at
the destination (with two renames there is one instant between them where the destination is
missing and the old folder waits aside); whatever it leaves besides (the hidden sibling, the old
folder aside) is cleaned by the next write to the same destination, which also puts an old
folder left aside back in place when the destination is missing. Nothing of an earlier folder
survives in the new one.

:func:`replace_file` does the same for one file: a hidden temporary beside it, fsync,
``os.replace``.

Hidden siblings are named ``.fluidgap-<tag>-<pid>-<random>.<kind>``: ``tag`` ties them to the
destination's name, ``pid`` to the process that made them (only those of processes no longer
running are cleaned), ``kind`` is ``new`` (being built), ``old`` (set aside) or ``part`` (a
file being written).
"""

from __future__ import annotations

import ctypes
import errno
import hashlib
import os
import re
import secrets
import shutil
import stat
import sys
from pathlib import Path
from typing import Iterable

from desim.run_folder import fsync_dir as _fsync_dir

__all__ = ["replace_folder", "replace_file", "clean_leftovers", "leftovers"]

_SIBLING = re.compile(r"\.fluidgap-([0-9a-f]{10})-(\d+)-[0-9a-f]+\.(new|old|part)")
_AT_FDCWD = -100
_RENAME_EXCHANGE = 2


def _tag(destination: Path) -> str:
    return hashlib.sha256(os.fsencode(destination.name)).hexdigest()[:10]


def _sibling(destination: Path, kind: str) -> Path:
    name = f".fluidgap-{_tag(destination)}-{os.getpid()}-{secrets.token_hex(4)}.{kind}"
    return destination.parent / name


def _running(pid: int) -> bool:
    if pid == os.getpid():
        return False  # our own leftovers can only come from an earlier, failed write
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def leftovers(destination: str | os.PathLike) -> list[Path]:
    """The hidden siblings of ``destination`` left by processes no longer running."""
    destination = Path(destination)
    tag = _tag(destination)
    try:
        entries = list(destination.parent.iterdir())
    except OSError:
        return []
    out = []
    for p in entries:
        m = _SIBLING.fullmatch(p.name)
        if m and m.group(1) == tag and not _running(int(m.group(2))):
            out.append(p)
    return sorted(out)


def clean_leftovers(destination: str | os.PathLike) -> None:
    """Remove what killed writes to ``destination`` left beside it; when ``destination`` is
    missing and an old folder was left aside (killed between the two renames of a swap), put
    that folder back first."""
    destination = Path(destination)
    found = leftovers(destination)
    aside = [p for p in found if p.name.endswith(".old") and p.is_dir()]
    if aside and not os.path.lexists(destination):
        newest = max(aside, key=lambda p: p.stat().st_mtime_ns)
        os.rename(newest, destination)
        found.remove(newest)
    for p in found:
        _remove(p)


def _remove(path: Path) -> None:
    if path.is_dir() and not path.is_symlink():
        shutil.rmtree(path, ignore_errors=True)
    else:
        try:
            os.unlink(path)
        except FileNotFoundError:
            pass


def _write(path: Path, data: bytes, mode: int = 0o644) -> None:
    """Write ``data`` to the new file ``path``, flushed to disk."""
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_CLOEXEC, 0o600)
    try:
        view = memoryview(data)
        while view:
            view = view[os.write(fd, view):]
        os.fsync(fd)
    finally:
        os.close(fd)
    os.chmod(path, mode)  # a report is meant to be shared, whatever the umask of the moment


def _exchange(a: Path, b: Path) -> bool:
    """Swap ``a`` and ``b`` in one step (Linux renameat2 RENAME_EXCHANGE); False where the
    system or the file system cannot."""
    if not sys.platform.startswith("linux"):
        return False
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        renameat2 = libc.renameat2
    except (OSError, AttributeError):
        return False
    renameat2.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p,
                          ctypes.c_uint]
    renameat2.restype = ctypes.c_int
    if renameat2(_AT_FDCWD, os.fsencode(a), _AT_FDCWD, os.fsencode(b), _RENAME_EXCHANGE) == 0:
        return True
    err = ctypes.get_errno()
    if err in (errno.EINVAL, errno.ENOSYS, errno.ENOTSUP, errno.EOPNOTSUPP):
        return False
    raise OSError(err, os.strerror(err), str(b))


def _swap(staged: Path, destination: Path) -> None:
    """Put the complete folder ``staged`` at ``destination``, removing the old one."""
    if not os.path.lexists(destination):
        os.rename(staged, destination)
        return
    if _exchange(staged, destination):
        _fsync_dir(destination.parent)
        shutil.rmtree(staged, ignore_errors=True)  # (it holds the old folder now)
        return
    aside = _sibling(destination, "old")
    os.rename(destination, aside)
    try:
        os.rename(staged, destination)
    except BaseException:
        os.rename(aside, destination)  # the old folder back, whole
        raise
    try:
        _fsync_dir(destination.parent)
    finally:
        shutil.rmtree(aside, ignore_errors=True)


def replace_folder(destination: str | os.PathLike,
                   contents: Iterable[tuple[str, bytes]]) -> Path:
    """Make ``destination`` a folder holding exactly ``contents`` (file name, bytes), swapped
    in whole (see the module docstring); a symbolic link to a folder is followed (the folder it
    points to is replaced, the link kept). Missing parent folders are made. The new folder keeps
    the old one's permissions. Returns the folder written."""
    destination = Path(destination)
    if destination.is_symlink():
        destination = destination.resolve()
    parent = destination.parent
    parent.mkdir(parents=True, exist_ok=True)
    clean_leftovers(destination)
    staged = _sibling(destination, "new")
    os.mkdir(staged)
    try:
        if destination.is_dir():
            os.chmod(staged, stat.S_IMODE(destination.stat().st_mode))
        for name, data in contents:
            # each file complete under a temporary name first, so that the staged folder never
            # holds a part of a file under its real name
            part = staged / f".{name}.part"
            _write(part, data)
            os.replace(part, staged / name)
        _fsync_dir(staged)
        _swap(staged, destination)
        _fsync_dir(parent)
    except BaseException:
        if os.path.lexists(staged):
            shutil.rmtree(staged, ignore_errors=True)
        raise
    return destination


def replace_file(destination: str | os.PathLike, data: bytes) -> Path:
    """Write ``data`` to ``destination`` atomically (a hidden temporary beside it, fsync,
    ``os.replace``); a symbolic link is followed (the file it points to is replaced). Returns
    the file written."""
    destination = Path(destination)
    if destination.is_symlink():
        destination = destination.resolve()
    clean_leftovers(destination)
    part = _sibling(destination, "part")
    try:
        _write(part, data)
        os.replace(part, destination)
    except BaseException:
        try:
            os.unlink(part)
        except FileNotFoundError:
            pass
        raise
    _fsync_dir(destination.parent)
    return destination


_REPORT_FILE = re.compile(r"report\.html|result\.json"
                          r"|[A-Za-z0-9][A-Za-z0-9_.-]*\.(csv|png|parquet)"
                          r"|\..+\.tmp")


def report_folder_problem(directory: str | os.PathLike) -> str | None:
    """Why ``directory`` cannot receive a report (it is replaced whole), or None: it is missing,
    empty, or holds a report (``report.html`` or ``result.json`` with tables and figures
    only). Anything else (a file, a link to nothing, a folder with other files) is kept out of
    harm's way."""
    path = Path(directory)
    if path.is_symlink() and not path.exists():
        return f"is a symbolic link to nothing ({os.readlink(path)})"
    if not path.exists():
        return None
    if not path.is_dir():
        return "is a file, not a folder"
    try:
        entries = list(path.iterdir())
    except OSError as exc:
        return f"cannot be read ({exc.strerror})"
    if not entries:
        return None
    foreign = sorted(p.name for p in entries
                     if not (_REPORT_FILE.fullmatch(p.name) and p.is_file()
                             and not p.is_symlink()))
    if foreign:
        shown = ", ".join(foreign[:3]) + (", ..." if len(foreign) > 3 else "")
        return (f"holds files that are not part of a fluidgap report ({shown}) and would be "
                "lost: use a new or empty folder")
    if not any(p.name in ("report.html", "result.json") for p in entries):
        return ("holds files but no report.html or result.json: not a fluidgap report, and "
                "they would be lost: use a new or empty folder")
    return None


class ReportFolderError(ValueError):
    """The destination of a report is not a folder that may be replaced by one."""
