"""Speed and memory benchmark of the simulator: ``python -m desim.bench [--quick] [--json]``.

Measures, in one run and with one seed:

1. callers per second on an M/M/50 station at load 0.9 (45 callers per min, exponential holds of
   mean 1 min, no patience) with :func:`desim.run_replication`, against a hand-written SimPy model
   of the same station with one generator process per caller (``simpy.Resource``);
2. the same against a pure-Python FCFS recursion on a heap of the agents' next-free times
   (Kiefer and Wolfowitz's workload vector): the fastest a Python simulation of this station
   can be, a floor for any general engine;
3. events per second on the built-in demo scenario (``compare/demo/utility-line.yaml``, or
   ``--scenario PATH``), from :attr:`desim.RunResult.events` and the wall time;
4. peak memory of the station at horizons H and 4H, each in a fresh process, to show whether
   memory stays flat in the horizon when no per-job records are kept;
5. start-up and whole processes (:mod:`desim.bench_process`): the import time of the console
   script's module, the wall time of ``fluidgap --help`` and ``fluidgap inspect``, and
   ``fluidgap simulate`` on the station as one process against the SimPy model run as one.

The two reference models take their arrival gaps and holds from the very streams the engine uses
(:func:`desim.streams.stream_rng`, same seed, same block draws), so the three simulate the same
sample path and their mean waits agree to rounding; the benchmark reports them as a check.
Times are wall-clock seconds (``time.perf_counter``), best of ``repeats``; simulated times are in
minutes. This is a measurement, never a test: nothing here asserts a speed.
"""

from __future__ import annotations

import argparse
import gc
import heapq
import json
import math
import os
import resource
import subprocess
import sys
import time
import tracemalloc
from dataclasses import asdict, dataclass
from pathlib import Path

import simpy

from fluid.errors import ScenarioError
from fluid.loading import load_scenario, load_scenario_text
from fluid.scenario import Scenario

from .bench_process import (
    ProcessTiming,
    StartupTiming,
    measure_startup,
    measure_whole_process,
    process_row,
)
from .bench_process import notes as process_notes
from .run import run_replication
from .streams import BLOCK, block_draws, stream_rng

__all__ = ["Timing", "DemoTiming", "MemoryPeak", "BenchReport", "station_yaml",
           "station_scenario", "time_engine", "time_simpy_processes", "time_heap_recursion",
           "time_scenario_events", "demo_path", "memory_peak", "measure_memory", "run_bench",
           "main"]

SERVERS, RATE, MEAN_HOLD = 50, 45.0, 1.0  # load 45/50 = 0.9
SEED = 2024



@dataclass(frozen=True)
class Timing:
    """One model of the station: ``callers`` arrivals over ``horizon`` min in ``seconds`` wall time
    (best of the repeats), ``mean_wait`` (min) over callers taken before the horizon."""

    model: str
    horizon: float
    callers: int
    seconds: float
    mean_wait: float

    @property
    def callers_per_second(self) -> float:
        return self.callers / self.seconds


@dataclass(frozen=True)
class DemoTiming:
    """Events (arrivals, ends of holds, firings, abandonments) of one replication of a scenario
    over ``horizon`` (its time unit) in ``seconds`` wall time (best of the repeats)."""

    scenario: str
    horizon: float
    events: int
    seconds: float

    @property
    def events_per_second(self) -> float:
        return self.events / self.seconds


@dataclass(frozen=True)
class MemoryPeak:
    """Memory of one run of the station over ``horizon`` min in a fresh process: ``traced_mib``
    is the peak of Python allocations during the run (tracemalloc), ``rss_growth_mib`` the rise of
    the process's maximum resident set over the run, ``max_rss_mib`` that maximum (MiB);
    ``records``: the run kept its per-job records (``record_jobs``), the contrast that shows the
    probe does see memory that grows with the horizon."""

    horizon: float
    callers: int
    traced_mib: float
    rss_growth_mib: float
    max_rss_mib: float
    records: bool = False


