"""A shift plan: the cheapest whole-agent mix of the scenario's shifts covering the staff
required per interval, simulated and repaired until every interval meets its targets.

1. Requirement: :func:`~compare.study.interval_staffing.interval_staff` (staff per pool and
   interval, the iterative staffing algorithm).
2. Cover: one column per shift pattern and allowed start; column ``j`` covers interval ``i``
   when its agent is on duty for the whole interval (a partly present agent is not counted);
   the cheapest whole counts covering the requirement are the set-covering program of Dantzig
   (1954), solved by :func:`compare.formulas.shift_cover.cheapest_cover` (HiGHS).
3. Verify: the plan's staff per interval (agents on duty) is simulated with the same seed as the
   requirement (common random numbers); where an interval misses a target with confidence, add
   one agent on the cheapest column covering it (ties: the one covering most missing intervals,
   then the earliest start), for every missing pool-interval at once, and simulate again, up to
   ``max_repairs`` rounds.
4. Flat plan, for the cost comparison: the peak requirement of each pool held in every interval
   (one staff level all day, which meets every interval wherever the per-interval requirement
   does), covered by the same shifts; simulated once with the same seed.

Costs are the shifts' own (``cost`` per agent and shift); times in the scenario's time unit.
Decision support under the model's assumptions: where staffing affects people's safety, follow
local regulations and professional practice.
"""

from __future__ import annotations

import contextlib
from dataclasses import dataclass
from typing import Callable, Mapping

import numpy as np

from desim import SimulationSettings, resolve_settings
from fluid.scenario import Scenario

from ..formulas.shift_cover import CoverError, cheapest_cover
from .interval_staffing import (
    DEFAULT_ITERATIONS,
    IntervalStaffing,
    achieved_json,
    interval_grid,
    interval_staff,
    simulated_evaluator,
    verdict,
)
from .sweep import Sweep

__all__ = ["ShiftColumn", "ShiftPlan", "shift_columns", "coverage_matrix", "shift_plan",
           "DEFAULT_REPAIRS", "CoverError"]

#: Cells of one pool's coverage matrix (starts × intervals) at most (8 bytes each).
MAX_CELLS = 5_000_000
#: Repair rounds (simulations after the first check of the plan) at most.
DEFAULT_REPAIRS = 8


@dataclass(frozen=True)
class ShiftColumn:
    """One shift pattern at one start time."""

    shift: str
    pool: str
    start: float
    end: float
    cost: float


def shift_columns(scenario: Scenario) -> tuple[ShiftColumn, ...]:
    """Every (pattern, allowed start) of the scenario, patterns in their order."""
    return tuple(ShiftColumn(n, s.pool, t, t + s.length, s.cost)
                 for n, s in scenario.shifts.items() for t in s.starts)


def coverage_matrix(scenario: Scenario, columns, pool: str, step: float, count: int,
                    horizon: float | None = None) -> np.ndarray:
    """Intervals × columns of ``pool``: 1 when the column's agent is on duty for the whole
    interval ``[i·step, min((i+1)·step, horizon))`` (horizon: default the run's; the rule of
    :meth:`fluid.shifts.ShiftPattern.covers`). Refuses (:class:`CoverError`) more than
    :data:`MAX_CELLS` cells."""
    horizon = scenario.run.horizon if horizon is None else horizon
    mine = [c for c in columns if c.pool == pool]
    if len(mine) * count > MAX_CELLS:
        raise CoverError(f"{len(mine):,} shift starts of pool {pool} over {count:,} intervals "
                         f"make more than {MAX_CELLS:,} cells: give fewer start times or a "
                         "longer interval")
    lo = np.arange(count) * step
    hi = np.minimum(lo + step, horizon)
    eps = 1e-9 * np.maximum(1.0, np.abs(hi))
    a = np.zeros((count, len(mine)))
    for j, c in enumerate(mine):
        for start, end in scenario.shifts[c.shift].on_duty(c.start):
            a[(start <= lo + eps) & (end >= hi - eps), j] = 1.0
    return a


