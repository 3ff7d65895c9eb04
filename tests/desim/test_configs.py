"""Every example config, simulated briefly: Little's law on every place and job conservation.

Little's law (Little 1961; a sample-path identity, common practice) on a place over the
measurement window: time-average number waiting = rate of tokens becoming available × mean wait.
Over a finite window the two sides differ only by the waits of tokens present at the window's
edges, so per replication r the difference D_r = queue_r − (became_r / window) · wait_r is small
and, in steady state, centred on 0; for a config that varies in time (profiles, shifts) it is
computed the same way, per replication over that replication's window. The check: 0 lies in the
family-corrected Student t interval of the D_r (the rule of test_reference_erlang.py), widened
only by 1e-9 of the queue for floating-point rounding (the identity can hold to the last bit),
and that interval is narrow, half-width below 10 % of the mean queue. Places where no token ever
waits give exactly 0 = 0 and are checked exactly.

Conservation (design.md §4.2, style.md §11): arrivals = completed + abandoned + inside in every
run (the engine raises otherwise; here the totals are checked from the outside).
"""

from __future__ import annotations

import functools
import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import desim
from fluid.loading import load_scenario

from .test_reference_erlang import NARROW, WORKERS, interval

ROOT = Path(__file__).resolve().parents[2]
CONFIGS = sorted((ROOT / "configs").glob("*.yaml"))
REPS = 10
#: Measurement window of a steady-state config (its time unit, after its own warm-up): long
#: enough that the edge terms of Little's law are small against the queue of every place
#: (the narrowness condition), short enough to stay a quick test.
WINDOW = 5000.0
ROUNDING = 1e-9


@functools.lru_cache(maxsize=None)
def simulated(path: Path):
    """The config with its own warm-up and seed and ``REPS`` replications; a steady-state config
    is measured over ``WINDOW`` after its warm-up, a config that varies in time over its own
    horizon (its day)."""
    scenario = load_scenario(path)
    run = scenario.run
    horizon = run.horizon if scenario.has_time_variation else run.warmup + WINDOW
    return scenario, desim.replicate(scenario, reps=REPS, horizon=horizon, workers=WORKERS)


def test_there_are_configs():
    assert len(CONFIGS) >= 4, CONFIGS


@pytest.mark.parametrize("path", CONFIGS, ids=[p.stem for p in CONFIGS])
def test_littles_law_on_every_place(path):
    scenario, result = simulated(path)
    for place in scenario.places:
        queue, rate_times_wait = [], []
        for run in result.runs:
            m = run.places[place]
            window = run.end - run.warmup
            queue.append(m["queue"])
            # a place nothing left has no mean wait (nan); then nothing waited in it either
            rate_times_wait.append(m["became"] / window * (m["wait"] if m["left"] else 0.0))
        queue, rate_times_wait = np.array(queue), np.array(rate_times_wait)
        if not np.any(queue) and not np.any(rate_times_wait):
            continue  # exact: no token ever waited here, 0 = 0
        diff = queue - rate_times_wait
        mean, half = interval(diff)
        level = float(np.mean(queue))
        assert half < NARROW * level, (
            f"{path.name}: {place}: interval of queue − rate × wait too wide ({half:.3g} for a "
            f"queue of {level:.3g}) to check Little's law")
        assert abs(mean) <= half + ROUNDING * level, (
            f"{path.name}: {place}: queue {level:.6f} vs rate × wait "
            f"{float(np.mean(rate_times_wait)):.6f}: difference {mean:.3g} ± {half:.3g} "
            "excludes 0 (Little's law, common practice)")


@pytest.mark.parametrize("path", CONFIGS, ids=[p.stem for p in CONFIGS])
def test_jobs_are_conserved(path):
    scenario, result = simulated(path)
    for run in result.runs:
        t = run.totals
        assert t["arrivals"] == t["completed"] + t["abandoned"] + t["inside"], (path.name, t)
        assert t["arrivals"] > 0 and min(t.values()) >= 0
        if run.warmup == 0 and not run.unstable:
            # with no warm-up the window is the whole run: the per-source counts add up to the
            # totals (derived by hand: both count the same jobs)
            for key, total in (("arrivals", "arrivals"), ("completed", "completed"),
                               ("abandoned", "abandoned")):
                assert sum(s[key] for s in run.sources.values()) == t[total], (path.name, key)


@pytest.mark.slow  # about 6-10 s: several fresh processes and a few short runs
def test_benchmark_quick_json_runs():
    # A smoke test of `python -m desim.bench --quick --json`: it runs and gives every figure.
    # Speed is never asserted (a measurement, not a test).
    out = subprocess.run([sys.executable, "-m", "desim.bench", "--quick", "--json"],
                         cwd=ROOT, capture_output=True, text=True, timeout=300)
    assert out.returncode == 0, out.stderr
    doc = json.loads(out.stdout)
    assert set(doc) >= {"station", "demo", "memory", "seed", "repeats", "quick"}
    station = doc["station"]
    for model in ("ours", "simpy_processes", "heap_recursion"):
        assert station[model]["callers_per_second"] > 0
        # the three models share the engine's draws, so they simulate the same sample path
        assert station[model]["callers"] == station["ours"]["callers"]
        assert station[model]["mean_wait"] == pytest.approx(station["ours"]["mean_wait"],
                                                            rel=1e-9)
    assert {"ratio_ours_to_simpy_processes", "ratio_ours_to_heap_recursion"} <= set(station)
    assert doc["demo"]["events_per_second"] > 0
    assert len(doc["memory"]["runs"]) == 2 and math.isfinite(doc["memory"]["traced_ratio_4h_to_h"])
    # start-up and whole processes: every command ran (no failure recorded) and was timed
    startup, process = doc["startup"], doc["whole_process"]
    assert startup["errors"] == [] and process["errors"] == []
    assert startup["module"] == "compare.cli" and startup["import_us"] > 0
    assert startup["help_seconds"] > 0 and startup["inspect_seconds"] > 0
    assert process["fluidgap_seconds"] > 0 and process["simpy_seconds"] > 0
    assert process["ratio_simpy_to_fluidgap"] == pytest.approx(
        process["simpy_seconds"] / process["fluidgap_seconds"], rel=1e-12)
