"""Every place a command will write, checked before it computes anything.

A destination is a path given with a flag, of one of three kinds:

* ``file``: one file replaced whole (``--png``, and a future ``--write-scenario``): its folder
  must exist, the path must not be a folder, a device or a link to nothing;
* ``folder``: a folder written into (``--out``), made with its parents when missing;
* ``report``: a folder replaced whole (``--report``, ``--csv``), made with its parents when
  missing; an existing one must hold a report (or tables) and nothing else (it is replaced
  whole).

For each: every name in the path fits the file system (NAME_MAX, PATH_MAX), and the folder that
will be written really takes a file (a small file is written, flushed and removed: a read-only
file system, missing permissions or a full disk show up now, not after the simulation). A bad
destination is an :class:`~compare.cli.outcome.InputError` (exit 2) naming the flag and the
path. After the scenario is read, :func:`check_inputs_kept` refuses destinations that would
overwrite or swallow an input (the scenario file, a trace or an empirical sample it names).
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path
from typing import Iterable

from desim.run_folder import TEMP_PREFIX

from ..present.swap import report_folder_problem
from .outcome import InputError

__all__ = ["DESTINATIONS", "check_destination", "check_destinations", "check_inputs_kept",
           "scenario_inputs"]

#: Destination flags: attribute of the parsed arguments -> (flag, kind).
DESTINATIONS = {
    "report": ("--report", "report"),
    "out": ("--out", "folder"),
    "png": ("--png", "file"),
    "write_scenario": ("--write-scenario", "file"),
    "csv": ("--csv", "report"),
}
#: Bytes written by the probe of a folder: enough to meet a full disk, small enough to be free.
PROBE_BYTES = 64 * 1024
#: The probe is named like a run folder's temporary files, so that a run opening the folder at
#: that very instant (another process) takes it for one and ignores it.
PROBE_PREFIX = TEMP_PREFIX + "fluidgap-probe-"


def _command(args) -> str:
    return f"fluidgap {getattr(args, 'command', None) or ''}".rstrip()


def _limit(path: Path, name: str, default: int) -> int:
    try:
        return os.pathconf(path, name)
    except (OSError, ValueError):
        return default


def _nearest_existing(path: Path) -> Path:
    p = path
    while not os.path.lexists(p) and p != p.parent:
        p = p.parent
    return p


def _probe(directory: Path) -> str | None:
    """Why a file cannot be written in ``directory`` (the system's words), or None."""
    try:
        fd, tmp = tempfile.mkstemp(prefix=PROBE_PREFIX, dir=directory)
    except OSError as exc:
        return exc.strerror or str(exc)
    try:
        written = os.write(fd, bytes(PROBE_BYTES))
        os.fsync(fd)
        if written < PROBE_BYTES:
            return os.strerror(28)  # ENOSPC: a short write is the disk running out
    except OSError as exc:
        return exc.strerror or str(exc)
    finally:
        os.close(fd)
        try:
            os.unlink(tmp)
        except OSError:
            pass
    return None


def _name_problem(path: Path) -> str | None:
    absolute = Path(os.path.abspath(path))
    existing = _nearest_existing(absolute)
    name_max = _limit(existing, "PC_NAME_MAX", 255)
    path_max = _limit(existing, "PC_PATH_MAX", 4096)
    for part in absolute.parts[1:]:
        size = len(os.fsencode(part))
        if size > name_max:
            shown = part if len(part) <= 40 else part[:37] + "..."
            return (f"the name {shown!r} is {size} bytes, longer than the {name_max} the file "
                    "system allows")
    size = len(os.fsencode(str(absolute)))
    if size >= path_max:
        return f"the path is {size} bytes, longer than the {path_max - 1} the system allows"
    return None


def _problem(path: Path, kind: str) -> str | None:
    """Why ``path`` cannot be a destination of ``kind`` (see the module docstring), or None."""
    if str(path) == "":
        return "is empty"
    problem = _name_problem(path)
    if problem is not None:
        return problem
    if path.is_symlink() and not path.exists():
        return f"is a symbolic link to nothing ({os.readlink(path)})"
    if path.exists():
        path = path.resolve()
    if kind == "file":
        if path.is_dir():
            return "is a folder, not a file"
        if path.exists() and not path.is_file():
            return "is not a regular file"
        parent = path.parent
        if not parent.exists():
            return f"the folder {parent} does not exist"
        if not parent.is_dir():
            return f"{parent} is not a folder"
        where = parent
    else:
        if path.exists() and not path.is_dir():
            return "is a file, not a folder"
        if kind == "report":
            problem = report_folder_problem(path)
            if problem is not None:
                return problem
        if path.exists():
            # a report is swapped in beside the old one; a run folder is written inside
            where = path.parent if kind == "report" else path
        else:
            where = _nearest_existing(path)
            if not where.is_dir():
                return f"{where} is a file, so the folder cannot be made"
    problem = _probe(where)
    if problem is not None:
        return f"cannot write in {where}: {problem}"
    return None


def check_destination(path: str | os.PathLike, kind: str, flag: str,
                      command: str = "fluidgap") -> None:
    """Raise :class:`InputError` (``COMMAND: FLAG PATH: problem``) unless ``path`` can be
    written as a destination of ``kind`` (``"file"``, ``"folder"`` or ``"report"``)."""
    problem = _problem(Path(path), kind)
    if problem is not None:
        raise InputError(f"{command}: {flag} {path}: {problem}")


def _inside(inner: Path, outer: Path) -> bool:
    return inner == outer or outer in inner.parents


def _real(path) -> Path:
    return Path(os.path.realpath(path))


def check_destinations(args) -> None:
    """Check every destination flag the command was given (before anything is computed),
    and that no two of them overlap (a report folder replaced whole must not hold the run
    folder or the figure)."""
    command = _command(args)
    given = {attr: getattr(args, attr) for attr in DESTINATIONS if getattr(args, attr, None)}
    for attr, path in given.items():
        flag, kind = DESTINATIONS[attr]
        check_destination(path, kind, flag, command)
    for whole, report in given.items():  # (--report, --csv: folders replaced whole)
        if DESTINATIONS[whole][1] != "report":
            continue
        for attr, path in given.items():
            if attr != whole and (_inside(_real(path), _real(report))
                                  or _inside(_real(report), _real(path))):
                flag, whole_flag = DESTINATIONS[attr][0], DESTINATIONS[whole][0]
                raise InputError(f"{command}: {flag} {path} and {whole_flag} {report} overlap "
                                 "(the report folder is replaced whole): keep them apart")


def scenario_inputs(scenario) -> list[Path]:
    """The files a scenario was read from: its own file and every file it names (arrival
    traces, empirical samples), as real paths."""
    import json

    out = []
    if scenario.file and scenario.file != "<string>":
        out.append(_real(scenario.file))
    base = Path(scenario.base_dir) if scenario.base_dir else Path.cwd()
    doc = json.loads(scenario.document)
    named = [spec.get("trace") for spec in (doc.get("sources") or {}).values()
             if isinstance(spec, dict)]
    for spec in (doc.get("places") or {}).values():
        if isinstance(spec, dict):
            named += [d.get("file") for d in (spec.get("hold"), spec.get("patience"))
                      if isinstance(d, dict)]
    out += [_real(base / name) for name in named if isinstance(name, str)]
    return out


def check_inputs_kept(args, inputs: Iterable[os.PathLike]) -> None:
    """Refuse a file destination that is an input, and a report folder that holds one."""
    command = _command(args)
    inputs = [_real(p) for p in inputs]
    for attr, (flag, kind) in DESTINATIONS.items():
        path = getattr(args, attr, None)
        if not path:
            continue
        real = _real(path)
        for source in inputs:
            if kind == "file" and real == source:
                raise InputError(f"{command}: {flag} {path}: is an input of this run "
                                 f"({source}); it is never overwritten")
            if kind == "report" and _inside(source, real):
                raise InputError(f"{command}: {flag} {path}: holds an input of this run "
                                 f"({source}); the report folder is replaced whole")