@dataclass(frozen=True)
class ShiftPlan:
    """The shift plan and what it achieved.

    ``requirement``: the :class:`IntervalStaffing` it covers; ``columns``: every pattern and
    start; ``counts``: agents per column (the plan after repairs); ``cover_counts``: the
    covering program's answer before repairs; ``cost`` (after repairs), ``cover_cost``,
    ``lp_bound`` (the covering program's linear relaxation); ``staff``: pool -> agents on
    duty per interval; ``estimates``/``meets``: the last simulation of the plan; ``repairs``:
    one text per shift added; ``flat``: pool -> the peak requirement held all day, ``flat_cost``,
    ``flat_counts``, ``flat_staff``, ``flat_meets``; ``current``: pool -> the scenario's own
    staff per interval."""

    scenario_name: str
    time_unit: str
    requirement: IntervalStaffing
    columns: tuple[ShiftColumn, ...]
    counts: tuple[int, ...]
    cover_counts: tuple[int, ...]
    cost: float
    cover_cost: float
    lp_bound: float
    staff: dict[str, tuple[int, ...]]
    estimates: dict
    meets: bool
    repairs: tuple[str, ...]
    checks: int
    flat: dict[str, int]
    flat_cost: float
    flat_counts: tuple[int, ...]
    flat_staff: dict[str, tuple[int, ...]]
    flat_meets: bool | None
    current: dict[str, tuple[int, ...]]
    notes: tuple[str, ...] = ()

    @property
    def step(self) -> float:
        return self.requirement.step

    def shift_rows(self) -> list[dict]:
        """One row per column worked (count > 0): shift, pool, start, end, agents, cost."""
        return [{"shift": c.shift, "pool": c.pool, "start": c.start, "end": c.end,
                 "agents": n, "cost": round(n * c.cost, 9)}
                for c, n in zip(self.columns, self.counts) if n > 0]

    def schedule_block(self) -> dict:
        """``{"pools": {pool: {"schedule": {"step", "staff"}}}}``: the plan as scenario YAML."""
        return {"pools": {p: {"schedule": {"step": self.step, "staff": list(v)}}
                          for p, v in self.staff.items()}}

    def agent_time(self, staff: Mapping[str, tuple[int, ...]]) -> float:
        """Agent-time on duty over the horizon (agents × time units)."""
        h = self.requirement.count * self.step
        return float(sum(n * self.step for v in staff.values() for n in v[: int(h / self.step)]))

    def to_json(self) -> dict:
        req = self.requirement
        return {
            "requirement": req.to_json(),
            "plan": {"shifts": self.shift_rows(), "cost": self.cost, "meets": self.meets,
                     "staff": {p: list(v) for p, v in self.staff.items()},
                     "cover_cost": self.cover_cost, "lp_bound": self.lp_bound,
                     "repairs": list(self.repairs), "checks": self.checks,
                     "achieved": achieved_json(req.targets, self.estimates, req.judged,
                                               req.step),
                     "agent_time": self.agent_time(self.staff)},
            "flat_plan": {"staff": dict(self.flat), "cost": self.flat_cost,
                          "meets": self.flat_meets,
                          "shifts": [{"shift": c.shift, "pool": c.pool, "start": c.start,
                                      "end": c.end, "agents": n, "cost": round(n * c.cost, 9)}
                                     for c, n in zip(self.columns, self.flat_counts) if n > 0],
                          "agent_time": self.agent_time(self.flat_staff)},
            "saving": round(self.flat_cost - self.cost, 9),
            "current": {"staff": {p: list(v) for p, v in self.current.items()},
                        "agent_time": self.agent_time(self.current)},
            "schedule": self.schedule_block(),
            "notes": list(self.notes),
        }


def _cover(columns, requirement: Mapping[str, tuple[int, ...]], cover_of, step):
    """Counts per column (all pools), cost, LP bound and staff per pool."""
    counts = [0] * len(columns)
    cost, bound, staff = 0.0, 0.0, {}
    for pool, need in requirement.items():
        idx = [j for j, c in enumerate(columns) if c.pool == pool]
        a = cover_of(pool)
        if not idx and any(need):
            raise CoverError(f"no shift pattern is for pool {pool}")
        try:
            sol = cheapest_cover(a, need, [columns[j].cost for j in idx])
        except CoverError as exc:
            raise CoverError(f"pool {pool}: {exc} (from {_interval(exc, step)}): the shift "
                             "patterns leave it uncovered") from None
        for j, n in zip(idx, sol.counts):
            counts[j] = n
        cost = round(cost + sol.cost, 9)
        bound += sol.lp_bound
        staff[pool] = sol.staff
    return counts, cost, bound, staff


def _interval(exc, step) -> str:
    words = str(exc).split()
    try:
        i = int(words[words.index("interval") + 1])
    except (ValueError, IndexError):
        return "?"
    return f"{i * step:g} to {(i + 1) * step:g}"


def _staff_of(scenario, columns, counts, cover_of) -> dict[str, tuple[int, ...]]:
    out = {}
    for pool in scenario.pools:
        idx = [j for j, c in enumerate(columns) if c.pool == pool]
        a = cover_of(pool)
        out[pool] = tuple(int(v) for v in a @ np.array([counts[j] for j in idx], dtype=float))
    return out


