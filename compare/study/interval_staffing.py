"""Staff required per pool and interval, by a simulation-based iterative staffing algorithm.

Method: the iterative staffing algorithm (ISA) of Feldman, Massey, Mandelbaum and Whitt (2008),
"Staffing of time-varying queues to achieve time-stable performance", Management Science 54(2),
in its *practical* variant (their ISA sets each interval's staff from the simulated distribution
of the offered load; this one judges each interval's targets directly, so it applies to any
target and any net):

1. Start: per pool and interval, ``ceil(R_i + β√R_i)`` with ``R_i`` the fluid offered work of
   the pool at that interval's mean arrival rates (:func:`fluid.offered.pool_work`; the fluid
   answer ``ceil(R_i)`` plus square-root safety, Halfin and Whitt 1981, β = 0.5 as in the flat
   search), never below the fluid answer.
2. Simulate the day with that staff per interval (a pool ``schedule`` on the interval grid),
   ``R`` replications, the same seed every iteration (common random numbers), and read per
   interval the targets by arrival interval (``desim`` per-interval table: ``service_level``
   of each target place, ``abandonment`` when the table has it), with their 95 % intervals over
   replications (never pooled over correlated callers).
3. Per pool and interval: when a target the pool serves does not *meet with confidence* in the
   interval (see below), add one agent there and remember that the old staff was too few (a
   floor); otherwise take one agent away if that stays at or above the floor.
   A target place is served by the pools that take jobs from it; the abandonment target by the
   pools that serve a place with patience. A pool no target judges keeps its start.
4. Repeat until the staff stops changing (converged: every interval meets its targets with
   confidence in the last simulation, and no interval can go lower) or ``max_iterations``
   simulations have run (reported as not converged).

"Meets with confidence" is the flat search's rule: the interval's low end ≥ goal (service
level), its high end ≤ max (abandonment). An interval misses unless it meets; one with fewer
than two replications measuring it (no arrivals) has no verdict and does not raise staff. A staff
level only falls to a level not yet seen to miss, and after a miss it never falls below the new
floor, so each pool-interval goes down, then only up: the loop ends.

Times in the scenario's time unit; staff in agents. Decision support under the model's
assumptions: where staffing affects people's safety, follow local regulations and professional
practice.
"""

from __future__ import annotations

import contextlib
import math
from dataclasses import dataclass, replace
from typing import Callable, Mapping, Sequence

from desim import Estimate, SimulationSettings, resolve_settings
from fluid.json_values import json_number
from fluid.loading import with_changes
from fluid.offered import offered_rates, pool_work
from fluid.scenario import FrozenMap, Scenario
from fluid.sources import PoissonArrivals

from ..formulas.staffing import square_root_staffing
from .sweep import Sweep

__all__ = ["IntervalStaffing", "interval_grid", "interval_work", "with_schedules",
           "interval_targets", "serving_pools", "start_staff", "iterate_staffing",
           "interval_staff", "simulated_evaluator", "DEFAULT_ITERATIONS", "ABANDONMENT"]

ABANDONMENT = "abandonment"
DEFAULT_BETA = 0.5
#: Simulations the iterative algorithm runs at most.
DEFAULT_ITERATIONS = 15

#: evaluator(schedules) -> {(target, interval index): Estimate}; schedules: pool -> staff per
#: interval. Targets: service-target places and "abandonment".
Evaluator = Callable[[Mapping[str, Sequence[int]]], Mapping[tuple[str, int], Estimate]]


# --- the interval grid and the fluid start ------------------------------------------------------


def interval_grid(scenario: Scenario, step: float | None = None,
                  horizon: float | None = None) -> tuple[float, int]:
    """``(step, count)``: the interval length (given, or the shortest profile or schedule step of
    the scenario) and the number of intervals covering ``[0, horizon]`` (default: the run's)."""
    if step is None:
        steps = [s for src in scenario.sources.values() for s in src.arrivals.steps]
        steps += [p.schedule.step for p in scenario.pools.values() if p.schedule is not None]
        if not steps:
            raise ValueError("the scenario has no profile or schedule step: give an interval")
        step = min(steps)
    step = float(step)
    if not (math.isfinite(step) and step > 0):
        raise ValueError(f"the interval must be a number > 0 (got {step!r})")
    horizon = scenario.run.horizon if horizon is None else horizon
    count = max(1, math.ceil(horizon / step - 1e-9))
    return step, count


