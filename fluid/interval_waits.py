"""The fluid mean wait at a waiting place of the jobs that become available there in an
interval and leave it (taken or abandoning) by the end of the solution: the fluid counterpart
of the simulated per-interval ``wait`` (each job counted in the interval it became available).

* An impatient place, on the dynamics with abandonment (age-structured cohorts, first come
  first served, :func:`fluid.places.place_cohorts`): a cohort taken after waiting w leaves with
  the wait min(P, w) of its patience P, whose mean is the integral of the survival S = 1 - F
  from 0 to w; a cohort the head of the queue never reaches has, by the end, lost the share
  F(a) of it that abandoned within the a it has waited, with mean wait E[P | P < a] =
  (integral_0^a S - a S(a)) / F(a).
* A place without patience, on the counters: first in, first out along the counter curves (a
  particle that becomes available when A reaches level v is taken when D reaches v, as in
  :func:`fluid.service_level.fifo_service_level`); fluid never taken by the end is left out,
  as the simulation leaves out jobs still waiting.

nan when nothing becomes available, or nothing of it leaves. Times in the scenario's unit.
"""

from __future__ import annotations

import math

import numpy as np

from .places import place_cohorts
from .scenario import Scenario
from .service_level import fifo_waits

__all__ = ["interval_mean_wait"]

#: Points per grid step of the solution on which the survival is integrated (the cohorts'
#: waits are multiples of half a step, so the trapezoid rule on this grid meets them exactly).
_POINTS_PER_STEP = 8


def interval_mean_wait(scenario: Scenario, sol, place: str, start: float, end: float) -> float:
    """The fluid mean wait of the module docstring, over ``(start, end]`` (time units)."""
    if place in sol.head_wait:
        return _cohort_mean_wait(scenario, sol, place, start, end)
    return _fifo_mean_wait(scenario, sol, place, start, end)


def _survival_integral(patience, dt: float, longest: float):
    """(grid, S on it, the integral of S from 0 to each grid point)."""
    steps = max(1, int(math.ceil(longest / dt * _POINTS_PER_STEP)))
    u = np.linspace(0.0, steps * dt / _POINTS_PER_STEP, steps + 1)
    surv = np.array([1.0 - patience.cdf(float(x)) if x > 0 else 1.0 for x in u])
    area = np.concatenate([[0.0], np.cumsum((surv[1:] + surv[:-1]) / 2 * np.diff(u))])
    return u, surv, area


def _cohort_mean_wait(scenario: Scenario, sol, place: str, start: float, end: float) -> float:
    cohorts = place_cohorts(scenario, sol, place, start, end)
    if cohorts is None:
        return math.nan
    mass, j, served_at, waits = cohorts
    n, dt = len(sol.times), sol.dt
    never = served_at >= n
    waited = np.where(never, (n - 1 - j + 0.5) * dt, waits)  # (by the end of the grid)
    u, surv, area = _survival_integral(scenario.places[place].patience, dt, float(waited.max()))
    integral = np.interp(waited, u, area)
    s_end = np.interp(waited, u, surv)
    # taken cohorts leave whole; a cohort never reached leaves only by abandoning, F(a) of it
    leaving = np.where(never, mass * (1.0 - s_end), mass)
    total = np.where(never, mass * (integral - waited * s_end), mass * integral)
    return float(total.sum() / leaving.sum()) if leaving.sum() > 0 else math.nan


def _fifo_mean_wait(scenario: Scenario, sol, place: str, start: float, end: float) -> float:
    fifo = fifo_waits(scenario, sol, place, start, end)
    if fifo is None:
        return math.nan
    amount, waits = fifo
    left = np.isfinite(waits)  # (fluid still waiting at the end has not left)
    if amount[left].sum() <= 0:
        return math.nan
    w = np.maximum(waits[left], 0.0)
    return float((amount[left] * w).sum() / amount[left].sum())
