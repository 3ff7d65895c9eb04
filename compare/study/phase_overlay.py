"""Simulated overlay of a phase diagram: the simulation at integer staff points.

Every point is simulated with the same seed (common random numbers) and set against the fluid
rate of the diagram; the table feeds :func:`compare.phase_plot.phase_figure`. Rates per the
scenario's time unit.
"""

from __future__ import annotations

import concurrent.futures as cf
import itertools
import math
from typing import Callable

import pandas as pd

from desim import Estimate, SimulationSettings, resolve_settings
from desim.estimate import NON_NEGATIVE
from fluid.phases import PhaseDiagram
from fluid.scenario import Scenario
from fluid.service_level import service_level_verdicts
from fluid.staffing import with_staff

from .gap import gap_between
from .sweep import Sweep
from .staffing_search import ABANDONMENT, meets_targets, target_estimates

__all__ = ["phase_overlay"]


def _integer_points(diagram: PhaseDiagram, max_points: int) -> list[tuple[int, ...]]:
    values = [list(range(math.ceil(lo), math.floor(hi) + 1))
              for lo, hi in (diagram.ranges[p] for p in diagram.axes)]
    if not all(values):
        raise ValueError("the diagram's ranges hold no whole staff level")
    while math.prod(len(v) for v in values) > max_points:
        # thin the longest axis, keeping both ends
        i = max(range(len(values)), key=lambda k: len(values[k]))
        v = values[i]
        if len(v) <= 2:
            break
        values[i] = v[::2] + ([v[-1]] if v[::2][-1] != v[-1] else [])
    return list(itertools.product(*values))


def phase_overlay(scenario: Scenario, diagram: PhaseDiagram,
                  settings: SimulationSettings | None = None, *, reps: int | None = None,
                  horizon: float | None = None, warmup: float | None = None,
                  seed: int | None = None, workers: int | None = None,
                  executor: cf.Executor | None = None,
                  progress: Callable[[], object] | None = None,
                  max_points: int = 49, out=None, resume: bool = False) -> pd.DataFrame:
    """Simulate the integer staff points of ``diagram`` (thinned to at most ``max_points``,
    keeping the ends of each axis) with the same settings and seed at every point (common
    random numbers, :class:`~compare.study.sweep.Sweep`), the other pools at the scenario's
    staff. ``settings`` and the simulation keywords as in :func:`compare.compare`.

    Returns one row per point: a (staff of the first axis), b (of the second; only with two
    axes), fluid_rate and the simulated rate of
    the diagram's transitions (sim_mean, sim_low, sim_high, n; per the scenario's time unit),
    gap = (simulated mean − fluid) / |fluid| and gap_kind (the one convention of
    :mod:`compare.study.gap`: nan and "absolute" where the fluid rate is near zero), rate_optimistic and optimistic (the fluid
    rate above the simulated interval); for every place with a service-level target:
    ``<place>_sl_fluid`` (the fluid verdict of
    :func:`fluid.service_level.service_level_verdicts`: 1, 0 or nan), ``<place>_sl_mean``,
    ``_sl_low``, ``_sl_high`` and ``_sl_goal``; sl_optimistic (some fluid verdict above its
    simulated interval); targets_met (every target holds with confidence, as in
    :func:`compare.study.staffing_search.meets_targets`; nan without targets);
    abandonment_mean/_low/_high (all sources: :meth:`desim.SimulationResult.overall_abandonment`);
    unstable (replications stopped at the job limit).
    With a run folder ``out``, each point keeps its replications in ``out/<a><A>-<b><B>``
    (``out/<a><A>`` with one axis)."""
    cfg = resolve_settings(scenario.run, settings, reps=reps, horizon=horizon, warmup=warmup,
                           seed=seed, workers=workers, executor=executor, out=out,
                           resume=resume or None)
    points = _integer_points(diagram, max_points)
    targets = scenario.targets.service
    rows = []
    with Sweep(cfg, progress) as sweep:
        for pt in points:
            staff = dict(zip(diagram.axes, pt))
            variant = with_staff(scenario, staff)
            sim = sweep.run(variant, "-".join(f"{p}{n}" for p, n in staff.items()))
            rate = Estimate.from_values(sum(sim.raw("transition", q, "rate") for q in diagram.of),
                                        bounds=NON_NEGATIVE)
            fluid = float(diagram.rate_at(*pt))
            gap = gap_between(fluid, rate.mean)
            row = dict(zip("ab", pt)) | dict(
                fluid_rate=fluid, sim_mean=rate.mean, sim_low=rate.low, sim_high=rate.high,
                n=rate.n, gap=gap.relative, gap_kind=gap.kind,
                rate_optimistic=bool(math.isfinite(rate.high) and fluid > rate.high))
            estimates = target_estimates(scenario, sim)
            fluid_sl = service_level_verdicts(variant)
            sl_opt = False
            for place, target in targets.items():
                est, fl = estimates[place], fluid_sl[place]
                row |= {f"{place}_sl_fluid": fl, f"{place}_sl_mean": est.mean,
                        f"{place}_sl_low": est.low, f"{place}_sl_high": est.high,
                        f"{place}_sl_goal": target.goal,
                        # (what the service level measures, for every table and figure of it)
                        f"{place}_sl_convention": target.describe(scenario.time_unit)}
                sl_opt |= bool(math.isfinite(fl) and math.isfinite(est.high) and fl > est.high)
            ab = estimates.get(ABANDONMENT) or sim.overall_abandonment()
            met = meets_targets(scenario, estimates) and not sim.unstable_replications
            row |= dict(targets_met=met if estimates else math.nan, sl_optimistic=sl_opt,
                        optimistic=row["rate_optimistic"],
                        abandonment_mean=ab.mean, abandonment_low=ab.low,
                        abandonment_high=ab.high, unstable=sim.unstable_replications)
            rows.append(row)
    return pd.DataFrame(rows)