def interval_work(scenario: Scenario, step: float, count: int) -> dict[str, tuple[float, ...]]:
    """Pool -> fluid offered work (agents busy if no pool limited) in each interval, at each
    source's mean rate over the interval (the fluid model is linear in the arrival rates, so
    each source's share is computed once at rate 1)."""
    unit = {}
    for name, src in scenario.sources.items():
        alone = replace(src, arrivals=PoissonArrivals(1.0))
        view = replace(scenario, sources=FrozenMap({name: alone}))
        unit[name] = offered_rates(view)[1]
    out = {p: [] for p in scenario.pools}
    for i in range(count):
        a, b = i * step, (i + 1) * step
        inflow = {p: 0.0 for p in scenario.places}
        for name, src in scenario.sources.items():
            rate = (src.arrivals.cumulative(b) - src.arrivals.cumulative(a)) / step
            for p, x in unit[name].items():
                if rate > 0 and x > 0:
                    inflow[p] += rate * x
        for p, w in pool_work(scenario, inflow).items():
            out[p].append(w)
    return {p: tuple(v) for p, v in out.items()}


def start_staff(scenario: Scenario, step: float, count: int,
                beta: float = DEFAULT_BETA) -> dict[str, tuple[int, ...]]:
    """The starting staff per pool and interval: ``max(ceil(R), ceil(R + β√R))``, R the
    interval's fluid offered work (0 where it is 0 or unknown)."""
    out = {}
    for p, work in interval_work(scenario, step, count).items():
        row = []
        for r in work:
            if not (math.isfinite(r) and r > 0):
                row.append(0)
                continue
            row.append(max(math.ceil(r - 1e-9 * r), square_root_staffing(r, 1.0, beta)))
        out[p] = tuple(row)
    return out


def with_schedules(scenario: Scenario, schedules: Mapping[str, Sequence[int]],
                   step: float) -> Scenario:
    """A validated copy of ``scenario`` whose pools have the given staff per interval of length
    ``step`` (a ``schedule``; priorities kept)."""
    doc = scenario.to_document().get("pools", {})
    changes = {}
    for pool, staff in schedules.items():
        if pool not in scenario.pools:
            raise ValueError(f"unknown pool {pool!r} (pools: {', '.join(scenario.pools)})")
        entry = doc.get(pool)
        new = ({k: v for k, v in entry.items() if k not in ("staff", "schedule")}
               if isinstance(entry, dict) else {})
        new["schedule"] = {"step": step, "staff": [int(n) for n in staff]}
        changes[f"pools.{pool}"] = new
    return with_changes(scenario, changes) if changes else scenario


# --- targets per interval ----------------------------------------------------------------------


def interval_targets(scenario: Scenario) -> dict[str, dict]:
    """Target name -> {"goal", "within"} or {"max"}: what each interval is judged against."""
    out = {p: {"within": t.within, "goal": t.goal} for p, t in scenario.targets.service.items()}
    if scenario.targets.abandonment_max is not None:
        out[ABANDONMENT] = {"max": scenario.targets.abandonment_max}
    return out


def serving_pools(scenario: Scenario) -> dict[str, tuple[str, ...]]:
    """Target -> the pools whose staff it judges: a target place's pools are those of the
    transitions that take jobs from it; the abandonment target's are those serving a place
    with patience (every pool when none does)."""
    def takers(place):
        out = []
        for q in scenario.outputs_of(place):
            out += [r for r in scenario.transitions[q].inputs if r in scenario.pools]
        return tuple(dict.fromkeys(out))

    out = {p: takers(p) for p in scenario.targets.service}
    if scenario.targets.abandonment_max is not None:
        pools = [r for p, pl in scenario.places.items() if pl.patience is not None
                 for r in takers(p)]
        out[ABANDONMENT] = tuple(dict.fromkeys(pools)) or tuple(scenario.pools)
    return out


def verdict(target: Mapping, est: Estimate | None) -> str:
    """"meets", "misses" or "no data" (fewer than two replications measured the interval)."""
    if est is None or est.n < 2 or not (math.isfinite(est.low) and math.isfinite(est.high)):
        return "no data"
    if "goal" in target:
        return "meets" if est.low >= target["goal"] else "misses"
    return "meets" if est.high <= target["max"] else "misses"


