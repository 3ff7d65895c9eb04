"""Fluid trajectories per interval, set against the simulated ones (time-varying scenarios).

For scenarios with arrival profiles, traces or staffing schedules the long-run fluid rates say
little; what matters is the course of the day. The fluid trajectory (the comparison's own
:attr:`fluid.analysis.FluidResult.counters`: the fluid model with abandonment when the net has
patience, the counter equations of design.md §4.1 otherwise) is read on the same intervals as
the simulation's per-interval table (``desim.replicate(..., interval=STEP)``), metric by metric:

* ``arrivals``: Σ over sources of z_s(end) − z_s(start) (jobs);
* ``completed``: Σ over the transitions that end jobs of z_q(end) − z_q(start) (jobs);
* ``abandoned``: the fluid that abandoned in the interval and left (jobs; not what
  ``abandon_to`` sends back);
* ``queue`` (per waiting place): time average over the interval of the fluid jobs available and
  not yet taken (trapezoid rule on the grid, whose counters are piecewise linear);
* ``wait`` (per waiting place): mean wait of the fluid that becomes available in the interval
  and leaves the place (taken or abandoning), by arrival interval as the simulation counts it
  (:func:`fluid.interval_waits.interval_mean_wait`);
* ``service_level`` (per place with a target): share of the fluid that becomes available in the
  interval and is taken within the target's ``within``, abandoners counted by the target's
  convention (as the simulation counts them, by arrival interval): by cohorts
  of the age-structured queue at an impatient place (:func:`fluid.places.cohort_service_level`),
  else :func:`fluid.service_level.fifo_service_level`. Jobs leave a place first-in first-out,
  so a fluid particle that becomes available when the availability curve A(t) reaches level v
  is taken when the outflow curve D first reaches v; its wait is that time minus its own. Each
  grid step's increment of A is represented by its mid-point (exact when A and D are linear
  between grid points, as they are for Poisson rates and profiles whose steps the grid divides).

All times are in the scenario's time unit; the table is tidy, one row per (interval, metric,
name), with columns interval, start, end, metric, name, fluid, mean, low, high, n.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from fluid.counters import COUNTERS, WITH_ABANDONMENT, CounterSolution, integrate_counters
from fluid.interval_waits import interval_mean_wait
from fluid.scenario import Scenario
from fluid.places import cohort_service_level, queue_average
from fluid.service_level import fifo_service_level

__all__ = [
    "TRANSIENT_COLUMNS",
    "counters_for",
    "default_interval",
    "fluid_interval_value",
    "transient_table",
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
    """``counters`` if they cover ``[0, horizon]``, else the fluid trajectory integrated over
    it (with abandonment when the net has patience)."""
    if counters is not None and counters.horizon >= horizon * (1 - 1e-12):
        return counters
    model = WITH_ABANDONMENT if scenario.has_patience else COUNTERS
    return integrate_counters(scenario, horizon=horizon, model=model)


def _at(sol: CounterSolution, curve: np.ndarray, t: float) -> float:
    """Value of a grid curve at time ``t`` (linear between grid points)."""
    return float(np.interp(t, sol.times, curve))


def _scheduled_staff(scenario: Scenario, pool: str, start: float, end: float) -> float:
    """Agent-time scheduled in ``pool`` over ``[start, end]``, exactly (a schedule is a step
    function: each step's staff times its overlap with the interval)."""
    p = scenario.pools[pool]
    if p.schedule is None:
        return float(p.staff) * (end - start)
    step = p.schedule.step
    cuts = [start, *(k * step for k in range(int(start // step) + 1, int(end // step) + 1)
                     if start < k * step < end), end]
    return float(sum(p.staff_at((a + b) / 2) * (b - a) for a, b in zip(cuts, cuts[1:])))


def _pool_value(scenario: Scenario, sol: CounterSolution, metric: str, pool: str,
                start: float, end: float) -> float:
    """Fluid ``staff`` (time-average agents on duty: the scheduled staff, exact, plus the busy
    agents a cut still waits for, the pool's marking below 0) or ``busy`` (busy agent-time,
    scheduled staff less the idle marking, over on-duty agent-time) of ``pool``."""
    if end <= start:
        return math.nan
    scheduled = _scheduled_staff(scenario, pool, start, end)
    idle = sol.markings[pool]
    owed = _average(sol, np.maximum(0.0, -idle), start, end) * (end - start)
    duty = scheduled + owed
    if metric == "staff":
        return duty / (end - start)
    # busy = staff − idle on the grid: both jump by the same amount where the staff changes, so
    # the busy curve has no jump there and the trapezoid rule follows it exactly
    p = scenario.pools[pool]
    if p.schedule is None:
        staff = np.full(sol.times.shape, float(p.staff))
    else:
        levels = np.asarray(p.schedule.staff, dtype=float)
        staff = levels[np.clip((sol.times // p.schedule.step).astype(np.int64), 0,
                               len(levels) - 1)]
    busy = _average(sol, staff - idle, start, end) * (end - start)
    return busy / duty if duty > 0 else math.nan


def _average(sol: CounterSolution, curve: np.ndarray, start: float, end: float) -> float:
    """Time average of a grid curve over ``[start, end]`` (trapezoid rule, linear between grid
    points)."""
    if end <= start:
        return math.nan
    t = sol.times
    inside = (t > start) & (t < end)
    ts = np.concatenate([[start], t[inside], [end]])
    ys = np.concatenate([[_at(sol, curve, start)], curve[inside], [_at(sol, curve, end)]])
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
    if metric == "abandoned":  # jobs that abandoned and left (not those sent to abandon_to)
        return float(sum(_at(sol, a, end) - _at(sol, a, start) for p, a in sol.abandoned.items()
                         if scenario.places[p].abandon_to is None))
    if metric == "queue" and name in sol.waiting:
        return queue_average(sol, name, start, end)
    if metric == "wait" and name in sol.waiting:
        return interval_mean_wait(scenario, sol, name, start, end)
    if metric in ("staff", "busy") and name in scenario.pools and name in sol.markings:
        return _pool_value(scenario, sol, metric, name, start, end)
    if metric == "service_level" and name in scenario.targets.service:
        target = scenario.targets.service[name]
        within = target.within
        if name in sol.head_wait:
            return cohort_service_level(scenario, sol, name, within, start, end, target)
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
