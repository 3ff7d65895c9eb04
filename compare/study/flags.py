"""Flags: the regimes where the fluid answer cannot be trusted, each with what to do next.

A flag is ``{kind, where, message}``; ``where`` names the place, pool or transition concerned.
The kinds and when they fire (times in the scenario's time unit; "interval" is the simulated
95 % interval over replications, so noise alone rarely fires a flag):

* ``throughput_optimistic`` (a transition): the whole simulated interval lies below the fluid
  rate by more than :data:`THROUGHPUT_TOLERANCE` (1 %, relative): ``high < fluid·(1 − 0.01)``.
  The fluid rate is an upper bound for nets without conflicts (references.md), and 1 % is about
  the accuracy a staffing analyst reads a rate to.
* ``hidden_congestion`` (a waiting place): the fluid model says jobs there do not wait, but the
  interval's low end of the simulated mean wait exceeds a threshold that matters: the target's
  ``within`` when the place has a service target, else :data:`DOWNSTREAM_SHARE` (10 %) of the
  downstream hold (the mean hold of the place its jobs go to next; following places without hold
  up to the first one with a hold; the mean of all holds when there is none; never fires
  without a target when no place has a hold).
* ``abandonment_underestimated`` (a waiting place): the simulated abandonment interval lies
  above the fluid share by more than :data:`ABANDONMENT_TOLERANCE` (one percentage point,
  absolute): ``low > fluid + 0.01``.
* ``near_critical`` (a pool): its fluid load (agents busy at the fluid rates over staff, so
  what overflow and priorities actually send it) lies in [0.85, 1.15].
* ``target_missed``: a service level interval wholly below its goal (``high < goal``; where =
  the place), or the overall abandonment interval (computed per replication from the source
  totals) wholly above the maximum (``low > max``; where = the place with the most
  abandonments).
* ``unstable``: the simulation stopped replications at the job cap (where = the place with the
  largest simulated queue); or the fluid model says a place without patience is overloaded, so
  its queue grows linearly (where = that place); or, in a scenario without time variation, the
  simulated total queue keeps growing over the window: the per-replication least-squares slopes
  have an interval above 0 and the mean growth over the window exceeds both one job and half the
  mean queue (:data:`TREND_SHARE`) — a drift, not noise.
* ``interval_target`` (a target's place, or ``abandonment``): a target judged interval by
  interval on the per-interval table (time-varying scenarios, or ``--interval``): the intervals
  whose service level interval lies wholly below its goal, or whose abandonment interval lies
  wholly above the maximum, one flag per target with the intervals' clock times and the agents
  to add there (:mod:`compare.study.interval_verdicts`).

Flags follow the scenario's declaration order within a kind.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from desim import Estimate, SimulationResult
from fluid.analysis import FluidResult
from fluid.scenario import Scenario
from fluid.structure import route_share, serving_pools

from .gaps import Gaps

__all__ = [
    "ABANDONMENT_TOLERANCE",
    "DOWNSTREAM_SHARE",
    "FLAG_KINDS",
    "Flag",
    "NEAR_CRITICAL",
    "THROUGHPUT_TOLERANCE",
    "TREND_SHARE",
    "downstream_hold",
    "find_flags",
    "queue_trend",
]

FLAG_KINDS = ("throughput_optimistic", "hidden_congestion", "abandonment_underestimated",
              "near_critical", "target_missed", "unstable", "interval_target")
THROUGHPUT_TOLERANCE = 0.01
ABANDONMENT_TOLERANCE = 0.01
DOWNSTREAM_SHARE = 0.10
NEAR_CRITICAL = (0.85, 1.15)
TREND_SHARE = 0.5
#: The flag of compare/study/rate_flags.py: a day factor on the rates, not queueing randomness,
#: makes a target miss (judged there, from a second run without the factor).
FLAG_KINDS += ("rate_uncertainty",)

STAFF_ADVICE = "or run `fluidgap staff` for the cheapest staffing that meets the targets"


@dataclass(frozen=True)
class Flag:
    """One warning: ``kind`` (one of :data:`FLAG_KINDS`), ``where`` (a place, pool or transition)
    and ``message`` (what was seen and what to do next)."""

    kind: str
    where: str
    message: str

    def to_json(self) -> dict:
        return {"kind": self.kind, "where": self.where, "message": self.message}


def _f(x: float) -> str:
    return f"{x:.4g}"


def _est(e: Estimate) -> str:
    return f"{_f(e.mean)} [{_f(e.low)}, {_f(e.high)}]"


def _pct(x: float) -> str:
    return f"{100 * x:.1f} %"


# --- where to add staff --------------------------------------------------------------------------


def _pools_of(scenario: Scenario, transition: str) -> list[str]:
    t = scenario.transitions[transition]
    return [n for n in (*t.inputs, *t.outputs) if n in scenario.pools]


def _upstream_pools(scenario: Scenario, transition: str) -> list[str]:
    """Pools that ``transition`` touches or, failing that, the nearest upstream transitions."""
    seen, frontier = set(), [transition]
    while frontier:
        pools = [r for q in frontier for r in _pools_of(scenario, q)]
        if pools:
            return list(dict.fromkeys(pools))
        seen.update(frontier)
        nxt = []
        for q in frontier:
            p = scenario.job_input(q)
            if p is not None:
                nxt += [c for c in scenario.inputs_of(p) if c not in seen]
        frontier = nxt
    return []


def _shortfall_root(scenario: Scenario, transition: str, short: set[str]) -> str:
    """The most upstream transition of ``short`` reached from ``transition`` against the flow of
    its jobs (``transition`` itself when no upstream one falls short): where the jobs go
    missing, rather than where the missing jobs are merely not arriving."""
    root, seen, frontier = transition, {transition}, [transition]
    while frontier:
        nxt = []
        for q in frontier:
            for c in scenario.inputs_of(scenario.job_input(q)):
                if c not in seen:
                    seen.add(c)
                    nxt.append(c)
                    if c in short:
                        root = c
        frontier = nxt
    return root


def _busiest(pools: list[str], fluid: FluidResult, sim: SimulationResult) -> str | None:
    if not pools:
        return None

    def key(r):
        load = fluid.load.get(r, math.nan)
        busy = sim.pools[r]["busy"].mean if r in sim.pools else math.nan
        return (load if math.isfinite(load) else -1.0, busy if math.isfinite(busy) else -1.0)

    return max(pools, key=key)


def _saturation(pool: str, load: float, fluid: FluidResult) -> str:
    """Why a pool the fluid keeps fully busy is or is not a bottleneck (empty below capacity)."""
    if load < 1.0 - 1e-9:
        return ""
    if pool in fluid.bottlenecks:
        return "; the fluid keeps it fully busy and it is a fluid bottleneck"
    return ("; the fluid keeps it fully busy but it is not a fluid bottleneck: one more agent "
            "here would not raise the fluid output (another pool or the inflow limits it)")


def _advice(pool: str | None, fluid: FluidResult, sim: SimulationResult) -> str:
    if pool is None:
        return f"check the staffing, {STAFF_ADVICE}"
    load = fluid.load.get(pool, math.nan)
    busy = sim.pools[pool]["busy"].mean
    return (f"add staff to pool {pool} (fluid load {_f(load)}, simulated busy {_pct(busy)}), "
            f"{STAFF_ADVICE}")


# --- thresholds ----------------------------------------------------------------------------------


def downstream_hold(scenario: Scenario, place: str) -> float:
    """Mean hold (time units) of the place the jobs of ``place`` go to next, weighted by the
    routing shares, following places without hold to the first with one; the mean of all holds
    when none is found."""
    total, weight = 0.0, 0.0
    for q in scenario.outputs_of(place):
        share = route_share(scenario, place, q)
        nxt, steps = scenario.job_output(q), 0
        while nxt is not None and scenario.places[nxt].hold_mean == 0 and steps < len(
                scenario.places):
            outs = scenario.outputs_of(nxt)
            nxt = scenario.job_output(outs[0]) if outs else None
            steps += 1
        if nxt is not None and scenario.places[nxt].hold_mean > 0:
            total += share * scenario.places[nxt].hold_mean
            weight += share
    if weight > 0:
        return total / weight
    holds = [p.hold_mean for p in scenario.places.values() if p.hold_mean > 0]
    return float(np.mean(holds)) if holds else 0.0


def queue_trend(sim: SimulationResult) -> tuple[Estimate, float, float]:
    """``(slope, growth, level)`` of the simulated total queue over the window: the estimate of
    the per-replication least-squares slope (jobs per time unit), the mean growth over the window
    (slope × window length) and the mean level (jobs)."""
    slopes, levels, lengths = [], [], []
    for run in sim.runs:
        y = np.asarray(run.queue_series, dtype=float)
        mid = (np.arange(len(y)) + 0.5) * run.sample_step
        keep = mid >= run.warmup
        if keep.sum() < 3:
            continue
        t, v = mid[keep], y[keep]
        slopes.append(float(np.polyfit(t, v, 1)[0]))
        levels.append(float(v.mean()))
        lengths.append(float(t[-1] - t[0] + run.sample_step))
    slope = Estimate.from_values(slopes)
    if not slopes:
        return slope, math.nan, math.nan
    return slope, slope.mean * float(np.mean(lengths)), float(np.mean(levels))


# --- the flags -----------------------------------------------------------------------------------


def find_flags(scenario: Scenario, fluid: FluidResult, sim: SimulationResult,
               gaps: Gaps, transient=None) -> tuple[Flag, ...]:
    """All flags of one comparison, in the order of :data:`FLAG_KINDS`; ``transient``: the
    comparison's tidy per-interval table, for the per-interval verdicts (None: none)."""
    unit = scenario.time_unit
    flags: list[Flag] = []

    # throughput_optimistic
    short = [q for q in scenario.transitions
             if fluid.rates[q] > 0
             and sim.transitions[q]["rate"].high < fluid.rates[q] * (1 - THROUGHPUT_TOLERANCE)]
    for q in short:
        rate, est = fluid.rates[q], sim.transitions[q]["rate"]
        root = _shortfall_root(scenario, q, set(short))
        # staff where the jobs are lost: the pools serving the root's queue, else those it touches
        pool = _busiest(serving_pools(scenario, scenario.job_input(root))
                        or _upstream_pools(scenario, root), fluid, sim)
        where = "" if root == q else f"the shortfall begins upstream at {root}; "
        flags.append(Flag("throughput_optimistic", q, (
            f"simulated rate {_est(est)} per {unit} lies {_pct(1 - est.mean / rate)} below "
            f"the fluid rate {_f(rate)}: the fluid model is optimistic here; {where}"
            + _advice(pool, fluid, sim))))

    places = gaps.fluid_places
    # hidden_congestion
    for p, fp in places.items():
        if not fp.no_wait:
            continue
        est = sim.places[p]["wait"]
        target = scenario.targets.service.get(p)
        if target is not None:
            threshold, why = target.within, f"the target's {_f(target.within)} {unit}"
        else:
            hold = downstream_hold(scenario, p)
            threshold = DOWNSTREAM_SHARE * hold
            why = f"10 % of the downstream hold {_f(hold)} {unit}"
        # (with no target and no hold downstream there is no scale to judge a wait by)
        if (target is not None or threshold > 0) and est.low > threshold:
            pool = _busiest(serving_pools(scenario, p), fluid, sim)
            flags.append(Flag("hidden_congestion", p, (
                f"the fluid model says jobs in {p} do not wait, but the simulated mean wait is "
                f"{_est(est)} {unit}, above {why}; " + _advice(pool, fluid, sim))))

    # abandonment_underestimated
    for p, fp in places.items():
        est = sim.places[p]["abandoned"]
        if est.low > fp.abandoned + ABANDONMENT_TOLERANCE:
            pool = _busiest(serving_pools(scenario, p), fluid, sim)
            flags.append(Flag("abandonment_underestimated", p, (
                f"simulated abandonment {_est(est)} exceeds the fluid share {_f(fp.abandoned)} "
                f"by more than {_pct(ABANDONMENT_TOLERANCE)}: the fluid model understates it; "
                + _advice(pool, fluid, sim) + ", and check the patience assumption")))

    # near_critical
    low, high = NEAR_CRITICAL
    for r in scenario.pools:
        load = fluid.load.get(r, math.nan)
        if low <= load <= high:
            busy = sim.pools[r]["busy"]
            flags.append(Flag("near_critical", r, (
                f"fluid load {_f(load)} (agents busy at the fluid rates over staff) is within "
                f"15 % of the pool's capacity{_saturation(r, load, fluid)} (simulated busy "
                f"{_est(busy)}): here randomness, not averages, decides the waits; read the "
                f"simulated waits, not the fluid ones, and consider adding staff to pool {r} "
                f"{STAFF_ADVICE}")))

    # target_missed
    for p, target in scenario.targets.service.items():
        est = sim.places[p].get("served_within")
        if est is not None and est.high < target.goal:
            pool = _busiest(serving_pools(scenario, p), fluid, sim)
            flags.append(Flag("target_missed", p, (
                f"service level {_est(est)} ({target.describe(unit)}) is below the goal "
                f"{_pct(target.goal)}; " + _advice(pool, fluid, sim))))
    if scenario.targets.abandonment_max is not None:
        est = gaps.estimates.get("abandonment") or sim.overall_abandonment()
        cap = scenario.targets.abandonment_max
        if est.low > cap:
            where = _most_abandoned(scenario, sim)
            pool = _busiest(serving_pools(scenario, where), fluid, sim) if where else None
            flags.append(Flag("target_missed", where or "abandonment", (
                f"overall abandonment {_est(est)} is above the maximum {_pct(cap)}"
                + (f"; most abandonments are at {where}" if where else "") + "; "
                + _advice(pool, fluid, sim))))

    flags += _unstable(scenario, fluid, sim, places)
    # (imported here: that module builds its flags with this one's Flag)
    from .interval_verdicts import interval_flags

    flags += interval_flags(scenario, transient)
    return tuple(flags)


