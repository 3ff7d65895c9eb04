"""Phase diagrams where the throughput LP does not apply (priorities, profiles, schedules).

The rate of the transitions ``of`` comes from the counter equations (:mod:`fluid.counters`)
integrated at integer staff points of one or two pools; a pool is limiting at a point when one
more agent in it raises the rate (:func:`fluid.structure.output_rises`; two pools at once where
no single agent helps). Rates per the scenario's time unit. Called by
:func:`fluid.phases.phase_diagram`.
"""

from __future__ import annotations

import itertools
import math

from .counters import integrate_counters
from .offered import offered_rates
from .phase_results import GridPoint, PhaseDiagram
from .scenario import Scenario
from .structure import (COUNTER_RISE, counter_output_level, lp_obstacles, output_rises,
                        statistics_window)

__all__ = ["grid_diagram"]


def _integer_axis(lo: float, hi: float, count: int) -> list[int]:
    start, stop = math.ceil(lo), math.floor(hi)
    if stop < start:
        raise ValueError(f"the range {lo:g}:{hi:g} holds no whole staff level")
    step = max(1, math.ceil((stop - start) / max(count - 1, 1)))
    vals = list(range(start, stop + 1, step))
    if vals[-1] != stop:
        vals.append(stop)
    return vals


def grid_diagram(scenario: Scenario, axes: tuple[str, ...], of: tuple[str, ...],
                 box: dict[str, tuple[float, float]], max_grid: int, common: dict) -> PhaseDiagram:
    """The phase diagram from the counter equations at integer staff points (at most about
    ``max_grid`` of them over the ``box``), each labelled by its limiting pools found by
    one-agent differences; no exact pieces. ``common``: the fields of :class:`PhaseDiagram`
    shared with the LP method."""
    side = max(2, max_grid if len(axes) == 1 else int(math.isqrt(max_grid)))
    points = list(itertools.product(*(_integer_axis(*box[p], side) for p in axes)))
    constant = not scenario.has_time_variation
    horizon = None if constant else scenario.run.horizon
    dt = integrate_counters(scenario, horizon=horizon).dt
    window = None if constant else statistics_window(scenario, scenario.run.horizon)
    runs = 0

    def solve(point, extra=None, grid=None):
        nonlocal runs
        runs += 1
        step, until = (dt, horizon) if grid is None else grid
        return integrate_counters(scenario, dt=step, horizon=until,
                                  staff=dict(zip(axes, point)), extra_staff=extra)

    def measures(sol):
        """(rate of ``of`` per time unit, level used to detect a rise)."""
        if window is None:
            r = sum(sol.rates[q] for q in of)
            return r, r
        r = sum(sol.rates_between(*window)[q] for q in of)
        return r, counter_output_level(sol, of, window)

    rates, _ = offered_rates(scenario)
    inflow = float(sum(rates[q] for q in of))

    # every grid point first, so that a neighbour one agent up can stand in for "one more agent"
    # in an axis pool (same time grid: the difference is then exact, as the counters' own)
    base = {}
    for pt in points:
        sol = solve(pt)
        base[pt] = ((sol.dt, sol.horizon), *measures(sol))

    def rises(pt, pools) -> bool:
        grid, _, level = base[pt]
        up = None
        if len(pools) == 1 and pools[0] in axes:
            i = axes.index(pools[0])
            up = pt[:i] + (pt[i] + 1,) + pt[i + 1:]
        # constant rates: long-run rates compare across horizons (each run is long enough to
        # settle); time-varying: window levels on the same grid only
        if up in base and (window is None or base[up][0] == grid):
            more = base[up][2]
        else:
            more = measures(solve(pt, extra={p: 1 for p in pools},
                                  grid=(dt, None) if window is None else grid))[1]
        return output_rises(level, more, "counters")

    grid_points = []
    for pt in points:
        rate = base[pt][1]
        limiting = [p for p in scenario.pools if rises(pt, (p,))]
        if not limiting and rate < inflow * (1 - COUNTER_RISE):
            # no single agent helps, yet the pools hold the rate below the inflow (e.g. front
            # agents stuck waiting for a supervisor who is not there): pools that limit
            # together, found by adding one agent to two pools at once
            for pair in itertools.combinations(scenario.pools, 2):
                if rises(pt, pair):
                    limiting += [p for p in pair if p not in limiting]
            limiting = [p for p in scenario.pools if p in limiting]
        grid_points.append(GridPoint(a=pt[0], b=pt[1] if len(pt) > 1 else None,
                                     rate=float(rate), limiting=tuple(limiting)))
    reasons = lp_obstacles(scenario)
    notes = [f"the throughput LP does not apply ({', '.join(reasons)}): rates come from the "
             f"counter equations integrated at {len(grid_points)} integer staff points (time "
             f"step {dt:g} {scenario.time_unit}); no exact pieces; limiting pools by one-agent "
             "differences (two pools at once where no single agent helps)"]
    if window is not None:
        notes.append(f"rates are means over the window [{window[0]:g}, {window[1]:g}] "
                     f"{scenario.time_unit}")
    for p in axes:
        if scenario.pools[p].schedule is not None:
            notes.append(f"the schedule of {p} is replaced by the constant staff of each point")
    return PhaseDiagram(method="counters-grid", pieces=(), grid=tuple(grid_points),
                        inflow_rate=inflow, lp_solves=runs,
                        max_mismatch=math.nan, exact=False, notes=tuple(notes), **common)