@dataclass(frozen=True)
class BenchReport:
    """All figures of one benchmark run."""

    quick: bool
    seed: int
    repeats: int
    ours: Timing
    simpy_processes: Timing
    heap_recursion: Timing
    erlang_c_mean_wait: float
    demo: DemoTiming
    memory: tuple[MemoryPeak, MemoryPeak]
    memory_records: MemoryPeak
    startup: StartupTiming | None = None
    whole_process: ProcessTiming | None = None

    def to_json(self) -> dict:
        def timing(t: Timing) -> dict:
            return {**asdict(t), "callers_per_second": t.callers_per_second}

        small, large = self.memory
        return {
            "quick": self.quick, "seed": self.seed, "repeats": self.repeats,
            "station": {
                "servers": SERVERS, "arrival_rate": RATE, "mean_hold": MEAN_HOLD,
                "ours": timing(self.ours),
                "simpy_processes": timing(self.simpy_processes),
                "heap_recursion": timing(self.heap_recursion),
                "ratio_ours_to_simpy_processes":
                    self.ours.callers_per_second / self.simpy_processes.callers_per_second,
                "ratio_ours_to_heap_recursion":
                    self.ours.callers_per_second / self.heap_recursion.callers_per_second,
                "erlang_c_mean_wait": self.erlang_c_mean_wait,
            },
            "demo": {**asdict(self.demo), "events_per_second": self.demo.events_per_second},
            "memory": {
                "runs": [asdict(m) for m in self.memory],
                "with_job_records": asdict(self.memory_records),
                "traced_ratio_4h_to_h": large.traced_mib / small.traced_mib,
                "max_rss_ratio_4h_to_h": large.max_rss_mib / small.max_rss_mib,
            },
            "startup": None if self.startup is None else asdict(self.startup),
            "whole_process": None if self.whole_process is None else {
                **asdict(self.whole_process), "ratio_simpy_to_fluidgap": self.whole_process.ratio},
        }


def station_yaml(servers: int = SERVERS, rate: float = RATE, mean_hold: float = MEAN_HOLD,
                 seed: int = SEED) -> str:
    """The benchmark's M/M/c station as scenario YAML text (rate per min, hold in min)."""
    from fluid.stations import station_yaml as single_station

    return single_station(servers, float(rate), float(mean_hold),
                          name=f"M/M/{servers} benchmark station (invented)", targets=False,
                          run={"horizon": 4000, "warmup": 0, "replications": 1, "seed": seed})


def station_scenario(servers: int = SERVERS, rate: float = RATE, mean_hold: float = MEAN_HOLD,
                     seed: int = SEED) -> Scenario:
    """The benchmark's M/M/c station as a Scenario (:func:`station_yaml`)."""
    return load_scenario_text(station_yaml(servers, rate, mean_hold, seed), file="<bench station>")


def _erlang_c_mean_wait(servers: int, rate: float, mean_hold: float) -> float:
    """Mean wait of all callers in M/M/c (min): C/(cμ − λ), C from the Erlang B recursion
    B_n = A·B_{n−1}/(n + A·B_{n−1}) and C = cB/(c − A(1 − B)) (Erlang 1917). A printed reference
    only (desim does not import compare)."""
    load = rate * mean_hold
    b = 1.0
    for n in range(1, servers + 1):
        b = load * b / (n + load * b)
    c = servers * b / (servers - load * (1 - b))
    return c / (servers / mean_hold - rate)


def _streams(scenario: Scenario, seed: int):
    """Arrival gaps (standard exponential) and holds (min) of replication 0, drawn exactly as
    :func:`desim.net.build_net` draws them, so the reference models see the engine's sample path."""
    gaps = block_draws(lambda g, n: g.standard_exponential(n),
                       stream_rng(seed, 0, "arrivals", "calls"), BLOCK)
    holds = block_draws(scenario.places["talk"].hold.sample, stream_rng(seed, 0, "hold", "talk"),
                        BLOCK)
    return gaps, holds