def _most_abandoned(scenario: Scenario, sim: SimulationResult) -> str | None:
    counts = {p: float(np.nansum(sim.raw("place", p, "abandoned_count")))
              for p in scenario.places if scenario.places[p].patience is not None}
    counts = {p: c for p, c in counts.items() if c > 0}
    return max(counts, key=counts.get) if counts else None


def _largest_queue(scenario: Scenario, sim: SimulationResult, places) -> str:
    names = list(places) or list(scenario.places)

    def size(p):
        m = sim.places[p]["queue"].mean
        return m if math.isfinite(m) else -1.0

    return max(names, key=size)


def _unstable(scenario, fluid, sim, places) -> list[Flag]:
    unit = scenario.time_unit
    out: list[Flag] = []
    for p, fp in places.items():
        if fp.state == "unstable":
            pool = _busiest(serving_pools(scenario, p), fluid, sim)
            out.append(Flag("unstable", p, (
                f"inflow {_f(fp.inflow)} per {unit} exceeds the fluid capacity "
                f"{_f(fp.capacity)} and jobs here never abandon: the queue grows without bound; "
                + _advice(pool, fluid, sim))))
    flagged = {f.where for f in out}
    if sim.unstable_replications:
        where = _largest_queue(scenario, sim, places)
        if where not in flagged:
            pool = _busiest(serving_pools(scenario, where), fluid, sim)
            out.append(Flag("unstable", where, (
                f"{sim.unstable_replications} of {sim.replications} replications hit the job cap "
                f"(too many jobs inside): the net cannot keep up; the largest queue is at "
                f"{where}; " + _advice(pool, fluid, sim))))
            flagged.add(where)
    elif not scenario.has_time_variation and sim.runs:
        slope, growth, level = queue_trend(sim)
        if slope.low > 0 and growth > max(1.0, TREND_SHARE * level):
            where = _largest_queue(scenario, sim, places)
            if where not in flagged:
                pool = _busiest(serving_pools(scenario, where), fluid, sim)
                out.append(Flag("unstable", where, (
                    f"the simulated queue keeps growing over the window (slope {_est(slope)} "
                    f"jobs per {unit}, +{_f(growth)} jobs on a mean of {_f(level)}); the "
                    f"largest queue is at {where}: run longer to tell a slow warm-up from "
                    f"overload, or " + _advice(pool, fluid, sim))))
    return out