def simulated_evaluator(scenario: Scenario, sweep: Sweep, step: float,
                        label: str = "isa") -> Evaluator:
    """Simulate a schedule (with ``sweep``: the same seed each time) and read per interval each
    target's estimate; a metric the simulator's table lacks (``abandonment`` in older runs) is
    skipped."""
    calls = [0]
    names = interval_targets(scenario)

    def evaluate(schedules):
        calls[0] += 1
        sim = sweep.run(with_schedules(scenario, schedules, step), f"{label}-{calls[0]:03d}")
        table = sim.intervals
        out = {}
        if table is None:
            return out
        for rec in table.to_dict("records"):
            metric, name = rec["metric"], rec["name"]
            key = (name if metric == "service_level" else
                   ABANDONMENT if metric == "abandonment" else None)
            if key is None or key not in names:
                continue
            out[(key, int(rec["interval"]))] = Estimate(rec["mean"], rec["low"], rec["high"],
                                                        int(rec["n"]))
        return out

    return evaluate


# --- the result ---------------------------------------------------------------------------------


@dataclass(frozen=True)
class IntervalStaffing:
    """Staff per pool and interval from the iterative algorithm.

    ``step``: interval length (time units), ``count`` intervals from 0; ``staff``: pool -> the
    final staff per interval (the last simulated); ``start``: the fluid start; ``history``: the
    staff simulated at each iteration; ``iterations``: simulations run; ``converged``: the staff
    stopped changing; ``estimates``: (target, interval) -> Estimate of the final staff;
    ``judged``: indices of the intervals judged (those starting at or after the warm-up);
    ``targets``: as :func:`interval_targets`; ``serving``: target -> pools."""

    scenario_name: str
    time_unit: str
    step: float
    count: int
    staff: dict[str, tuple[int, ...]]
    start: dict[str, tuple[int, ...]]
    history: tuple[dict, ...]
    iterations: int
    converged: bool
    estimates: dict
    judged: tuple[int, ...]
    targets: dict[str, dict]
    serving: dict[str, tuple[str, ...]]
    settings: dict
    notes: tuple[str, ...] = ()

    def verdicts(self) -> dict[tuple[str, int], str]:
        return {(t, i): verdict(spec, self.estimates.get((t, i)))
                for t, spec in self.targets.items() for i in self.judged}

    @property
    def meets(self) -> bool:
        """Every judged interval meets every target with confidence (or has no data)."""
        return all(v != "misses" for v in self.verdicts().values())

    def to_json(self) -> dict:
        return {
            "method": "iterative staffing algorithm (practical variant; Feldman, Massey, "
                      "Mandelbaum and Whitt 2008), common random numbers",
            "step": self.step, "intervals": self.count, "time_unit": self.time_unit,
            "iterations": self.iterations, "converged": self.converged, "meets": self.meets,
            "staff": {p: list(v) for p, v in self.staff.items()},
            "start": {p: list(v) for p, v in self.start.items()},
            "history": [{p: list(v) for p, v in h.items()} for h in self.history],
            "targets": self.targets,
            "serving": {t: list(p) for t, p in self.serving.items()},
            "achieved": achieved_json(self.targets, self.estimates, self.judged, self.step),
            "settings": dict(self.settings), "notes": list(self.notes),
        }


def achieved_json(targets, estimates, judged, step) -> list[dict]:
    """One record per target and judged interval: target, interval, start, end, mean, low,
    high, n, verdict (nan becomes null)."""
    rows = []
    for t, spec in targets.items():
        for i in judged:
            e = estimates.get((t, i))
            rows.append({"target": t, "interval": i, "start": i * step, "end": (i + 1) * step,
                         "mean": json_number(e.mean) if e else None,
                         "low": json_number(e.low) if e else None,
                         "high": json_number(e.high) if e else None,
                         "n": e.n if e else 0, "verdict": verdict(spec, e)})
    return rows


# --- the algorithm ------------------------------------------------------------------------------


