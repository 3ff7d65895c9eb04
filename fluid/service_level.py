"""The fluid model's service level at a place, read from the counter equations.

"Service level" is the share of the jobs becoming available in a place that are taken within the
target's ``within``. The fluid model gives it in two distinct senses, each named for what it is;
neither knows patience (the counters ignore it):

* :func:`fifo_service_level`: over a window, the *share* of the fluid that becomes available
  and is taken within ``within``, jobs leaving first-in first-out along the counter curves. A
  number in [0, 1] for any window with arrivals (the per-interval comparison, and the gap tables
  of time-varying scenarios).
* :func:`service_level_verdicts`: a *verdict* per target place over the statistics window,
  1 (the fluid queue stays empty), 0 (it grows without bound, or holds so much that every job
  waits longer than ``within``) or nan (undecided: a queue that builds and drains). The
  simulated overlay of a phase diagram uses it to call the fluid optimistic only where it
  plainly is.

The steady-state service level with abandonment (Whitt's fluid model, where patience counts) is
a third figure and is built in ``compare`` (its ``FluidPlace.served_within``).

All times are in the scenario's time unit.
"""

from __future__ import annotations

import math

import numpy as np

from .counters import CounterSolution, integrate_counters
from .scenario import Scenario
from .structure import inflow, outflow

__all__ = ["fifo_service_level", "fifo_waits", "place_curves", "service_level_verdicts"]

# Relative slack when comparing a fluid level or a wait with a threshold (float noise only)
_SLACK = 1e-9


def place_curves(scenario: Scenario, sol: CounterSolution, place: str) -> tuple[np.ndarray,
                                                                                np.ndarray]:
    """``(A, D)`` for a job place on the counters' grid: A(t) the fluid that has become available
    there by t (after its hold), D(t) the fluid taken out of it by t (jobs)."""
    out = np.zeros_like(sol.times) + outflow(scenario, place, sol.counters)
    return sol.waiting[place] + out, out


def _first_reach(times: np.ndarray, curve: np.ndarray, levels: np.ndarray) -> np.ndarray:
    """First time a nondecreasing piecewise-linear ``curve`` reaches each level (inf if never)."""
    scale = max(1.0, float(np.abs(curve).max(initial=0.0)))
    target = levels - _SLACK * scale
    j = np.searchsorted(curve, target, side="left")
    out = np.full(levels.shape, math.inf)
    ok = j < len(curve)
    first = ok & (j == 0)
    out[first] = times[0]
    mid = ok & (j > 0)
    jm = j[mid]
    lo, hi = curve[jm - 1], curve[jm]
    frac = np.where(hi > lo, (target[mid] - lo) / np.where(hi > lo, hi - lo, 1.0), 1.0)
    out[mid] = times[jm - 1] + np.clip(frac, 0.0, 1.0) * (times[jm] - times[jm - 1])
    return out


def fifo_waits(scenario: Scenario, sol: CounterSolution, place: str, start: float,
               end: float) -> tuple[np.ndarray, np.ndarray] | None:
    """``(amount, wait)`` of each grid step's fluid becoming available in ``place`` during
    ``(start, end)``, jobs leaving first-in first-out along the counter curves (wait inf for
    fluid not taken by the end of the grid; see :func:`fifo_service_level`), or None when
    nothing becomes available."""
    avail, taken = place_curves(scenario, sol, place)
    t = sol.times
    mids = (t[:-1] + t[1:]) / 2
    sel = (mids > start) & (mids < end)
    amount = np.diff(avail)[sel]
    if amount.sum() <= 0:
        return None
    levels = ((avail[:-1] + avail[1:]) / 2)[sel]
    return amount, _first_reach(t, taken, levels) - mids[sel]


def fifo_service_level(scenario: Scenario, sol: CounterSolution, place: str, within: float,
                       start: float, end: float) -> float:
    """Share of the fluid becoming available in ``place`` during ``(start, end]`` that is taken
    within ``within`` time units, jobs leaving first-in first-out: a particle that becomes
    available when A reaches level v is taken when D first reaches v (see :func:`place_curves`;
    each grid step's increment of A is represented by its mid-point, exact when A and D are
    linear between grid points). Patience is ignored, so no fluid abandons here and every
    abandoner convention of a target (:class:`fluid.scenario.ServiceTarget`) gives this same
    share. nan when nothing becomes available."""
    fifo = fifo_waits(scenario, sol, place, start, end)
    if fifo is None:
        return math.nan
    amount, waits = fifo
    ok = waits <= within * (1 + _SLACK) + _SLACK
    return float(amount[ok].sum() / amount.sum())


def service_level_verdicts(scenario: Scenario) -> dict[str, float]:
    """The fluid model's verdict on the service level at every place with a target, from the
    counters over the statistics window (the last half of the horizon for constant nets),
    patience ignored: 1 when its fluid queue stays empty (every job taken at once); 0 when the
    queue grows without bound (constant rates) or holds so much that every job waits longer than
    the target's ``within`` (Little's law on the fluid queue); nan otherwise (a queue that
    builds and drains within a day)."""
    timed = scenario.has_time_variation
    sol = integrate_counters(scenario, **({"horizon": scenario.run.horizon} if timed else {}))
    out = {}
    for place, target in scenario.targets.service.items():
        w = sol.waiting[place]
        tail = w[int(round(scenario.run.warmup / sol.dt)):] if timed else w[len(w) // 2:]
        tol = 1e-6 * (1.0 + inflow(scenario, place, sol.rates, sol.source_rates) * sol.dt)
        taken = outflow(scenario, place, sol.rates)
        if tail.size == 0 or float(np.max(tail)) <= tol:
            out[place] = 1.0
        elif not timed and (tail[-1] - tail[len(tail) // 2] > tol
                            or (taken > 0 and float(tail[-1]) / taken > target.within)):
            out[place] = 0.0
        else:
            out[place] = math.nan
    return out
