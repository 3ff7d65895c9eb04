"""``python -m fluid.bench``: how long the fluid answers take on invented multi-skill nets.

For K = 2, 8, 32, 128 classes (:func:`fluid.bench_nets.multi_skill_yaml`, with priorities and,
for the throughput LP, without), in one run: the time to load and validate the scenario, the
wall time and peak memory of the whole ``fluidgap fluid`` process (start-up included, as a user
waits for it), the ``fluidgap phases`` wall time where it is affordable, and the time per grid
step of one integration of the fluid equations (counter equations and the model with
abandonment). Times are seconds on this machine, which is shared and noisy: compare figures of
one run with each other.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

__all__ = ["NetTiming", "measure", "main"]


@dataclass(frozen=True)
class NetTiming:
    """One benchmark net: ``k`` classes, ``kind`` "prio" or "lp", ``transitions``; seconds to
    load it, wall seconds and peak resident MiB of ``fluidgap fluid``, wall seconds of
    ``fluidgap phases`` (None when not run), microseconds per grid step of one integration
    with the counter equations and with abandonment, and the number of grid steps."""

    k: int
    kind: str
    transitions: int
    load_s: float
    fluid_s: float
    fluid_mib: float
    phases_s: float | None
    step_us: float
    step_abandon_us: float
    steps: int


def _cli() -> list[str]:
    script = Path(sys.executable).with_name("fluidgap")
    return [str(script)] if script.exists() else [sys.executable, "-m", "compare.cli"]


def _run(args: list[str]) -> tuple[float, float]:
    """Wall seconds and peak resident MiB of one process (its exit code must be 0). The peak is
    the process's own high-water mark (VmHWM, polled until it exits): the rusage of a child
    would carry over this benchmark's own peak across exec."""
    start = time.perf_counter()
    proc = subprocess.Popen(args, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    peak_kib = 0
    status = Path(f"/proc/{proc.pid}/status")
    while proc.poll() is None:
        try:
            for line in status.read_text().splitlines():
                if line.startswith("VmHWM:"):
                    peak_kib = max(peak_kib, int(line.split()[1]))
        except (OSError, ValueError):
            pass
        time.sleep(0.005)
    wall = time.perf_counter() - start
    err = proc.stderr.read().decode(errors="replace") if proc.stderr else ""
    if proc.returncode != 0:
        raise RuntimeError(f"{' '.join(args)} failed ({proc.returncode}): {err.strip()}")
    return wall, peak_kib / 1024.0


def _step_time(scenario, model) -> tuple[float, int]:
    from fluid.counters import integrate_counters

    integrate_counters(scenario, model=model)  # compile and warm up
    best, steps = float("inf"), 1
    for _ in range(3):
        t0 = time.perf_counter()
        sol = integrate_counters(scenario, model=model)
        best = min(best, time.perf_counter() - t0)
        steps = len(sol.times)
    return best / steps * 1e6, steps


def measure(k: int, kind: str, folder: Path, *, phases: bool) -> NetTiming:
    from fluid.bench_nets import multi_skill_yaml
    from fluid.counters import COUNTERS, WITH_ABANDONMENT
    from fluid.loading import load_scenario

    path = folder / f"{kind}{k}.yaml"
    path.write_text(multi_skill_yaml(k, priorities=(kind == "prio")))
    t0 = time.perf_counter()
    scenario = load_scenario(path)
    load_s = time.perf_counter() - t0
    fluid_s, fluid_mib = _run([*_cli(), "fluid", str(path)])
    phases_s = None
    if phases:
        phases_s, _ = _run([*_cli(), "phases", str(path), "--axes", "desk_0", "shared"])
    step, steps = _step_time(scenario, COUNTERS)
    step_ab, _ = _step_time(scenario, WITH_ABANDONMENT)
    return NetTiming(k, kind, len(scenario.transitions), load_s, fluid_s, fluid_mib, phases_s,
                     step, step_ab, steps)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m fluid.bench", description=__doc__)
    parser.add_argument("--sizes", type=int, nargs="+", default=[2, 8, 32, 128],
                        help="numbers of classes (default: 2 8 32 128)")
    parser.add_argument("--quick", action="store_true", help="K = 2 and 8 only")
    args = parser.parse_args(argv)
    sizes = [2, 8] if args.quick else args.sizes
    from fluid.kernel import COMPILED

    print(f"fluid benchmark: invented multi-skill nets; step loop "
          f"{'compiled (numba)' if COMPILED else 'plain Python (numba missing)'}")
    head = (f"{'net':>8} {'trans':>6} {'load s':>7} {'fluid s':>8} {'fluid MiB':>10} "
            f"{'phases s':>9} {'us/step':>8} {'us/step ab':>10} {'steps':>6}")
    print(head)
    with tempfile.TemporaryDirectory() as tmp:
        for kind in ("prio", "lp"):
            for k in sizes:
                r = measure(k, kind, Path(tmp), phases=(kind == "prio" and k <= 8))
                ph = "-" if r.phases_s is None else f"{r.phases_s:.2f}"
                print(f"{kind + str(k):>8} {r.transitions:>6} {r.load_s:>7.2f} "
                      f"{r.fluid_s:>8.2f} {r.fluid_mib:>10.0f} {ph:>9} {r.step_us:>8.1f} "
                      f"{r.step_abandon_us:>10.1f} {r.steps:>6}", flush=True)
    print("fluid s / MiB: the whole `fluidgap fluid NET` process; phases: `fluidgap phases NET "
          "--axes desk_0 shared`; us/step: one integration of the counter equations (ab: the "
          "fluid model with abandonment) per grid step")
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
