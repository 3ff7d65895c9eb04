"""The cheapest whole-agent staffing that lets every transition reach its inflow-driven fluid rate.

With every rate fixed at its inflow-driven value ``ρ*`` (:func:`fluid.offered.offered_rates`:
what each transition would carry if no pool limited), the marking constraints of the throughput
LP of design.md §4.1,

    a u_q ≤ π (M_p + Σ b (u_{q'} − τ_p ρ*_{q'})),

are linear in the offsets ``u`` and the staff ``M_p`` together. The LP reaches ``ρ*`` at staff
``M`` exactly when some ``u`` satisfies them (a feasible ``(ρ*, u)`` makes the LP optimum at least
``ρ*``, which no rate exceeds; conversely the LP's own solution is such a pair). So the cheapest
plan is the mixed-integer program: minimise ``Σ cost_p M_p`` over whole ``M_p ≥ 0`` and free
``u``, solved with HiGHS (scipy.optimize.milp). The answer is re-checked by solving the
throughput LP at the plan's staff.

A pool's agents are shared by all its outputs, so a pool gives one constraint for all of them
together (``Σ_q a u_q ≤ M_p + Σ b u_{q'}``), whether or not it has a priority: every output must
reach its inflow-driven rate anyway, so the order in which the pool serves them does not matter
once there is capacity for all. At a job place with a priority the inflow-driven rates send every
job to the highest-priority output (as :func:`~fluid.offered.offered_rates` does), so the place
is read as a route with proportion 1 for that output and 0 for the others. Where a pool has a
priority the re-check uses the counter equations (priorities included) instead of the LP.

Profiles count at their mean rate over the run horizon and a pool's schedule is replaced by one
staff level for the whole horizon (staffing per interval is not done here).

Rates are per the scenario's time unit; staff in agents.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Mapping

import numpy as np

from .counters import integrate_counters
from .errors import SolverError
from .json_values import json_number
from .loading import with_changes
from .lp import throughput_lp
from .offered import offered_rates, offered_work
from .scenario import FrozenMap, Scenario
from .sources import PoissonArrivals
from .structure import inflow, lp_applies, places_without_exit, unlimited_share

if TYPE_CHECKING:  # pandas is imported by the table methods only (importing it is slow)
    import pandas as pd

__all__ = ["FluidPlan", "fluid_plan", "with_staff", "plan_view"]

# A rate reached in the re-check may fall short of the inflow-driven one by this (relative): the
# LP is exact to HiGHS's tolerances; the counters' long-run slopes to about 1e-6 while converging
RECHECK_TOLERANCE = 1e-7
COUNTER_TOLERANCE = 1e-5


@dataclass(frozen=True)
class FluidPlan:
    """The cheapest whole-agent staffing at which the fluid model carries every inflow.

    ``staff``: pool -> agents; ``cost``: Σ cost × staff; ``costs``: cost per agent of each pool;
    ``work``: pool -> agents busy at the inflow-driven rates (the offered load; nan for a pool on
    no conservation invariant); ``rates``: transition -> the inflow-driven rate the plan must carry
    (per time unit); ``scenario_staff``: the scenario's own staff (mean staff for schedules);
    ``recheck``: worst relative shortfall of a rate in the throughput LP solved at the plan's staff
    (0 when every rate is reached); ``notes``: what was assumed (priorities, profiles)."""

    scenario_name: str
    time_unit: str
    staff: dict[str, int]
    cost: float
    costs: dict[str, float]
    work: dict[str, float]
    rates: dict[str, float]
    scenario_staff: dict[str, float]
    recheck: float
    notes: tuple[str, ...] = ()

    def to_json(self) -> dict:
        """``{"staff", "cost", "costs", "work", "rates", "scenario_staff", "recheck", "notes"}``
        (nan becomes null)."""
        return {
            "staff": dict(self.staff),
            "cost": _num(self.cost),
            "costs": {p: _num(c) for p, c in self.costs.items()},
            "work": {p: _num(w) for p, w in self.work.items()},
            "rates": {q: _num(r) for q, r in self.rates.items()},
            "scenario_staff": {p: _num(s) for p, s in self.scenario_staff.items()},
            "recheck": _num(self.recheck),
            "notes": list(self.notes),
        }

    def to_frame(self) -> pd.DataFrame:
        """Tidy table, one row per figure: columns kind, name, metric, value.

        kind "pool": ``staff`` (the plan's agents), ``cost_per_agent``, ``cost``, ``work``
        (offered load, agents; nan on no invariant), ``scenario_staff``; kind "transition":
        ``rate``, the inflow-driven rate the plan carries (per time unit); kind "plan" (name:
        the scenario): ``cost`` and ``recheck``. One row per pool instead: :meth:`wide_frame`."""
        import pandas as pd

        rows = []
        for p, n in self.staff.items():
            rows += [("pool", p, "staff", float(n)),
                     ("pool", p, "cost_per_agent", float(self.costs[p])),
                     ("pool", p, "cost", float(self.costs[p] * n)),
                     ("pool", p, "work", float(self.work[p])),
                     ("pool", p, "scenario_staff", float(self.scenario_staff[p]))]
        rows += [("transition", q, "rate", float(r)) for q, r in self.rates.items()]
        rows += [("plan", self.scenario_name, "cost", float(self.cost)),
                 ("plan", self.scenario_name, "recheck", float(self.recheck))]
        return pd.DataFrame(rows, columns=["kind", "name", "metric", "value"])

    def wide_frame(self) -> pd.DataFrame:
        """One row per pool: pool, staff, cost_per_agent, cost, work, scenario_staff."""
        import pandas as pd

        rows = [(p, n, self.costs[p], self.costs[p] * n, self.work[p], self.scenario_staff[p])
                for p, n in self.staff.items()]
        return pd.DataFrame(rows, columns=["pool", "staff", "cost_per_agent", "cost", "work",
                                           "scenario_staff"])


_num = json_number


# --- variants read by the plan, phase diagrams and the simulated search -------------------------


def with_staff(scenario: Scenario, staff: Mapping[str, int]) -> Scenario:
    """A validated copy of ``scenario`` with constant staff per pool (whole agents). A pool's
    schedule is replaced by the constant; its priority is kept."""
    doc = scenario.to_document().get("pools", {})
    changes = {}
    for pool, n in staff.items():
        if pool not in scenario.pools:
            raise ValueError(f"unknown pool {pool!r} (pools: {', '.join(scenario.pools)})")
        n = int(n)
        entry = doc.get(pool)
        if isinstance(entry, dict):
            new = {k: v for k, v in entry.items() if k != "schedule"}
            new["staff"] = n
            changes[f"pools.{pool}"] = new
        else:
            changes[f"pools.{pool}"] = n
    return with_changes(scenario, changes) if changes else scenario


def plan_view(scenario: Scenario) -> Scenario:
    """The net as the fluid plan reads it, for the re-check only: every source at its mean rate
    over the run horizon, and a job place's priority turned into a route sending every job to its
    highest-priority output (pools keep their priorities). Built with
    :func:`dataclasses.replace` and not validated again, so it is not meant to be simulated; its
    stored document says what it is (so that its fingerprint is not the original's)."""
    h = scenario.run.horizon
    doc = scenario.to_document()
    sources = {}
    for n, s in scenario.sources.items():
        rate = s.arrivals.mean_rate(h)
        sources[n] = replace(s, arrivals=PoissonArrivals(rate))
        doc.setdefault("sources", {})[n] = {"rate": rate, "into": s.into}
    places = {}
    for n, p in scenario.places.items():
        if p.priority:
            route = FrozenMap({q: unlimited_share(scenario, n, q) for q in p.priority})
            p = replace(p, priority=(), route=route)
            entry = dict(doc["places"][n]) if isinstance(doc["places"].get(n), dict) else {}
            entry.pop("priority", None)
            entry["route"] = dict(route)
            doc["places"][n] = entry
        places[n] = p
    return replace(scenario, sources=FrozenMap(sources), places=FrozenMap(places),
                   document=json.dumps(doc, sort_keys=True))


# --- the mixed-integer program -------------------------------------------------------------------


def _costs(scenario: Scenario, costs: Mapping[str, float] | None) -> dict[str, float]:
    out = {p: 1.0 for p in scenario.pools}
    for p, c in (costs or {}).items():
        if p not in scenario.pools:
            raise ValueError(f"cost given for unknown pool {p!r} (pools: "
                             f"{', '.join(scenario.pools)})")
        c = float(c)
        if not (math.isfinite(c) and c >= 0):
            raise ValueError(f"cost of {p} must be a finite number >= 0 (got {c!r})")
        out[p] = c
    return out


def _groups(scenario: Scenario):
    """(node, outputs, π) for every marking constraint of the plan: a job place constrains each
    output on its own with its routing share; a pool constrains all its outputs together (its
    agents are shared: Σ a z_q ≤ M + returns), since with a priority or not every output must get
    its inflow-driven rate."""
    for p in (*scenario.places, *scenario.pools):
        outs = scenario.outputs_of(p)
        if not outs:
            continue
        if scenario.is_pool(p):
            yield p, outs, 1.0
        else:
            for q in outs:
                yield p, (q,), unlimited_share(scenario, p, q)


def _check_flows(scenario: Scenario, rates: dict, lam: dict) -> None:
    """The inflow-driven rates must balance every place and pool (a pool that leaks agents
    cannot carry them with any staff)."""
    net = scenario.transitions
    for p, outs, pi in _groups(scenario):
        fed = inflow(scenario, p, rates, lam)
        need = sum(float(net[q].inputs[p]) * rates[q] for q in outs)
        if need > pi * fed * (1 + 1e-9) + 1e-12:
            raise ValueError(
                f"{scenario.file}: {p} cannot supply {', '.join(outs)} at the inflow-driven "
                f"rates with any staff (tokens leak from {p}): no fluid plan exists")


def fluid_plan(scenario: Scenario, *, costs: Mapping[str, float] | None = None) -> FluidPlan:
    """Cheapest whole-agent staffing (Σ cost × staff; ``costs``: pool -> cost per agent, default
    1) at which every transition reaches its inflow-driven fluid rate (per the scenario's time
    unit). Pools with cost 0 get the fewest agents that still allow the cheapest cost.

    Raises ValueError when jobs can never end somewhere (unbounded inflow) or a pool leaks agents,
    and :class:`~fluid.errors.SolverError` when HiGHS fails or its plan fails the LP re-check."""
    trapped = places_without_exit(scenario)
    if trapped:
        raise ValueError(f"jobs in {', '.join(trapped)} can never end: the inflow-driven rates "
                         "are unbounded and no staffing carries them")
    costs = _costs(scenario, costs)
    h = scenario.run.horizon
    rates, _ = offered_rates(scenario, h)
    lam = {s: src.arrivals.mean_rate(h) for s, src in scenario.sources.items()}
    _check_flows(scenario, rates, lam)

    pools, trans, srcs = list(scenario.pools), list(scenario.transitions), list(scenario.sources)
    col = {p: i for i, p in enumerate(pools)}
    col |= {q: len(pools) + i for i, q in enumerate(trans)}
    col |= {s: len(pools) + len(trans) + i for i, s in enumerate(srcs)}
    n = len(col)
    rows, rhs = [], []
    net = scenario.transitions
    for p, outs, pi in _groups(scenario):
        tau = 0.0 if scenario.is_pool(p) else scenario.places[p].hold_mean
        row = np.zeros(n)
        for q in outs:
            row[col[q]] += float(net[q].inputs[p])
        delayed = 0.0  # Σ b ρ* over the feeders of p
        for c in scenario.inputs_of(p):
            b = float(net[c].outputs[p])
            row[col[c]] -= pi * b
            delayed += b * rates[c]
        for s in scenario.sources_into(p):
            row[col[s]] -= pi
            delayed += lam[s]
        if scenario.is_pool(p):
            row[col[p]] -= pi
        rows.append(row)
        rhs.append(-pi * tau * delayed)
    cost = np.array([costs[p] for p in pools] + [0.0] * (len(trans) + len(srcs)))
    integrality = np.array([1] * len(pools) + [0] * (len(trans) + len(srcs)))
    lower = np.array([0.0] * len(pools) + [-np.inf] * (len(trans) + len(srcs)))
    upper = np.array([np.inf] * (len(pools) + len(trans)) + [0.0] * len(srcs))
    from scipy.optimize import LinearConstraint  # (here: importing scipy.optimize is slow)

    constraints = [LinearConstraint(np.array(rows), -np.inf, np.array(rhs))] if rows else []
    res = _solve(cost, integrality, lower, upper, constraints, scenario)
    if any(c == 0 for c in costs.values()) and len(pools):
        # among the cheapest plans, the one with fewest agents (pools that cost nothing would
        # otherwise take whatever the solver happens to return)
        best = float(res.fun)
        limit = LinearConstraint(cost[None, :], -np.inf, best + 1e-9 * max(1.0, abs(best)))
        ones = np.array([1.0] * len(pools) + [0.0] * (len(trans) + len(srcs)))
        res = _solve(ones, integrality, lower, upper, constraints + [limit], scenario)
    staff = {p: int(round(res.x[col[p]])) for p in pools}

    notes = []
    if scenario.has_priorities:
        notes.append("priorities do not enter the fluid plan: a pool's outputs share its agents "
                     "and each must reach its inflow-driven rate anyway; at a job place with a "
                     "priority every job goes to its highest-priority output (re-checked with the "
                     "counter equations where a pool has a priority)")
    if any(not s.arrivals.is_constant for s in scenario.sources.values()):
        notes.append(f"arrival profiles and traces count at their mean rate over the horizon "
                     f"({h:g} {scenario.time_unit}); staffing per interval is not done")
    if any(p.schedule is not None for p in scenario.pools.values()):
        notes.append("a pool's schedule is replaced by one staff level for the whole horizon")
    recheck = _recheck(scenario, staff, rates, lam)
    return FluidPlan(
        scenario_name=scenario.name, time_unit=scenario.time_unit, staff=staff,
        cost=float(sum(costs[p] * staff[p] for p in pools)), costs=costs,
        work=offered_work(scenario, h), rates=dict(rates),
        scenario_staff={p: pool.mean_staff(h) for p, pool in scenario.pools.items()},
        recheck=recheck, notes=tuple(notes),
    )


def _solve(cost, integrality, lower, upper, constraints, scenario):
    from scipy.optimize import Bounds, milp

    res = milp(cost, integrality=integrality, bounds=Bounds(lower, upper),
               constraints=constraints, options={"mip_rel_gap": 0.0})
    if res.status != 0 or res.x is None:
        raise SolverError(f"{scenario.file}: fluid staffing MILP: HiGHS status {res.status}: "
                          f"{res.message}")
    return res


def _recheck(scenario: Scenario, staff: dict, rates: dict, lam: dict) -> float:
    """Fluid rates at the plan's staff (mean arrival rates; see :func:`plan_view`), from the
    throughput LP, or from the counter equations when a pool has a priority (the LP does not
    hold there); return the worst relative shortfall of a rate below its inflow-driven value and
    raise when it exceeds the tolerance."""
    view = plan_view(scenario)
    # (the view has constant rates and no priorities at job places: a pool's priority is what
    # keeps the LP from applying)
    if not lp_applies(view, constant_staff=True):
        got, tolerance = integrate_counters(view, staff=staff).rates, COUNTER_TOLERANCE
    else:
        got, tolerance = throughput_lp(view, staff=staff).rates, RECHECK_TOLERANCE
    top = max([*rates.values(), 1e-300])
    worst = max((max(0.0, r - got[q]) / max(r, 1e-6 * top) for q, r in rates.items() if r > 0),
                default=0.0)
    if worst > tolerance:
        raise SolverError(f"{scenario.file}: fluid staffing: the plan {staff} leaves a rate "
                          f"{worst:.3g} (relative) below its inflow-driven value")
    return float(worst)
