"""The cheapest staffing that meets the service targets with confidence, verified by simulation.

Starting point: per pool the larger of the fluid plan (:func:`fluid.staffing.fluid_plan`, the
fewest agents at which the fluid model carries every inflow) and square-root safety staffing
``ceil(R + β√R)`` with R the pool's offered work in agents (Halfin and Whitt 1981). Then:

1. *Add*: while some target fails, try one more agent in each pool (every candidate simulated
   with the same seed, so they differ by their staff only: common random numbers) and keep the
   one that most reduces the worst shortfall per unit of cost; a candidate that meets every
   target wins outright (the cheapest such). Shortfall of a service-level target: goal − interval
   low; of the abandonment target: interval high − max (both shares; positive = missed).
2. *Remove*: once every target holds, try one agent fewer in each pool, the largest saving
   first, and keep any removal after which every target still holds; repeat until none does.

A target holds *with confidence* when the 95 % interval over replications clears it: the
service-level interval's low end ≥ goal, the abandonment interval's high end ≤ max (abandonment
over all sources: abandoned / (completed + abandoned) per replication). Plans are evaluated once
(a cache), so the table ``tried`` lists every plan simulated, in order.

A pool's schedule is replaced by one constant staff level; staffing per interval (for arrival
profiles) is not done. Staff in agents; ``within`` of the targets in the scenario's time unit.
Decision support under the model's assumptions: where staffing affects people's safety, follow
local regulations and professional practice.
"""

from __future__ import annotations

import concurrent.futures as cf
import contextlib
import math
from dataclasses import dataclass, field
from typing import Callable, Mapping

import pandas as pd

from desim import Estimate, SimulationSettings, resolve_settings
from fluid.json_values import json_number
from fluid.offered import offered_work
from fluid.scenario import Scenario
from fluid.staffing import FluidPlan, fluid_plan, with_staff

from ..formulas.staffing import square_root_staffing
from .sweep import Sweep

__all__ = ["PlanTrial", "StaffingResult", "staff_search", "target_estimates", "meets_targets",
           "DEFAULT_BETA"]

#: Safety factor of the square-root start (N = R + β√R; Halfin and Whitt 1981).
DEFAULT_BETA = 0.5
ABANDONMENT = "abandonment"

#: evaluator(staff) -> {target name: Estimate}; the target names are the service-target places
#: and "abandonment"; ``unstable`` runs may be reported under the key "unstable" (a count).
Evaluator = Callable[[Mapping[str, int]], Mapping[str, object]]


@dataclass(frozen=True)
class PlanTrial:
    """One staffing plan simulated: ``staff`` (pool -> agents), ``cost``, ``estimates`` (target
    -> :class:`~desim.Estimate`), ``meets`` (every target holds with confidence), ``worst`` (the
    largest shortfall; ≤ 0 when it meets), ``step`` (why it was tried: "start", "add POOL",
    "remove POOL"), ``unstable`` (replications stopped at the job limit; such a plan never
    meets)."""

    staff: dict[str, int]
    cost: float
    estimates: dict[str, Estimate]
    meets: bool
    worst: float
    step: str
    unstable: int = 0

    def to_json(self) -> dict:
        return {"staff": dict(self.staff), "cost": self.cost, "meets": self.meets,
                "worst_shortfall": _num(self.worst), "step": self.step,
                "unstable": self.unstable,
                "estimates": {k: e.to_json() for k, e in self.estimates.items()}}