def _best_of(repeats: int, job):
    """Run ``job()`` ``repeats`` times; return (least wall time, the last result)."""
    best, out = math.inf, None
    for _ in range(repeats):
        gc.collect()
        start = time.perf_counter()
        out = job()
        best = min(best, time.perf_counter() - start)
    return best, out


def time_engine(scenario: Scenario, horizon: float, seed: int = SEED, repeats: int = 3) -> Timing:
    """:func:`desim.run_replication` on the station (no per-job records), best of ``repeats``."""
    seconds, run = _best_of(repeats, lambda: run_replication(scenario, 0, horizon=horizon,
                                                             warmup=0.0, seed=seed))
    return Timing("desim engine", horizon, run.totals["arrivals"], seconds,
                  run.places["queue"]["wait"])


def _simpy_station(scenario: Scenario, horizon: float, seed: int) -> tuple[int, float]:
    """Hand-written process-per-caller SimPy model: arrivals, then each caller requests an agent,
    holds it and releases it. Returns (arrivals, mean wait of callers taken before the horizon)."""
    gaps, holds = _streams(scenario, seed)
    rate = scenario.sources["calls"].arrivals.rate
    env = simpy.Environment()
    agents = simpy.Resource(env, capacity=scenario.pools["agents"].staff)
    tally = [0, 0, 0.0]  # arrivals, callers taken, their total wait

    def caller(hold: float):
        arrived = env.now
        with agents.request() as req:
            yield req
            tally[1] += 1
            tally[2] += env.now - arrived
            yield env.timeout(hold)

    def arrivals():
        while True:
            yield env.timeout(next(gaps) / rate)
            tally[0] += 1
            env.process(caller(next(holds)))

    env.process(arrivals())
    env.run(until=horizon)
    return tally[0], tally[2] / tally[1]


def time_simpy_processes(scenario: Scenario, horizon: float, seed: int = SEED,
                         repeats: int = 3) -> Timing:
    """The hand-written SimPy model of the station, best of ``repeats``."""
    seconds, (n, wait) = _best_of(repeats, lambda: _simpy_station(scenario, horizon, seed))
    return Timing("SimPy, process per caller", horizon, n, seconds, wait)


def _heap_station(scenario: Scenario, horizon: float, seed: int) -> tuple[int, float]:
    """FCFS M/M/c by the workload-vector recursion: each caller starts at max(arrival, earliest
    next-free time of the c agents) and that agent is next free at start + hold."""
    gaps, holds = _streams(scenario, seed)
    rate = scenario.sources["calls"].arrivals.rate
    free = [0.0] * scenario.pools["agents"].staff  # a valid heap
    replace = heapq.heapreplace
    t, n, taken, waited = 0.0, 0, 0, 0.0
    while True:
        t = t + next(gaps) / rate  # the same float arithmetic as the engine's arrivals
        if t >= horizon:
            break
        n += 1
        f = free[0]
        start = t if t > f else f
        replace(free, start + next(holds))
        if start < horizon:
            taken += 1
            waited += start - t
    return n, waited / taken


def time_heap_recursion(scenario: Scenario, horizon: float, seed: int = SEED,
                        repeats: int = 3) -> Timing:
    """The heap recursion on the station, best of ``repeats``."""
    seconds, (n, wait) = _best_of(repeats, lambda: _heap_station(scenario, horizon, seed))
    return Timing("heap recursion (pure Python)", horizon, n, seconds, wait)


def demo_path() -> Path:
    """The built-in demo scenario, found beside the installed ``fluid`` package (desim does not
    import compare; the file is read by path)."""
    import fluid

    return Path(fluid.__file__).resolve().parent.parent / "compare" / "demo" / "utility-line.yaml"


