"""Fluid trajectories per interval, set against the simulated ones (time-varying scenarios).

For scenarios with arrival profiles, traces or staffing schedules the long-run fluid rates say
little; what matters is the course of the day. The fluid counters of design.md §4.1
(:func:`fluid.counters.integrate_counters`) are read on the same intervals as the simulation's
per-interval table (``desim.replicate(..., interval=STEP)``), metric by metric:

* ``arrivals``: Σ over sources of z_s(end) − z_s(start) (jobs);
* ``completed``: Σ over the transitions that end jobs of z_q(end) − z_q(start) (jobs);
* ``abandoned``: 0 — the fluid counters ignore patience (nobody abandons);
* ``queue`` (per waiting place): time average over the interval of the fluid jobs available and
  not yet taken (trapezoid rule on the grid, whose counters are piecewise linear);
* ``service_level`` (per place with a target): share of the fluid that becomes available in the
  interval and is taken within the target's ``within``
  (:func:`fluid.service_level.fifo_service_level`). Jobs leave a place first-in first-out,
  so a fluid particle that becomes available when the availability curve A(t) reaches level v
  is taken when the outflow curve D first reaches v; its wait is that time minus its own. Each
  grid step's increment of A is represented by its mid-point (exact when A and D are linear
  between grid points, as they are for Poisson rates and profiles whose steps the grid divides).

All times are in the scenario's time unit; the table is tidy, one row per (interval, metric,
name), with columns interval, start, end, metric, name, fluid, mean, low, high, n.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
import pandas as pd

from fluid.counters import CounterSolution, integrate_counters
from fluid.scenario import Scenario
from fluid.service_level import fifo_service_level, place_curves

__all__ = [
    "TRANSIENT_COLUMNS",
    "counters_for",
    "default_interval",
    "fluid_interval_value",
    "fluid_queue_average",
    "transient_table",
    "window_figures",
]

TRANSIENT_COLUMNS = ["interval", "start", "end", "metric", "name", "fluid", "mean", "low", "high",
                     "n"]


def default_interval(scenario: Scenario, horizon: float) -> float:
    """Interval length for the per-interval comparison: the shortest profile or schedule step;
    with only traces (or nothing time-varying), a twentieth of ``horizon``."""
    steps = [step for s in scenario.sources.values() for step in s.arrivals.steps]
    steps += [p.schedule.step for p in scenario.pools.values() if p.schedule is not None]
    return float(min(steps)) if steps else float(horizon) / 20.0


def counters_for(scenario: Scenario, horizon: float,
                 counters: CounterSolution | None = None) -> CounterSolution:
    """``counters`` if they cover ``[0, horizon]``, else the counters integrated over it."""
    if counters is not None and counters.horizon >= horizon * (1 - 1e-12):
        return counters
    return integrate_counters(scenario, horizon=horizon)


def _at(sol: CounterSolution, curve: np.ndarray, t: float) -> float:
    """Value of a grid curve at time ``t`` (linear between grid points)."""
    return float(np.interp(t, sol.times, curve))


def fluid_queue_average(sol: CounterSolution, place: str, start: float, end: float) -> float:
    """Time-average fluid jobs available and waiting in ``place`` over ``[start, end]``."""
    if end <= start:
        return math.nan
    t = sol.times
    inside = (t > start) & (t < end)
    ts = np.concatenate([[start], t[inside], [end]])
    ys = np.concatenate([[_at(sol, sol.waiting[place], start)], sol.waiting[place][inside],
                         [_at(sol, sol.waiting[place], end)]])
    return float(np.trapezoid(ys, ts) / (end - start))


def fluid_interval_value(scenario: Scenario, sol: CounterSolution, metric: str, name: str,
                         start: float, end: float) -> float:
    """The fluid figure of one row of the simulation's per-interval table (nan for a metric the
    fluid model does not give)."""
    if metric == "arrivals":
        return float(sum(_at(sol, z, end) - _at(sol, z, start)
                         for z in sol.source_counters.values()))
    if metric == "completed":
        ending = scenario.ending_transitions
        return float(sum(_at(sol, sol.counters[q], end) - _at(sol, sol.counters[q], start)
                         for q in ending))
    if metric == "abandoned":
        return 0.0  # the counters ignore patience
    if metric == "queue" and name in sol.waiting:
        return fluid_queue_average(sol, name, start, end)
    if metric == "service_level" and name in scenario.targets.service:
        within = scenario.targets.service[name].within
        return fifo_service_level(scenario, sol, name, within, start, end)
    return math.nan


def transient_table(scenario: Scenario, intervals: pd.DataFrame,
                    counters: CounterSolution | None = None,
                    horizon: float | None = None) -> pd.DataFrame:
    """Tidy per-interval table: the simulation's ``intervals`` (columns interval, start, end,
    metric, name, mean, low, high, n, as from :func:`desim.replicate` with ``interval=``) with a
    ``fluid`` column read from the counters on the same intervals.

    ``counters``: a counter solution to reuse when it covers the last interval's end (e.g.
    ``FluidResult.counters``); otherwise they are integrated over ``horizon`` (default: the last
    interval's end)."""
    if intervals is None or len(intervals) == 0:
        return pd.DataFrame(columns=TRANSIENT_COLUMNS)
    end = float(intervals["end"].max()) if horizon is None else float(horizon)
    sol = counters_for(scenario, end, counters)
    cache: dict[tuple, float] = {}
    fluid = []
    for row in intervals.itertuples(index=False):
        key = (row.metric, row.name, float(row.start), float(row.end))
        if key not in cache:
            cache[key] = fluid_interval_value(scenario, sol, *key)
        fluid.append(cache[key])
    out = intervals.copy()
    out["fluid"] = fluid
    return out[TRANSIENT_COLUMNS].reset_index(drop=True)


def window_figures(scenario: Scenario, sol: CounterSolution, place: str, window: Sequence[float],
                   within: float | None = None) -> dict[str, float]:
    """Fluid figures of a waiting place over a window ``(start, end)`` from the counters:
    ``inflow`` and ``outflow`` (per time unit), ``queue`` (time average), ``wait`` (by Little's
    law, queue / inflow), ``served_within`` (when ``within`` is given). Used for time-varying
    scenarios, where no steady state exists."""
    start, end = float(window[0]), float(window[1])
    avail, taken = place_curves(scenario, sol, place)
    length = end - start
    inflow = (_at(sol, avail, end) - _at(sol, avail, start)) / length
    outflow = (_at(sol, taken, end) - _at(sol, taken, start)) / length
    queue = fluid_queue_average(sol, place, start, end)
    wait = queue / inflow if inflow > 0 else 0.0
    out = {"inflow": inflow, "outflow": outflow, "queue": queue, "wait": wait}
    if within is not None:
        out["served_within"] = fifo_service_level(scenario, sol, place, within, start, end)
    return out
