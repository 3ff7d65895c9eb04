"""What the arrivals offer the net when no pool limits: inflow-driven rates, work and loads.

The *inflow-driven* (offered) rates are what every transition would carry if every pool had
unlimited staff: the jobs entering a place split over its outputs by :func:`fluid.structure.
unlimited_share`, and the flow balance ``x = λ + Pᵀx`` over the job places gives each place's
inflow. A pool's *work* at given inflows is the number of its agents busy: Σ over the job places
on the pool's conservation invariant (:func:`fluid.invariants.pool_invariants`) of weight × mean
hold × inflow. Its *offered load* is the offered work over its staff; its *load* (what the fluid
analysis reports) is the work at the fluid's own rates over its staff (:func:`fluid_loads`):
what the fluid actually routes through the pool, so an overflow pool that the unlimited split
never reaches still shows the work that overflow sends it.

These are derived facts of the net, read by the fluid analysis, phase diagrams, fluid staffing,
the gap tables and the staffing search; they live here and in :mod:`fluid.structure` only.
Rates are per the scenario's time unit, work in agents.
"""

from __future__ import annotations

import math
from typing import Mapping

import numpy as np

from .invariants import pool_invariants
from .scenario import Scenario
from .structure import inflow, places_that_can_end, unlimited_share

__all__ = ["fluid_loads", "offered_rates", "offered_work", "pool_loads", "pool_work"]


def offered_rates(scenario: Scenario, horizon: float | None = None,
                  arrival_rates: Mapping[str, float] | None = None) -> tuple[dict, dict]:
    """Inflow-driven rates: ``(transition rates, job-place inflows)`` per time unit, as if every
    pool were unlimited. Sources with a profile or trace count at their mean rate over
    ``horizon`` (default: the scenario's run horizon), or at ``arrival_rates[source]`` when
    given (e.g. one interval's rates). A place whose jobs can never end (every
    path from it leads back into a circuit of places) has an unbounded inflow, reported as
    ``inf``, as soon as any job reaches it."""
    h = scenario.run.horizon if horizon is None else horizon
    places = list(scenario.places)
    moves = [(scenario.job_input(q), scenario.job_output(q), q) for q in scenario.transitions]
    moves = [(a, b, q, unlimited_share(scenario, a, q)) for a, b, q in moves]
    can_end = places_that_can_end(scenario, unlimited_share)
    open_places = [p for p in places if p in can_end]
    idx = {p: i for i, p in enumerate(open_places)}
    n = len(open_places)
    lam = {p: 0.0 for p in places}
    for name, src in scenario.sources.items():
        lam[src.into] += (src.arrivals.mean_rate(h) if arrival_rates is None
                          else float(arrival_rates[name]))
    # x = λ + Pᵀx over the places whose jobs can end (P is then substochastic and I − Pᵀ regular)
    pt: dict[tuple[int, int], float] = {}
    for a, b, q, w in moves:
        if a in idx and b in idx:
            key = (idx[b], idx[a])
            pt[key] = pt.get(key, 0.0) + w
    x = _solve_flow_balance(n, pt, np.array([lam[p] for p in open_places])) if n else []
    inflow = {p: float(x[idx[p]]) for p in open_places}
    # the rest: reached (inflow > 0) means jobs pile up and circulate without bound
    reached = {p for p in places if p not in idx and lam[p] > 0}
    reached |= {b for a, b, q, w in moves if a in idx and b is not None and b not in idx
                and w > 0 and inflow[a] > 0}
    grew = True
    while grew:
        grew = False
        for a, b, q, w in moves:
            if a in reached and b is not None and b not in reached and w > 0:
                reached.add(b)
                grew = True
    for p in places:
        if p not in idx:
            inflow[p] = math.inf if p in reached else 0.0
    rates = {}
    for a, b, q, w in moves:
        rates[q] = 0.0 if w == 0 or inflow[a] == 0 else w * inflow[a]
    return rates, {p: inflow[p] for p in places}


def _solve_flow_balance(n: int, pt: dict[tuple[int, int], float], lam: np.ndarray) -> np.ndarray:
    """Solve ``(I − Pᵀ) x = λ`` with ``Pᵀ`` given by its non-zero entries ``{(row, col): w}``:
    a sparse LU (SuperLU), as each place feeds only a few others, instead of a dense n × n
    matrix."""
    from scipy.sparse import csc_array
    from scipy.sparse.linalg import spsolve

    rows, cols, vals = list(range(n)), list(range(n)), [1.0] * n
    for (i, j), w in pt.items():
        if i == j:
            vals[i] = 1.0 - w
        else:
            rows.append(i)
            cols.append(j)
            vals.append(-w)
    m = csc_array((vals, (rows, cols)), shape=(n, n))
    return np.atleast_1d(spsolve(m, lam, use_umfpack=False))


def pool_work(scenario: Scenario, inflow: Mapping[str, float]) -> dict[str, float]:
    """Pool -> agents busy when the job places receive ``inflow`` (place -> jobs per time unit):
    Σ over the job places on the pool's conservation invariant of weight × mean hold × inflow
    (places with no hold or no inflow add nothing, so an unbounded inflow into a place that
    holds no agent does not count). nan for a pool on no invariant."""
    invariants = pool_invariants(scenario)
    work = {}
    for r in scenario.pools:
        inv = invariants[r]
        if not inv:
            work[r] = math.nan
            continue
        work[r] = float(sum(w * scenario.places[p].hold_mean * inflow[p]
                            for p, w in inv.items()
                            if p in scenario.places and scenario.places[p].hold_mean > 0
                            and inflow[p] > 0))
    return work


def offered_work(scenario: Scenario, horizon: float | None = None) -> dict[str, float]:
    """Pool -> agents busy at the inflow-driven rates (offered load R, in agents; see
    :func:`pool_work`). nan for a pool on no invariant. Profiles count at their mean rate over
    ``horizon`` (default the run horizon)."""
    return pool_work(scenario, offered_rates(scenario, horizon)[1])


def _over_staff(work: Mapping[str, float], staff: Mapping[str, float]) -> dict[str, float]:
    load = {}
    for r, w in work.items():
        if math.isnan(w):
            load[r] = math.nan
        elif staff[r] > 0:
            load[r] = w / staff[r]
        else:
            load[r] = math.inf if w > 0 else 0.0
    return load


def pool_loads(scenario: Scenario, horizon: float | None = None) -> tuple[dict, dict]:
    """``(offered load, staff)`` per pool: offered work (:func:`offered_work`, every pool
    unlimited) over staff (mean staff over ``horizon`` with a schedule; default the run
    horizon). ``inf`` when a pool with no staff is offered work, nan for a pool on no
    invariant."""
    h = scenario.run.horizon if horizon is None else horizon
    staff = {r: pool.mean_staff(h) for r, pool in scenario.pools.items()}
    return _over_staff(offered_work(scenario, h), staff), staff


def fluid_loads(scenario: Scenario, rates: Mapping[str, float],
                source_rates: Mapping[str, float], staff: Mapping[str, float]) -> dict[str, float]:
    """Pool -> load at the fluid's own rates: agents busy (:func:`pool_work` at the places'
    inflows when the transitions fire at ``rates`` and the sources arrive at ``source_rates``,
    per time unit) over ``staff``. At most 1 where the fluid keeps to its staff; ``inf`` when a
    pool with no staff holds work, nan for a pool on no invariant."""
    work = pool_work(scenario, {p: inflow(scenario, p, rates, source_rates)
                                for p in scenario.places})
    return _over_staff(work, staff)