def time_scenario_events(scenario: Scenario, horizon_factor: float = 10.0,
                         seed: int | None = None, repeats: int = 3,
                         label: str | None = None) -> DemoTiming:
    """Events per second of replication 0 of ``scenario`` over ``horizon_factor`` times its own
    horizon (its time unit), best of ``repeats``; ``label`` names it (default: its name)."""
    horizon = scenario.run.horizon * horizon_factor
    seconds, run = _best_of(repeats, lambda: run_replication(
        scenario, 0, horizon=horizon, warmup=0.0, seed=seed))
    return DemoTiming(label or scenario.name, horizon, run.events, seconds)


def memory_peak(horizon: float, seed: int = SEED, records: bool = False) -> MemoryPeak:
    """Memory of one run of the station in *this* process (call it in a fresh one: see
    :func:`measure_memory`); ``records`` keeps the per-job records."""
    scenario = station_scenario(seed=seed)
    kib = 1024.0  # ru_maxrss is in KiB on Linux
    before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    tracemalloc.start()
    run = run_replication(scenario, 0, horizon=horizon, warmup=0.0, seed=seed,
                          record_jobs=records)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    after = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return MemoryPeak(horizon, run.totals["arrivals"], peak / 2**20, (after - before) / kib,
                      after / kib, records)


def measure_memory(horizon: float, seed: int = SEED, records: bool = False) -> MemoryPeak:
    """:func:`memory_peak` in a fresh Python process (so earlier runs leave no high-water mark)."""
    root = str(Path(__file__).resolve().parent.parent)
    env = dict(os.environ)
    env["PYTHONPATH"] = root + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    out = subprocess.run(
        [sys.executable, "-m", "desim.bench", "--memory-probe", repr(float(horizon)),
         "--seed", str(seed)] + (["--memory-records"] if records else []),
        capture_output=True, text=True, check=True, env=env, cwd=root)
    return MemoryPeak(**json.loads(out.stdout))


def run_bench(*, quick: bool = False, seed: int = SEED, scenario_path: str | Path | None = None,
              repeats: int | None = None) -> BenchReport:
    """Every measurement of the benchmark. ``quick``: short runs and one repeat (a smoke test)."""
    repeats = (1 if quick else 3) if repeats is None else repeats
    path = Path(scenario_path) if scenario_path is not None else demo_path()
    scenario = load_scenario(path)  # first, so that a bad path fails before any timing
    horizon = 400.0 if quick else 4000.0  # about 18,000 or 180,000 callers
    station = station_scenario(seed=seed)
    ours = time_engine(station, horizon, seed, repeats)
    handwritten = time_simpy_processes(station, horizon, seed, repeats)
    heap = time_heap_recursion(station, horizon, seed, repeats)
    demo = time_scenario_events(scenario, 1.0 if quick else 10.0, None, repeats, str(path))
    h = 100.0 if quick else 1000.0
    memory = (measure_memory(h, seed), measure_memory(4 * h, seed))
    records = measure_memory(4 * h, seed, records=True)
    root = Path(__file__).resolve().parent.parent
    inspected = root / "configs" / "utility-line.yaml"
    startup = measure_startup(inspected if inspected.is_file() else path, root, repeats)
    process = measure_whole_process(station_yaml(seed=seed), horizon, seed, root, repeats)
    return BenchReport(quick, seed, repeats, ours, handwritten, heap,
                       _erlang_c_mean_wait(SERVERS, RATE, MEAN_HOLD), demo, memory, records,
                       startup, process)


