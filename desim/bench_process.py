"""Whole-process timings for the benchmark (:mod:`desim.bench`): what a user waits for at the
command line, start-up included.

1. Start-up: the import time of the console script's module (``python -X importtime -c
   'import MODULE'``, the cumulative microseconds on its last line; the module is read from the
   ``fluidgap`` entry point), and the wall time of ``fluidgap --help`` and of ``fluidgap inspect
   configs/utility-line.yaml``.
2. A whole simulation as a process: ``fluidgap simulate`` on the benchmark's M/M/50 station (one
   replication, one worker, ``--quiet --json`` to /dev/null; the station written to a temporary
   YAML file) against the hand-written process-per-caller SimPy model of :mod:`desim.bench`
   run by its own Python process on the same file, seed and horizon (the same sample path).

Every figure is the least wall time (or import time) over ``repeats`` runs, each a fresh
process. Only the ``fluidgap`` executable beside ``sys.executable`` is run, and ``compare`` is
never imported here, so these figures do not depend on how that package is laid out inside.
A command that fails gives its last line of stderr instead of a time; nothing here asserts a
speed.
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

__all__ = ["StartupTiming", "ProcessTiming", "fluidgap_executable", "console_module",
           "measure_startup", "measure_whole_process", "process_row", "startup_line", "notes",
           "SIMPY_SCRIPT"]

#: The reference process: the benchmark's process-per-caller SimPy model on a scenario file.
#: Arguments: scenario path, horizon (min), seed. Prints callers and their mean wait (min).
SIMPY_SCRIPT = """\
import sys
from fluid.loading import load_scenario
from desim.bench import _simpy_station
callers, wait = _simpy_station(load_scenario(sys.argv[1]), float(sys.argv[2]), int(sys.argv[3]))
print(callers, repr(wait))
"""


@dataclass(frozen=True)
class StartupTiming:
    """``module``: the console script's module; ``import_us``: its cumulative import time in
    microseconds (least over the repeats); ``help_seconds``, ``inspect_seconds``: wall time of
    ``fluidgap --help`` and ``fluidgap inspect <inspected>``. A figure is None when its command
    failed; ``errors`` then says why."""

    module: str
    inspected: str
    import_us: int | None
    help_seconds: float | None
    inspect_seconds: float | None
    errors: tuple[str, ...] = ()


@dataclass(frozen=True)
class ProcessTiming:
    """Wall time (s) of the whole ``fluidgap simulate`` process and of the SimPy reference
    process over ``horizon`` min of the station; ``ratio``: reference / fluidgap (above 1:
    fluidgap is faster), None when either failed (``errors`` says why)."""

    horizon: float
    fluidgap_seconds: float | None
    simpy_seconds: float | None
    errors: tuple[str, ...] = ()

    @property
    def ratio(self) -> float | None:
        if self.fluidgap_seconds is None or self.simpy_seconds is None:
            return None
        return self.simpy_seconds / self.fluidgap_seconds


def fluidgap_executable() -> Path:
    """The ``fluidgap`` console script installed beside the running interpreter."""
    return Path(sys.executable).parent / "fluidgap"


def console_module() -> str:
    """The module of the ``fluidgap`` entry point (``compare.cli`` unless it moved)."""
    from importlib.metadata import entry_points

    for ep in entry_points(group="console_scripts", name="fluidgap"):
        return ep.module
    return "compare.cli"


class _Failed(Exception):
    """A measured command exited non-zero; the message is its last line of stderr."""


def _run(argv: list[str], cwd: Path) -> subprocess.CompletedProcess:
    done = subprocess.run(argv, cwd=cwd, stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL,
                          stderr=subprocess.PIPE, text=True)
    if done.returncode != 0:
        lines = done.stderr.strip().splitlines() or [f"exit code {done.returncode}"]
        raise _Failed(f"{Path(argv[0]).name} {' '.join(argv[1:2])}: {lines[-1]}")
    return done


def _best_wall(argv: list[str], cwd: Path, repeats: int) -> float:
    best = float("inf")
    for _ in range(repeats):
        start = time.perf_counter()
        _run(argv, cwd)
        best = min(best, time.perf_counter() - start)
    return best


def _import_us(module: str, cwd: Path, repeats: int) -> int:
    """Least cumulative import time (us) of ``module`` in a fresh interpreter."""
    best = None
    for _ in range(repeats):
        done = subprocess.run([sys.executable, "-X", "importtime", "-c", f"import {module}"],
                              cwd=cwd, stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL,
                              stderr=subprocess.PIPE, text=True)
        last = done.stderr.strip().splitlines()[-1:] or [""]
        fields = [f.strip() for f in last[0].split("|")]
        if done.returncode != 0 or len(fields) != 3 or fields[2] != module:
            raise _Failed(f"import {module}: {last[0] or f'exit code {done.returncode}'}")
        us = int(fields[1])
        best = us if best is None else min(best, us)
    return best


def _measured(errors: list[str], measure):
    try:
        return measure()
    except (_Failed, OSError) as exc:
        errors.append(str(exc))
        return None


def measure_startup(inspected: Path, cwd: Path, repeats: int = 3) -> StartupTiming:
    """Import time of the console script's module and wall time of ``fluidgap --help`` and
    ``fluidgap inspect INSPECTED`` (run in ``cwd``), least of ``repeats`` each."""
    exe, module, errors = str(fluidgap_executable()), console_module(), []
    import_us = _measured(errors, lambda: _import_us(module, cwd, repeats))
    help_s = _measured(errors, lambda: _best_wall([exe, "--help"], cwd, repeats))
    inspect_s = _measured(errors, lambda: _best_wall([exe, "inspect", str(inspected)], cwd,
                                                     repeats))
    return StartupTiming(module, str(inspected), import_us, help_s, inspect_s, tuple(errors))


def measure_whole_process(station_yaml: str, horizon: float, seed: int, cwd: Path,
                          repeats: int = 3) -> ProcessTiming:
    """``fluidgap simulate`` on the station given as YAML text against the SimPy reference
    process (:data:`SIMPY_SCRIPT`) on the same file, over ``horizon`` min with ``seed``."""
    errors: list[str] = []
    with tempfile.TemporaryDirectory(prefix="fluidgap-bench-") as tmp:
        path = Path(tmp) / "station.yaml"
        path.write_text(station_yaml)
        ours = [str(fluidgap_executable()), "simulate", str(path), "--reps", "1",
                "--workers", "1", "--horizon", repr(float(horizon)), "--warmup", "0",
                "--seed", str(seed), "--quiet", "--json"]
        simpy_argv = [sys.executable, "-c", SIMPY_SCRIPT, str(path), repr(float(horizon)),
                      str(seed)]
        ours_s = _measured(errors, lambda: _best_wall(ours, cwd, repeats))
        simpy_s = _measured(errors, lambda: _best_wall(simpy_argv, cwd, repeats))
    return ProcessTiming(float(horizon), ours_s, simpy_s, tuple(errors))

# --- text ----------------------------------------------------------------------------------------


def _seconds(x: float | None) -> str:
    return "failed" if x is None else f"{x:.3f}"


def process_row(t: ProcessTiming) -> tuple[str, str, str, str]:
    """The benchmark table's row (measure, ours, reference, ratio) of the whole processes."""
    return (f"whole process s, fluidgap simulate vs SimPy script, horizon {t.horizon:g}",
            _seconds(t.fluidgap_seconds), _seconds(t.simpy_seconds),
            "-" if t.ratio is None else f"{t.ratio:.2f}")


def startup_line(t: StartupTiming, repeats: int) -> str:
    """One line: import time of the console script's module, wall time of --help and inspect."""
    ms = "failed" if t.import_us is None else f"{t.import_us / 1000:,.0f} ms"
    return (f"start-up (best of {repeats}): import {t.module} {ms} (-X importtime, cumulative); "
            f"fluidgap --help {_seconds(t.help_seconds)} s; fluidgap inspect "
            f"{Path(t.inspected).name} {_seconds(t.inspect_seconds)} s")


def notes(startup: StartupTiming, process: ProcessTiming, repeats: int) -> list[str]:
    """The start-up line, what the whole-process row compares, and any failures."""
    lines = [startup_line(startup, repeats),
             f"whole process: {fluidgap_executable()} simulate (1 replication, 1 worker, "
             "--quiet --json to /dev/null) vs the SimPy model above run by python -c on the same "
             f"station file, best of {repeats}; ratio = SimPy / fluidgap (above 1: fluidgap is "
             "faster)"]
    lines += [f"failed: {e}" for e in (*startup.errors, *process.errors)]
    return lines