@dataclass(frozen=True)
class StaffingResult:
    """Fluid plan, the simulation-verified plan and every plan tried.

    ``plan``: pool -> agents (the fluid plan when there are no targets or with ``fluid_only``);
    ``meets``: the plan meets every target with confidence (None when not simulated);
    ``method``: "simulation", "fluid-only" or "fluid (no targets)"; ``start``: the starting plan;
    ``targets``: name -> {"goal" or "max", "within"}; ``settings``: replications, horizon,
    warm-up, seed, β; ``notes``: caveats."""

    scenario_name: str
    time_unit: str
    fluid_plan: FluidPlan
    plan: dict[str, int]
    plan_cost: float
    meets: bool | None
    method: str
    start: dict[str, int]
    tried: tuple[PlanTrial, ...]
    targets: dict[str, dict]
    costs: dict[str, float]
    settings: dict
    notes: tuple[str, ...] = ()

    @property
    def plan_trial(self) -> PlanTrial | None:
        """The trial of the final plan (None when nothing was simulated)."""
        for t in self.tried:
            if t.staff == self.plan:
                return t
        return None

    def to_json(self) -> dict:
        """``{"fluid_plan": {...}, "plan": {"staff", "cost", "meets", "estimates"}, "tried":
        [{"staff", "cost", "meets", "estimates", "step", ...}], ...}`` (nan becomes null)."""
        final = self.plan_trial
        return {
            "scenario": self.scenario_name,
            "time_unit": self.time_unit,
            "method": self.method,
            "fluid_plan": self.fluid_plan.to_json(),
            "plan": {"staff": dict(self.plan), "cost": self.plan_cost, "meets": self.meets,
                     "estimates": ({} if final is None
                                   else {k: e.to_json() for k, e in final.estimates.items()})},
            "start": dict(self.start),
            "tried": [t.to_json() for t in self.tried],
            "targets": self.targets,
            "costs": dict(self.costs),
            "settings": dict(self.settings),
            "notes": list(self.notes),
        }

    def to_frame(self) -> pd.DataFrame:
        """Tidy: one row per plan tried and target, columns trial, step, staff (``pool=n``
        separated by spaces), cost, meets, target, mean, low, high, n (the simulated estimate
        of the target's figure: a service level, or the abandonment share)."""
        rows = []
        for i, t in enumerate(self.tried):
            staff = " ".join(f"{p}={n}" for p, n in t.staff.items())
            for name, e in t.estimates.items():
                rows.append((i, t.step, staff, t.cost, t.meets, name, e.mean, e.low, e.high,
                             e.n))
        return pd.DataFrame(rows, columns=["trial", "step", "staff", "cost", "meets", "target",
                                           "mean", "low", "high", "n"])

    def plans_table(self) -> pd.DataFrame:
        """One row per plan tried, in order: trial, step, one column per pool (agents), cost,
        meets, worst_shortfall, and per target <target>_mean, _low, _high, _n."""
        rows = []
        for i, t in enumerate(self.tried):
            row = {"trial": i, "step": t.step, **t.staff, "cost": t.cost, "meets": t.meets,
                   "worst_shortfall": t.worst}
            for name, e in t.estimates.items():
                row |= {f"{name}_mean": e.mean, f"{name}_low": e.low, f"{name}_high": e.high,
                        f"{name}_n": e.n}
            rows.append(row)
        return pd.DataFrame(rows)


_num = json_number


# --- targets -------------------------------------------------------------------------------------


def target_estimates(scenario: Scenario, result) -> dict[str, Estimate]:
    """Estimates of the scenario's targets from a :class:`desim.SimulationResult`: per
    service-target place its ``served_within``; "abandonment" (all sources:
    :meth:`desim.SimulationResult.overall_abandonment`) when a maximum is set."""
    out = {p: result.places[p]["served_within"] for p in scenario.targets.service}
    if scenario.targets.abandonment_max is not None:
        out[ABANDONMENT] = result.overall_abandonment()
    return out


def _shortfalls(scenario: Scenario, estimates: Mapping[str, Estimate]) -> dict[str, float]:
    """Target -> shortfall (positive when missed; missing intervals count as missed by 1)."""
    out = {}
    for p, t in scenario.targets.service.items():
        low = estimates[p].low
        out[p] = t.goal - low if math.isfinite(low) else 1.0
    if scenario.targets.abandonment_max is not None:
        high = estimates[ABANDONMENT].high
        out[ABANDONMENT] = high - scenario.targets.abandonment_max if math.isfinite(high) else 1.0
    return out


