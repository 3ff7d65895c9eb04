"""Fluid answers for a scenario: throughput, bottlenecks and loads (design.md §4.1).

:func:`throughput` picks the method: the throughput LP (:mod:`fluid.lp`) when it applies
(:func:`fluid.structure.lp_applies`: no priorities, every source Poisson, no schedule, every job
can end); otherwise the counter equations
integrated on a grid (:mod:`fluid.counters`). With the LP the counters can also be run, on a
coarser budget, as a cross-check when asked (``cross_check=True``: the largest relative difference
of a transition rate).

The fluid model of §4.1 ignores patience: nobody abandons, and above capacity queues grow. Whitt's
fluid model of abandonment (Whitt 2006) is applied later by ``compare``.

Rates are per the scenario's time unit.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from .counters import (COUNTERS, MAX_POINTS, WITH_ABANDONMENT, CounterSolution,
                       integrate_counters, one_more_agent_levels)
from .json_values import json_number
from .lp import lp_bottlenecks
from .offered import fluid_loads, offered_rates, pool_loads
from .places import place_figures
from .scenario import Scenario
from .structure import (COUNTER_RISE, bottlenecks, counter_output_level, lp_applies,
                        output_transitions, statistics_window)

__all__ = ["FluidResult", "throughput"]

CROSS_CHECK_POINTS = 20_000


@dataclass(frozen=True)
class FluidResult:
    """Fluid throughput of a scenario.

    ``method``: "lp" or "counters"; ``rates``: transition -> firings per time unit (long-run for
    nets with constant inputs; for nets with profiles, traces or schedules the mean over the
    statistics window ``window`` = [warmup, horizon], as the simulation measures it);
    ``source_rates``: source -> arrivals per time unit on the same basis; ``output_rate``: total
    rate of the transitions that end jobs; ``bottlenecks``: pools whose one more agent raises the
    output (phase "inflow" when there are none); ``load``: pool -> agents busy at the fluid's own
    rates (``rates``, ``source_rates``: what the fluid actually routes through the pool, overflow
    included) divided by its staff (mean staff over the horizon for schedules), at most 1 up to
    round-off (a pool with no staff: its offered load); ``offered_load``: pool -> work offered at the inflow-driven rates
    (``offered_rates``: every pool unlimited, so with priorities the first choice takes every
    job; mean arrival rates for profiles) over the same staff, may exceed 1; both ``inf`` when a
    pool with no staff holds or is offered work, ``nan`` for a pool on no conservation
    invariant; ``cross_check``: with the LP,
    when asked for, the largest relative difference between LP and counter rates (None otherwise);
    ``rounding``: worst relative rounding of a holding time on the counters' grid (None when no
    counters ran); ``notes``: caveats (e.g. patience ignored).

    The fluid model ignores patience (Whitt's fluid model of abandonment is applied in compare).
    """

    scenario_name: str
    time_unit: str
    method: str
    rates: dict[str, float]
    source_rates: dict[str, float]
    output_rate: float
    bottlenecks: tuple[str, ...]
    load: dict[str, float]
    offered_rates: dict[str, float]
    staff: dict[str, float]
    window: tuple[float, float] | None = None
    cross_check: float | None = None
    rounding: float | None = None
    dt: float | None = None
    horizon: float | None = None
    notes: tuple[str, ...] = ()
    counters: CounterSolution | None = field(default=None, repr=False, compare=False)
    model: str = COUNTERS.name
    places: dict = field(default_factory=dict)
    offered_load: dict = field(default_factory=dict)

    @property
    def phase(self) -> str:
        """The set of limiting pools joined by "+", or "inflow" when none limits."""
        return "+".join(self.bottlenecks) if self.bottlenecks else "inflow"

    def to_frame(self):
        """Tidy table with columns kind, name, metric, value."""
        import pandas as pd

        rows: list[tuple[str, str, str, float]] = []
        for q, v in self.rates.items():
            rows.append(("transition", q, "rate", v))
            rows.append(("transition", q, "offered_rate", self.offered_rates.get(q, math.nan)))
        for s, v in self.source_rates.items():
            rows.append(("source", s, "rate", v))
        for p, v in self.load.items():
            rows.append(("pool", p, "load", v))
            rows.append(("pool", p, "offered_load", self.offered_load.get(p, math.nan)))
            rows.append(("pool", p, "staff", self.staff[p]))
            rows.append(("pool", p, "bottleneck", float(p in self.bottlenecks)))
        rows.append(("scenario", self.scenario_name, "output_rate", self.output_rate))
        for metric in ("cross_check", "rounding", "dt", "horizon"):
            value = getattr(self, metric)
            if value is not None:
                rows.append(("scenario", self.scenario_name, metric, float(value)))
        return pd.DataFrame(rows, columns=["kind", "name", "metric", "value"])

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dictionary with the keys of design.md §5 (``throughput``, ``bottlenecks``,
        ``load``, ``method``) and more. Infinite or undefined numbers (a pool with no staff, a
        pool on no invariant) become ``None`` (JSON null)."""
        return {
            "scenario": self.scenario_name,
            "time_unit": self.time_unit,
            "method": self.method,
            "throughput": _clean(self.rates),
            "source_rates": _clean(self.source_rates),
            "output_rate": _num(self.output_rate),
            "bottlenecks": list(self.bottlenecks),
            "phase": self.phase,
            "load": _clean(self.load),
            "offered_load": _clean(self.offered_load),
            "offered_rates": _clean(self.offered_rates),
            "staff": _clean(self.staff),
            "window": None if self.window is None else [_num(x) for x in self.window],
            "cross_check": _num(self.cross_check),
            "rounding": _num(self.rounding),
            "dt": _num(self.dt),
            "horizon": _num(self.horizon),
            "notes": list(self.notes),
            "model": self.model,
            "places": {p: fp.to_json() for p, fp in self.places.items()},
        }

    def to_json(self, **kwargs) -> str:
        """:meth:`to_dict` as JSON text (strict JSON: no NaN or Infinity tokens)."""
        return json.dumps(self.to_dict(), allow_nan=False, **kwargs)


_num = json_number


def _clean(d: dict[str, float]) -> dict[str, float | None]:
    return {k: json_number(v) for k, v in d.items()}


# --- throughput ----------------------------------------------------------------------------------


def _lp_answer(scenario: Scenario):
    # one LP; its marking duals settle most pools, a one-agent LP the rest (fluid.lp)
    found = lp_bottlenecks(scenario)
    return found.solution, found.output, found.limiting


def _window(scenario: Scenario, sol: CounterSolution) -> tuple[float, float]:
    return statistics_window(scenario, min(scenario.run.horizon, sol.horizon))


def throughput(
    scenario: Scenario,
    *,
    method: str = "auto",
    dt: float | None = None,
    horizon: float | None = None,
    cross_check: bool = False,
    abandonment: bool = True,
    window: tuple[float, float] | None = None,
) -> FluidResult:
    """Fluid throughput, bottlenecks and loads of ``scenario`` (rates per its time unit).

    ``method``: "auto" (the LP when the net has no priorities, only Poisson sources, no
    schedules and every job can end; else the counters), "lp" or "counters". ``dt`` and
    ``horizon`` set the counters' grid (defaults: :func:`fluid.counters.choose_step`,
    :func:`fluid.counters.default_horizon`). ``cross_check``: with the LP, also run the counters
    (at most 20 000 grid points unless a grid is given) and report the largest relative rate
    difference (off by default: the LP is re-checked on its own, and the counters cost more
    than the LP on large nets).
    ``abandonment``: waiting places with patience lose content as their patience
    says (the fluid model with abandonment, :data:`fluid.flat_net.WITH_ABANDONMENT`); False
    gives design.md §4.1 as written (patience ignored, queues grow above capacity).

    With patience, the LP's rates are those of the fluid with abandonment (patience only
    removes what would have queued), and each waiting place settles as in Whitt (2006); where
    abandoned jobs come back (``abandon_to``) "auto" integrates the dynamics instead. The
    figures of every waiting place are in ``places`` (:class:`fluid.places.FluidPlace`); the
    fluid model used is named in ``model``.

    ``window``: the statistics window ``(start, end)`` (time units) over which a time-varying
    net's figures are means, as a simulation measures them (default: the scenario's ``run``
    warm-up and horizon); its end is also the horizon of the mean arrival rates and staff.
    """
    redials = any(p.abandon_to is not None for p in scenario.places.values())
    if method == "auto":
        method = ("lp" if lp_applies(scenario) and not (abandonment and redials)
                  else "counters")
    if method not in ("lp", "counters"):
        raise ValueError(f"method must be 'auto', 'lp' or 'counters' (got {method!r})")
    notes = []
    if scenario.has_patience and not abandonment:
        notes.append("patience is ignored by the fluid model (no abandonment; queues grow "
                     "above capacity)")
    elif scenario.has_patience and method == "lp":
        notes.append("waiting places with patience: each settles as in Whitt (2006) at the "
                     "LP's rates (the fluid model with abandonment in steady state)")
    if window is not None and scenario.has_time_variation:  # constant nets have no window
        window = (float(window[0]), float(window[1]))
        if horizon is None:
            horizon = window[1]
    else:
        window = None
    load_horizon = horizon if horizon is not None else scenario.run.horizon
    offered_load, staff = pool_loads(scenario, load_horizon)
    common = dict(
        scenario_name=scenario.name, time_unit=scenario.time_unit, load={}, staff=staff,
        offered_rates=offered_rates(scenario, load_horizon)[0], offered_load=offered_load,
    )
    if method == "lp":
        result = _by_lp(scenario, dt, horizon, cross_check, notes, common)
    else:
        model = WITH_ABANDONMENT if abandonment and scenario.has_patience else COUNTERS
        result = _by_counters(scenario, dt, horizon, notes, common, model, window)
    # the load is read from the fluid's own rates: what overflow and priorities actually send
    load = fluid_loads(scenario, result.rates, result.source_rates, staff)
    # a pool with no staff carries nothing at the fluid rates: its load says whether work
    # waits for it (inf) or not (0), as the offered figure does
    load = {r: offered_load[r] if staff[r] <= 0 else v for r, v in load.items()}
    return replace(result, load=load)


def _by_lp(scenario, dt, horizon, cross_check, notes, common) -> FluidResult:
    sol, output, limiting = _lp_answer(scenario)
    check = counters = None
    if cross_check:
        # keep the check cheap unless the caller asked for a particular grid
        budget = CROSS_CHECK_POINTS if dt is None and horizon is None else MAX_POINTS
        counters = integrate_counters(scenario, dt=dt, horizon=horizon, max_points=budget)
        # relative to each rate, but not below a millionth of the largest rate in the net
        floor = 1e-6 * max([*sol.rates.values(), *sol.source_rates.values(), 1e-300])
        check = max(
            (abs(counters.rates[q] - r) / max(abs(r), floor) for q, r in sol.rates.items()),
            default=0.0,
        )
    return FluidResult(
        method="lp", rates=sol.rates, source_rates=sol.source_rates, output_rate=output,
        bottlenecks=limiting, cross_check=check,
        rounding=None if counters is None else counters.rounding,
        dt=None if counters is None else counters.dt,
        horizon=None if counters is None else counters.horizon,
        notes=tuple(notes), counters=counters,
        model="throughput LP" + (" with Whitt's (2006) stationary queues" if scenario.has_patience
                                 else ""),
        places=place_figures(scenario, sol.rates, sol.source_rates), **common,
    )


def _bottleneck_candidates(scenario, sol, ending, window, offered) -> list[str]:
    """The pools worth the one-more-agent test on a counter solution: none when a constant net
    already ends every job that arrives (the output cannot rise above the inflow); otherwise,
    for a constant net, the pools whose agents are all busy at some time over the last quarter
    of the horizon (a pool that never runs out of agents in the long run limits nothing); with
    a window (time-varying), every pool."""
    if window is not None:
        return list(scenario.pools)
    inflow = sum(offered[q] for q in ending)
    output = counter_output_level(sol, ending, None)
    if math.isfinite(inflow) and output >= inflow * (1.0 - COUNTER_RISE):
        return []
    quarter = max(1, len(sol.times) // 4)
    out = []
    for pool in scenario.pools:
        idle = sol.markings[pool][-quarter:]
        if float(np.min(idle)) <= 1e-9 * max(1.0, float(np.max(sol.levels[pool]))):
            out.append(pool)
    return out


def _by_counters(scenario, dt, horizon, notes, common, model=COUNTERS,
                 given_window=None) -> FluidResult:
    constant = not scenario.has_time_variation
    if horizon is None and not constant:
        horizon = scenario.run.horizon
    sol = integrate_counters(scenario, dt=dt, horizon=horizon, model=model)
    if constant:
        window = None
    elif given_window is not None:
        end = min(given_window[1], sol.horizon)
        window = (given_window[0] if given_window[0] < end else 0.0, end)
    else:
        window = _window(scenario, sol)
    if window is None:
        rates, srates = sol.rates, sol.source_rates
    else:
        both = sol.rates_between(*window)
        rates = {q: both[q] for q in scenario.transitions}
        srates = {s: both[s] for s in scenario.sources}
    if sol.unconverged_steps:
        notes.append(f"same-time sweeps hit their cap at {sol.unconverged_steps} grid steps")
    if window is None and sol.period is None:
        notes.append("the counters had not become periodic by the horizon: long-run rates are "
                     "estimated from the slope over its last half")
    ending = output_transitions(scenario)
    base = counter_output_level(sol, ending, window)
    candidates = _bottleneck_candidates(scenario, sol, ending, window, common["offered_rates"])
    levels = dict(zip(candidates, one_more_agent_levels(sol, [{p: 1} for p in candidates],
                                                        ending, window)))
    for pool, level in levels.items():
        if math.isnan(level):  # not settled on the base's horizon: run it until it does
            more = integrate_counters(scenario, dt=sol.dt, extra_staff={pool: 1}, model=model)
            levels[pool] = counter_output_level(more, ending, window)
    limiting = bottlenecks(candidates, base, levels.__getitem__, "counters")
    return FluidResult(
        method="counters", rates=rates, source_rates=srates,
        output_rate=sum(rates[q] for q in ending), bottlenecks=limiting,
        window=window, rounding=sol.rounding, dt=sol.dt, horizon=sol.horizon,
        notes=tuple(notes), counters=sol, model=model.name,
        places=place_figures(scenario, rates, srates, sol, window), **common,
    )