def iterate_staffing(scenario: Scenario, evaluate: Evaluator, start: Mapping[str, Sequence[int]],
                     judged: Sequence[int], *, max_iterations: int = DEFAULT_ITERATIONS):
    """Run steps 2-4 of the module docstring from ``start``. Returns ``(staff, estimates,
    history, converged)``: the last simulated staff, its estimates, every staff simulated, and
    whether the staff stopped changing."""
    if max_iterations < 1:
        raise ValueError(f"max_iterations must be at least 1 (got {max_iterations!r})")
    targets = interval_targets(scenario)
    serving = serving_pools(scenario)
    staff = {p: list(v) for p, v in start.items()}
    floor = {p: [0] * len(v) for p, v in start.items()}
    history, estimates = [], {}
    for _ in range(max_iterations):
        current = {p: tuple(v) for p, v in staff.items()}
        history.append(current)
        estimates = dict(evaluate(current))
        new = {p: list(v) for p, v in staff.items()}
        for p in staff:
            mine = [t for t, pools in serving.items() if p in pools]
            if not mine:  # no target judges this pool: it keeps its fluid start
                continue
            for i in judged:
                states = [verdict(targets[t], estimates.get((t, i))) for t in mine]
                s = staff[p][i]
                if "misses" in states:
                    floor[p][i] = max(floor[p][i], s + 1)
                    new[p][i] = s + 1
                elif s - 1 >= floor[p][i]:
                    new[p][i] = s - 1
        if new == staff:
            return current, estimates, tuple(history), True
        staff = new
    return history[-1], estimates, tuple(history), False


def interval_staff(
    scenario: Scenario,
    settings: SimulationSettings | None = None,
    *,
    step: float | None = None,
    reps: int | None = None,
    seed: int | None = None,
    workers: int | None = None,
    executor=None,
    progress: Callable[[], object] | None = None,
    max_iterations: int = DEFAULT_ITERATIONS,
    beta: float = DEFAULT_BETA,
    evaluator: Evaluator | None = None,
    sweep: Sweep | None = None,
) -> IntervalStaffing:
    """The fewest agents per pool and interval meeting every target in every interval with
    confidence (module docstring). ``step``: interval length (default: the shortest profile or
    schedule step); ``settings`` and the keywords as for :func:`compare.compare`;
    ``evaluator``: replaces the simulation (tests); ``sweep``: an open :class:`Sweep` to run
    in (the shift plan shares one)."""
    targets = interval_targets(scenario)
    if not targets:
        raise ValueError("the scenario sets no targets: nothing to staff for")
    with contextlib.ExitStack() as stack:
        if sweep is not None:
            cfg = sweep.settings
            step, count = interval_grid(scenario, cfg.interval, cfg.horizon)
        else:
            cfg = resolve_settings(scenario.run, settings, reps=reps, seed=seed,
                                   workers=workers, executor=executor)
            step, count = interval_grid(scenario, step, cfg.horizon)
            cfg = cfg.with_changes(interval=step)
            if evaluator is None:
                sweep = stack.enter_context(Sweep(cfg, progress))
        if evaluator is None:
            evaluator = simulated_evaluator(scenario, sweep, step)
        judged = tuple(i for i in range(count) if i * step >= cfg.warmup - 1e-9 * step)
        start = start_staff(scenario, step, count, beta)
        staff, estimates, history, converged = iterate_staffing(
            scenario, evaluator, start, judged, max_iterations=max_iterations)
    notes = []
    judged_pools = {p for pools in serving_pools(scenario).values() for p in pools}
    for p in scenario.pools:
        if p not in judged_pools:
            notes.append(f"no target judges pool {p}: it keeps its starting staff (the fluid "
                         "offered work per interval with square-root safety)")
    if not converged:
        notes.append(f"the staff still changed after {max_iterations} simulations: the last "
                     "simulated staff is shown (not converged)")
    if ABANDONMENT in targets and not any(k[0] == ABANDONMENT for k in estimates):
        notes.append("the simulator's per-interval table has no abandonment share: the "
                     "abandonment target was not judged per interval")
    return IntervalStaffing(
        scenario_name=scenario.name, time_unit=scenario.time_unit, step=step, count=count,
        staff=staff, start=start, history=history, iterations=len(history),
        converged=converged, estimates=estimates, judged=judged, targets=targets,
        serving=serving_pools(scenario),
        settings={**cfg.to_json(), "interval": step, "beta": beta,
                  "max_iterations": max_iterations},
        notes=tuple(notes))