def meets_targets(scenario: Scenario, estimates: Mapping[str, Estimate]) -> bool:
    """Every target holds with confidence (service-level low ≥ goal, abandonment high ≤ max)."""
    return all(s <= 0 for s in _shortfalls(scenario, estimates).values())


def _targets_json(scenario: Scenario) -> dict[str, dict]:
    out = {p: t.to_json(scenario.time_unit) for p, t in scenario.targets.service.items()}
    if scenario.targets.abandonment_max is not None:
        out[ABANDONMENT] = {"max": scenario.targets.abandonment_max}
    return out


# --- the search ----------------------------------------------------------------------------------


def _start(scenario: Scenario, plan: FluidPlan, beta: float) -> dict[str, int]:
    work = offered_work(scenario)
    start = {}
    for p in scenario.pools:
        r = work[p]
        safety = square_root_staffing(r, 1.0, beta) if math.isfinite(r) and r > 0 else 0
        start[p] = max(plan.staff[p], safety)
    return start


def plan_dirname(staff: Mapping[str, int]) -> str:
    """Folder name of one plan's replications under ``out``: pool names and staff."""
    return "plan-" + "-".join(f"{p}{n}" for p, n in staff.items())


def _simulator(scenario: Scenario, sweep: Sweep) -> Evaluator:
    def evaluate(staff):
        sim = sweep.run(with_staff(scenario, staff), plan_dirname(staff))
        return target_estimates(scenario, sim) | {"unstable": sim.unstable_replications}
    return evaluate


def staff_search(
    scenario: Scenario,
    settings: SimulationSettings | None = None,
    *,
    costs: Mapping[str, float] | None = None,
    reps: int | None = None,
    horizon: float | None = None,
    warmup: float | None = None,
    seed: int | None = None,
    workers: int | None = None,
    executor: cf.Executor | None = None,
    progress: Callable[[], object] | None = None,
    max_steps: int = 40,
    beta: float = DEFAULT_BETA,
    fluid_only: bool = False,
    evaluator: Evaluator | None = None,
    out=None,
    resume: bool = False,
) -> StaffingResult:
    """Cheapest whole-agent staffing of ``scenario`` meeting every target with confidence (see
    the module docstring). ``costs``: pool -> cost per agent (default 1); ``settings`` and the
    simulation keywords as in :func:`compare.compare` (unset: the scenario's ``run``), the same
    seed for every plan (common random numbers) and one shared executor (:class:`Sweep`);
    ``progress``: called per finished replication; ``max_steps``: plans simulated at most;
    ``beta``: safety factor of the square-root start; ``fluid_only``: stop after the fluid plan;
    ``evaluator``: replaces the simulation (staff -> target estimates), e.g. with a formula,
    for tests. With a run folder ``out``, each plan keeps its replications in
    ``out/plan-...``."""
    cfg = resolve_settings(scenario.run, settings, reps=reps, horizon=horizon, warmup=warmup,
                           seed=seed, workers=workers, executor=executor, out=out,
                           resume=resume or None)
    if max_steps < 1:
        raise ValueError(f"max_steps must be at least 1 (got {max_steps!r})")
    plan = fluid_plan(scenario, costs=costs)
    costs = plan.costs
    settings = {**cfg.to_json(), "beta": beta, "max_steps": max_steps}
    targets = _targets_json(scenario)
    notes = [f"fluid plan: {n}" for n in plan.notes]
    common = dict(scenario_name=scenario.name, time_unit=scenario.time_unit, fluid_plan=plan,
                  targets=targets, costs=costs, settings=settings)
    if fluid_only or not targets:
        notes.append("fluid plan only (not simulated)" if fluid_only else
                     "the scenario sets no targets: the plan is the fluid plan, not simulated")
        return StaffingResult(plan=dict(plan.staff), plan_cost=plan.cost, meets=None,
                              method="fluid-only" if fluid_only else "fluid (no targets)",
                              start=dict(plan.staff), tried=(), notes=tuple(notes), **common)

    with contextlib.ExitStack() as stack:
        if evaluator is None:
            evaluator = _simulator(scenario, stack.enter_context(Sweep(cfg, progress)))
        search = _Search(scenario, costs, evaluator, max_steps)
        start = _start(scenario, plan, beta)
        final = search.run(start)
    if scenario.has_time_variation:
        notes.append("simulated plans keep the arrival profiles but have one staff level per "
                     "pool for the whole horizon (schedules replaced); staffing per interval is "
                     "not done")
    notes += search.notes
    return StaffingResult(plan=dict(final.staff), plan_cost=final.cost, meets=final.meets,
                          method="simulation", start=start, tried=tuple(search.tried),
                          notes=tuple(notes), **common)


