"""Files a scenario reads: the scenario file itself and the trace and empirical files it names.

Bounded and safe whatever the path names:

* only regular files are read: the file is opened without blocking and checked with ``fstat``
  before anything is read, so a FIFO, a device (``/dev/zero``) or a folder is refused at once;
* a file named in a scenario must lie inside the scenario's folder (after symbolic links are
  followed), unless the caller allows outside files (``--allow-outside-files``);
* numbers are read line by line, at most ``max_values`` of them, from a file of at most
  :data:`BYTES_PER_VALUE` × ``max_values`` bytes with lines of at most :data:`LINE_BYTES` bytes;
* no message quotes the file's content: it names the field, the file and the line number.
"""

from __future__ import annotations

import os
import stat
from array import array
from dataclasses import dataclass
from pathlib import Path
from typing import Any, BinaryIO

from .errors import FieldError

__all__ = ["DataFolder", "NotARegularFile", "open_regular", "SCENARIO_BYTES", "LINE_BYTES",
           "BYTES_PER_VALUE"]

#: The largest scenario file read (bytes).
SCENARIO_BYTES = 16 * 2**20
#: The longest line of a trace or empirical file (bytes).
LINE_BYTES = 64 * 1024
#: Bytes a trace or empirical file may hold per number it is allowed to hold.
BYTES_PER_VALUE = 64

_KINDS = ((stat.S_ISDIR, "a folder"), (stat.S_ISFIFO, "a FIFO (named pipe)"),
          (stat.S_ISCHR, "a device"), (stat.S_ISBLK, "a device"), (stat.S_ISSOCK, "a socket"))


class NotARegularFile(OSError):
    """The path names something other than a regular file; ``kind`` says what
    (e.g. "a FIFO (named pipe)")."""

    def __init__(self, kind: str):
        super().__init__(f"is {kind}, not a regular file")
        self.kind = kind


def open_regular(path: str | os.PathLike) -> tuple[BinaryIO, int]:
    """``(binary file, size in bytes)`` for reading ``path`` when it is a regular file.

    Opened with ``O_NONBLOCK`` so that opening a FIFO cannot wait for a writer, then checked
    with ``fstat`` on the open descriptor (no race with a path swapped in between). Raises
    :class:`NotARegularFile` for anything else, and the usual OSError (FileNotFoundError,
    PermissionError, ...) when it cannot be opened."""
    flags = os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_NOCTTY", 0)
    fd = os.open(path, flags)
    try:
        info = os.fstat(fd)
        if not stat.S_ISREG(info.st_mode):
            kind = next((k for test, k in _KINDS if test(info.st_mode)), "not a file")
            raise NotARegularFile(kind)
        return os.fdopen(fd, "rb"), info.st_size
    except BaseException:
        os.close(fd)
        raise


def open_input(path: str | os.PathLike, expected: str) -> tuple[BinaryIO, int]:
    """:func:`open_regular` for a file the user named (a scenario, a CSV of records): any
    failure becomes a :class:`~fluid.errors.ScenarioError` naming the file, e.g. "is a
    directory, not a regular file, expected a YAML file" (``expected``: "a YAML file")."""
    from .errors import ScenarioError

    file = str(path)
    try:
        return open_regular(path)
    except FileNotFoundError:
        raise ScenarioError(file, "", "no such file") from None
    except NotARegularFile as exc:
        raise ScenarioError(file, "", f"{exc}, expected {expected}") from None
    except (OSError, ValueError) as exc:
        why = getattr(exc, "strerror", None) or "not a file name"
        raise ScenarioError(file, "", f"cannot read: {why}") from None


def _why(exc: BaseException) -> str:
    if isinstance(exc, NotARegularFile):
        return str(exc)
    if isinstance(exc, FileNotFoundError):
        return "no such file"
    if isinstance(exc, PermissionError):
        return "permission denied"
    if isinstance(exc, OSError) and exc.strerror:
        return f"cannot be read ({exc.strerror.lower()})"
    return "cannot be read"


@dataclass(frozen=True)
class DataFolder:
    """The folder files named in a scenario are read from, and how much of them.

    ``path``: the scenario's folder; ``max_values``: numbers one file may hold;
    ``outside_files``: whether a name may resolve outside ``path``."""

    path: Path
    max_values: int = 1_000_000
    outside_files: bool = False

    def locate(self, name: Any, field: str) -> Path:
        """The file ``name`` (as written at ``field``) names, checked to lie in the folder."""
        if not isinstance(name, str) or not name or "\0" in name or len(name) > 4096:
            raise FieldError(field, "must be a file name", name)
        file = self.path / name
        if self.outside_files:
            return file
        try:
            inside = file.resolve().is_relative_to(self.path.resolve())
        except (OSError, RuntimeError, ValueError):  # a symbolic-link loop, ...
            inside = False
        if not inside:
            raise FieldError(field, f"{name} lies outside the scenario's folder "
                             f"{self.path}: files a scenario names must be inside it "
                             "(or give --allow-outside-files)")
        return file

    def read_numbers(self, name: Any, field: str, *,
                     strip: str = "") -> tuple[list[float], array]:
        """``(values, lines)``: every number of the file ``name`` in order, and the line each
        stands on; numbers are separated by whitespace (each also stripped of the characters in
        ``strip``, e.g. a trailing comma). A word that is not a number raises FieldError naming
        its entry and line (never quoting it); so do a file too large, a line too long, and text
        that is not UTF-8."""
        file = self.locate(name, field)
        limit = self.max_values
        try:
            handle, size = open_regular(file)
        except (OSError, ValueError) as exc:
            raise FieldError(field, f"{name}: {_why(exc)}", name) from None
        if size > BYTES_PER_VALUE * limit:
            handle.close()
            raise FieldError(field, self._too_large(name))
        values: list[float] = []
        lines = array("l")
        read = 0
        with handle:
            for line_no in range(1, limit + 2):
                try:
                    raw = handle.readline(LINE_BYTES + 1)
                except OSError as exc:
                    raise FieldError(field, f"{name}: {_why(exc)}", name) from None
                if not raw:
                    break
                read += len(raw)
                if len(raw) > LINE_BYTES:
                    raise FieldError(field, f"line {line_no} of {name} is longer than "
                                     f"{LINE_BYTES:,} bytes")
                if read > BYTES_PER_VALUE * limit:
                    raise FieldError(field, self._too_large(name))
                try:
                    text = raw.decode("utf-8")
                except UnicodeDecodeError:
                    raise FieldError(field, f"line {line_no} of {name} is not UTF-8 text") from None
                for word in text.split():
                    try:
                        values.append(float(word.rstrip(strip) if strip else word))
                    except ValueError:
                        raise FieldError(field, f"{name}: entry {len(values) + 1} is not a "
                                         f"number (line {line_no})") from None
                    lines.append(line_no)
                if len(values) > limit:
                    raise FieldError(field, self._too_large(name))
            else:  # more lines than numbers allowed
                raise FieldError(field, self._too_large(name))
        return values, lines

    def _too_large(self, name: str) -> str:
        return (f"{name} holds more than the limit of {self.max_values:,} numbers (or "
                f"{BYTES_PER_VALUE * self.max_values:,} bytes); raise it with --max-file-values")