def _misses(req: IntervalStaffing, estimates) -> dict[str, list[int]]:
    """Pool -> intervals where a target it serves misses."""
    out = {p: [] for p in req.staff}
    for t, spec in req.targets.items():
        for i in req.judged:
            if verdict(spec, estimates.get((t, i))) == "misses":
                for p in req.serving.get(t, ()):
                    if p in out and i not in out[p]:
                        out[p].append(i)
    return {p: sorted(v) for p, v in out.items() if v}


def _repair(columns, counts, misses, cover_of) -> list[str]:
    """Add one agent on the cheapest column covering each missing pool-interval (in place)."""
    added = []
    for pool, intervals in misses.items():
        idx = [j for j, c in enumerate(columns) if c.pool == pool]
        a = cover_of(pool)
        left = set(intervals)
        for i in intervals:
            if i not in left:
                continue
            cands = [k for k in range(len(idx)) if a[i, k] > 0]
            if not cands:
                continue
            k = min(cands, key=lambda k: (columns[idx[k]].cost,
                                          -sum(a[m, k] for m in left), columns[idx[k]].start))
            counts[idx[k]] += 1
            c = columns[idx[k]]
            added.append(f"{c.shift} at {c.start:g} (pool {pool}, for interval {i})")
            left -= {m for m in left if a[m, k] > 0}
    return added


def _current(scenario: Scenario, step: float, count: int) -> dict[str, tuple[int, ...]]:
    return {p: tuple(pool.staff_at(i * step) for i in range(count))
            for p, pool in scenario.pools.items()}


def shift_plan(
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
    max_repairs: int = DEFAULT_REPAIRS,
    evaluator=None,
    requirement: IntervalStaffing | None = None,
) -> ShiftPlan:
    """The shift plan of ``scenario`` (module docstring). Needs ``scenario.shifts``. The
    requirement, the plan's checks and the flat plan share one :class:`Sweep` (one seed, one
    pool of workers); ``evaluator`` replaces the simulation (tests); ``requirement``: a
    per-interval staffing already computed (not simulated again)."""
    if not scenario.shifts:
        raise ValueError("the scenario has no shift patterns (shifts:)")
    cfg = resolve_settings(scenario.run, settings, reps=reps, seed=seed, workers=workers,
                           executor=executor)
    step, count = interval_grid(scenario, step if requirement is None else requirement.step,
                                cfg.horizon)
    cfg = cfg.with_changes(interval=step)
    columns = shift_columns(scenario)
    for pool in scenario.pools:
        if not any(c.pool == pool for c in columns):
            raise CoverError(f"no shift pattern is for pool {pool}")
    with contextlib.ExitStack() as stack:
        sweep = None
        if evaluator is None:
            sweep = stack.enter_context(Sweep(cfg, progress))
        if requirement is None:
            requirement = interval_staff(scenario, cfg, step=step,
                                         max_iterations=max_iterations, evaluator=evaluator,
                                         sweep=sweep)
        check = evaluator or simulated_evaluator(scenario, sweep, step, label="shifts")
        matrices = {p: coverage_matrix(scenario, columns, p, step, count, cfg.horizon)
                    for p in scenario.pools}
        cover_of = matrices.__getitem__
        counts, cover_cost, bound, staff = _cover(columns, requirement.staff, cover_of, step)
        cover_counts = tuple(counts)
        repairs, checks, estimates = [], 0, {}
        while True:
            estimates = dict(check(staff))
            checks += 1
            misses = _misses(requirement, estimates)
            if not misses or checks > max_repairs:
                break
            added = _repair(columns, counts, misses, cover_of)
            if not added:
                break
            repairs += added
            staff = _staff_of(scenario, columns, counts, cover_of)
        meets = not _misses(requirement, estimates)
        flat = {p: max((v[i] for i in requirement.judged), default=0)
                for p, v in requirement.staff.items()}
        flat_counts, flat_cost, _, flat_staff = _cover(
            columns, {p: (n,) * count for p, n in flat.items()}, cover_of, step)
        flat_est = dict(check(flat_staff))
        flat_meets = not _misses(requirement, flat_est)
    notes = list(requirement.notes)
    if not meets:
        notes.append(f"the plan still misses a target after {len(repairs)} shifts added in "
                     f"{checks} simulations")
    cost = round(float(sum(n * c.cost for n, c in zip(counts, columns))), 9)
    return ShiftPlan(
        scenario_name=scenario.name, time_unit=scenario.time_unit, requirement=requirement,
        columns=columns, counts=tuple(counts), cover_counts=cover_counts, cost=cost,
        cover_cost=cover_cost, lp_bound=bound, staff=staff, estimates=estimates, meets=meets,
        repairs=tuple(repairs), checks=checks, flat=flat, flat_cost=flat_cost,
        flat_counts=tuple(flat_counts), flat_staff=flat_staff, flat_meets=flat_meets,
        current=_current(scenario, step, count), notes=tuple(notes))