def _table(report: BenchReport) -> str:
    doc = report.to_json()
    st, demo, mem = doc["station"], report.demo, report.memory
    ours = report.ours
    rows = [
        ("measure", "ours", "reference", "ratio"),
        (f"M/M/{SERVERS} callers/s vs SimPy process per caller",
         f"{ours.callers_per_second:,.0f}", f"{report.simpy_processes.callers_per_second:,.0f}",
         f"{st['ratio_ours_to_simpy_processes']:.2f}"),
        (f"M/M/{SERVERS} callers/s vs heap recursion",
         f"{ours.callers_per_second:,.0f}", f"{report.heap_recursion.callers_per_second:,.0f}",
         f"{st['ratio_ours_to_heap_recursion']:.2f}"),
        (f"events/s, {Path(demo.scenario).stem} (one replication)",
         f"{demo.events_per_second:,.0f}", "-", "-"),
        (f"peak traced MiB, horizon {mem[1].horizon:g} vs {mem[0].horizon:g}",
         f"{mem[1].traced_mib:.2f}", f"{mem[0].traced_mib:.2f}",
         f"{mem[1].traced_mib / mem[0].traced_mib:.2f}"),
        (f"max RSS MiB, horizon {mem[1].horizon:g} vs {mem[0].horizon:g}",
         f"{mem[1].max_rss_mib:.1f}", f"{mem[0].max_rss_mib:.1f}",
         f"{mem[1].max_rss_mib / mem[0].max_rss_mib:.2f}"),
        (f"peak traced MiB, horizon {mem[1].horizon:g}, job records vs none",
         f"{report.memory_records.traced_mib:.2f}", f"{mem[1].traced_mib:.2f}",
         f"{report.memory_records.traced_mib / mem[1].traced_mib:.1f}"),
    ]
    if report.whole_process is not None:
        rows.append(process_row(report.whole_process))
    widths = [max(len(r[i]) for r in rows) for i in range(4)]
    lines = ["  ".join(c.ljust(w) if i == 0 else c.rjust(w) for i, (c, w) in
                       enumerate(zip(r, widths))) for r in rows]
    lines.insert(1, "  ".join("-" * w for w in widths))
    notes = [
        "",
        f"station: {SERVERS} agents, {RATE:g} callers/min, mean hold {MEAN_HOLD:g} min, horizon "
        f"{ours.horizon:g} min, {ours.callers:,} callers, seed {report.seed}, best of "
        f"{report.repeats}",
        "mean wait (min): ours {:.6f}, SimPy processes {:.6f}, heap recursion {:.6f}, "
        "Erlang C {:.6f}".format(ours.mean_wait, report.simpy_processes.mean_wait,
                                 report.heap_recursion.mean_wait, report.erlang_c_mean_wait),
        f"wall time (s): ours {ours.seconds:.3f}, SimPy processes "
        f"{report.simpy_processes.seconds:.3f}, heap recursion {report.heap_recursion.seconds:.3f}",
        f"scenario: {demo.scenario}, horizon {demo.horizon:g}, {demo.events:,} events in "
        f"{demo.seconds:.3f} s",
        "memory: each horizon in a fresh process, no per-job records; callers "
        + ", ".join(f"{m.callers:,} (horizon {m.horizon:g})" for m in mem),
    ]
    if report.startup is not None and report.whole_process is not None:
        notes += process_notes(report.startup, report.whole_process, report.repeats)
    return "\n".join(lines + notes)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m desim.bench",
                                     description="Speed and memory benchmark of the simulator.")
    parser.add_argument("--quick", action="store_true", help="short runs, one repeat (smoke test)")
    parser.add_argument("--json", action="store_true", help="print one JSON document")
    parser.add_argument("--scenario", help="scenario for the events/s figure (default: the demo)")
    parser.add_argument("--seed", type=int, default=SEED, help="seed of every run")
    parser.add_argument("--repeats", type=int, help="repeats per timing (default 3, quick 1)")
    parser.add_argument("--memory-probe", type=float, help=argparse.SUPPRESS)
    parser.add_argument("--memory-records", action="store_true", help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.memory_probe is not None:  # the child process of measure_memory
        print(json.dumps(asdict(memory_peak(args.memory_probe, args.seed,
                                            args.memory_records))))
        return 0
    try:
        report = run_bench(quick=args.quick, seed=args.seed, scenario_path=args.scenario,
                           repeats=args.repeats)
    except ScenarioError as err:  # a bad --scenario: one line, exit 2 (design.md §5)
        print(f"error: {err}", file=sys.stderr)
        return 2
    print(json.dumps(report.to_json(), indent=2) if args.json else _table(report))
    return 0


if __name__ == "__main__":
    sys.exit(main())