@dataclass
class _Search:
    scenario: Scenario
    costs: Mapping[str, float]
    evaluate: Evaluator
    max_steps: int
    tried: list = field(default_factory=list)
    cache: dict = field(default_factory=dict)
    notes: list = field(default_factory=list)

    def trial(self, staff: dict[str, int], step: str) -> PlanTrial | None:
        """The plan's trial (simulated once); None when the budget of plans is spent."""
        key = tuple(staff[p] for p in self.scenario.pools)
        if key in self.cache:
            return self.cache[key]
        if len(self.tried) >= self.max_steps:
            return None
        raw = dict(self.evaluate(dict(staff)))
        unstable = int(raw.pop("unstable", 0) or 0)
        shortfalls = _shortfalls(self.scenario, raw)
        worst = max(shortfalls.values())
        t = PlanTrial(staff=dict(staff), cost=float(sum(self.costs[p] * n
                                                        for p, n in staff.items())),
                      estimates=raw, meets=worst <= 0 and unstable == 0, worst=float(worst),
                      step=step, unstable=unstable)
        self.cache[key] = t
        self.tried.append(t)
        return t

    def total(self, t: PlanTrial) -> float:
        return sum(max(s, 0.0) for s in _shortfalls(self.scenario, t.estimates).values())

    def run(self, start: dict[str, int]) -> PlanTrial:
        cur = self.trial(start, "start")
        while not cur.meets:
            nxt = self.add(cur)
            if nxt is None:
                return cur
            cur = nxt
        return self.remove(cur)

    def add(self, cur: PlanTrial) -> PlanTrial | None:
        cands = []
        for p in self.scenario.pools:
            t = self.trial(cur.staff | {p: cur.staff[p] + 1}, f"add {p}")
            if t is None:
                self.notes.append(f"stopped after {self.max_steps} plans without meeting every "
                                  "target")
                return None
            cands.append((p, t))
        winners = [(p, t) for p, t in cands if t.meets]
        if winners:
            return min(winners, key=lambda pt: pt[1].cost)[1]

        def per_cost(gain: float, p: str) -> float:
            c = self.costs[p]
            return gain / c if c > 0 else (math.inf if gain > 0 else gain)

        best = max(cands, key=lambda pt: (per_cost(cur.worst - pt[1].worst, pt[0]),
                                          per_cost(self.total(cur) - self.total(pt[1]), pt[0])))
        p, t = best
        if cur.worst - t.worst <= 0 and self.total(cur) - self.total(t) <= 0:
            self.notes.append("no single added agent improves the targets: the search stopped "
                              "with targets missed")
            return None
        return t

    def remove(self, cur: PlanTrial) -> PlanTrial:
        order = sorted(self.scenario.pools, key=lambda p: -self.costs[p])
        while True:
            for p in order:
                if cur.staff[p] == 0:
                    continue
                t = self.trial(cur.staff | {p: cur.staff[p] - 1}, f"remove {p}")
                if t is None:
                    self.notes.append(f"stopped removing after {self.max_steps} plans")
                    return cur
                if t.meets:
                    cur = t
                    break
            else:
                return cur
