"""Gap tables: the fluid prediction set against the simulated estimate, figure by figure.

Three tables (tidy pandas frames) and two totals, all rates per the scenario's time unit and all
times in it:

* per transition: fluid rate vs simulated rate (mean, 95 % interval, replications);
* per waiting place (:func:`fluid.structure.waiting_places`): fluid vs simulated ``wait`` (mean
  over all jobs leaving the place, served or abandoning), ``abandoned`` (share), ``queue``
  (time-average number waiting) and ``served_within`` (share taken within the target's
  ``within``; places with a target only);
* per pool: fluid load and fluid busy fraction (both the work at the fluid rates / staff: what
  the fluid routes through the pool, overflow included), the offered load (the arrivals' work
  with every pool unlimited / staff, may exceed 1) vs simulated busy fraction;
* totals: output rate (the transitions that end jobs) and overall abandonment (abandoned /
  ended, per replication from the source totals: :meth:`desim.SimulationResult.
  overall_abandonment`).

Every row carries ``gap = simulated mean − fluid``, ``rel_gap = gap / |fluid|`` and
``gap_kind`` under the one convention of :mod:`compare.study.gap`: a negative throughput gap
means the simulation serves less than the fluid model promises; where the fluid value is near
zero (at most 1 % of the larger of the two values) ``rel_gap`` is nan and ``gap_kind`` is
"absolute" (read ``gap``).

The fluid figures of a waiting place come with the fluid answer itself
(:attr:`fluid.analysis.FluidResult.places`, :class:`fluid.places.FluidPlace`): in steady state
one place at a time as in Whitt (2006) at the fluid rates, or from the fluid dynamics with
abandonment (time-varying nets over the statistics window, nets whose abandoned jobs come back,
nets with priorities); the fluid model is named in ``FluidResult.model``. ``served_within`` is
the share of the jobs becoming available that are taken within the target, abandoners counted
by the target's convention (``convention`` in the JSON says which, in words).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from desim import Estimate, SimulationResult
from desim.estimate import NON_NEGATIVE
from fluid.analysis import FluidResult
from fluid.json_values import json_number
from fluid.offered import pool_work
from fluid.places import PLACE_TOLERANCE, FluidPlace, stationary_place
from fluid.scenario import Scenario
from fluid.structure import inflow, output_transitions, waiting_places

from .gap import gap_between


__all__ = [
    "PLACE_TOLERANCE",
    "FluidPlace",
    "Gaps",
    "fluid_busy",
    "fluid_place",
    "fluid_places",
    "fluid_abandonment",
    "gap_tables",
    "simulated_output",
]

ROW_COLUMNS = ["fluid", "mean", "low", "high", "n", "gap", "rel_gap"]
TABLE_COLUMNS = [*ROW_COLUMNS, "gap_kind"]  # the tables (and their CSV) also say which gap to read


num = json_number  # a JSON-ready number: nan and inf become None


def _row(fluid: float, est: Estimate) -> list:
    g = gap_between(fluid, est.mean)
    return [fluid, est.mean, est.low, est.high, est.n, g.absolute, g.relative, g.kind]


def _row_json(fluid: float, est: Estimate) -> dict:
    g = gap_between(fluid, est.mean)
    return {"fluid": num(fluid), "simulation": est.to_json(), "gap": num(g.absolute),
            "rel_gap": num(g.relative), "gap_kind": g.kind}


# --- fluid figures per place and pool ------------------------------------------------------------


def fluid_place(scenario: Scenario, fluid: FluidResult, place: str) -> FluidPlace:
    """Fluid figures of ``place`` (from ``fluid.places``; computed here for a result that has
    none, e.g. one built by hand)."""
    if place in fluid.places:
        return fluid.places[place]
    return stationary_place(scenario, fluid.rates, fluid.source_rates, place)


def fluid_places(scenario: Scenario, fluid: FluidResult) -> dict[str, FluidPlace]:
    """:func:`fluid_place` of every waiting place (:func:`fluid.structure.waiting_places`)."""
    return {p: fluid_place(scenario, fluid, p) for p in waiting_places(scenario)}


def fluid_busy(scenario: Scenario, fluid: FluidResult) -> dict[str, float]:
    """Fluid busy fraction per pool: agents held at the fluid rates (:func:`fluid.offered.
    pool_work` at the places' inflows at those rates) over staff; nan for a pool on no
    invariant or without staff."""
    work = pool_work(scenario, {p: inflow(scenario, p, fluid.rates, fluid.source_rates)
                                for p in scenario.places})
    out = {}
    for r in scenario.pools:
        staff = fluid.staff.get(r, 0.0)
        out[r] = math.nan if math.isnan(work[r]) or staff <= 0 else work[r] / staff
    return out


def fluid_abandonment(scenario: Scenario, places: dict[str, FluidPlace],
                      fluid: FluidResult) -> float:
    """Overall fluid abandonment: jobs abandoning per time unit (at places without
    ``abandon_to``) over jobs arriving per time unit."""
    arrivals = sum(fluid.source_rates.values())
    if arrivals <= 0:
        return math.nan
    lost = sum(fp.inflow * fp.abandoned for p, fp in places.items()
               if scenario.places[p].abandon_to is None)
    return lost / arrivals


# --- simulated totals -----------------------------------------------------------------------------


def simulated_output(scenario: Scenario, sim: SimulationResult) -> Estimate:
    """Total rate of the transitions that end jobs, per replication, as an estimate (a rate:
    its interval is cut at 0)."""
    per_rep = np.sum([sim.raw("transition", q, "rate") for q in output_transitions(scenario)],
                     axis=0)
    return Estimate.from_values(per_rep, bounds=NON_NEGATIVE)


# --- the tables ----------------------------------------------------------------------------------


@dataclass(frozen=True)
class Gaps:
    """Gap tables of one comparison (see the module docstring).

    ``transitions``: columns transition, fluid, mean, low, high, n, gap, rel_gap, gap_kind;
    ``places``: place, metric, state, fluid, mean, low, high, n, gap, rel_gap, gap_kind;
    ``pools``: pool, staff, load (fluid-rate work / staff), offered_load (inflow-driven work with
    every pool unlimited / staff), fluid (busy at the fluid rates), mean, low, high, n, gap,
    rel_gap, gap_kind; ``totals``: metric (output_rate, abandonment), fluid, mean, low, high, n,
    gap, rel_gap, gap_kind (gaps: :data:`compare.study.gap.GAP_CONVENTION`). ``fluid_places``:
    the :class:`FluidPlace` of every waiting place; ``estimates``: the totals' simulated
    :class:`~desim.Estimate` by metric."""

    time_unit: str
    transitions: pd.DataFrame
    places: pd.DataFrame
    pools: pd.DataFrame
    totals: pd.DataFrame
    fluid_places: dict = field(default_factory=dict)
    estimates: dict = field(default_factory=dict)

    def to_frame(self) -> pd.DataFrame:
        """All rows in one tidy table: kind, name, metric, fluid, mean, low, high, n, gap,
        rel_gap."""
        cols = ["kind", "name", "metric", *ROW_COLUMNS]
        parts = [
            self.transitions.rename(columns={"transition": "name"}).assign(kind="transition",
                                                                           metric="rate"),
            self.places.rename(columns={"place": "name"}).assign(kind="place"),
            self.pools.rename(columns={"pool": "name"}).assign(kind="pool", metric="busy"),
            self.totals.rename(columns={"metric": "name"}).assign(kind="total",
                                                                  metric=lambda d: d["name"]),
        ]
        return pd.concat([p[cols] for p in parts if len(p)], ignore_index=True)

    def to_json(self) -> dict:
        """``{"transitions": {t: row}, "places": {p: {state, inflow, capacity, wait_served,
        metric: row}}, "pools": {r: {staff, load, offered_load, busy: row}}, "totals": {metric: row}}`` with
        row = ``{"fluid", "simulation": estimate, "gap", "rel_gap", "gap_kind"}``(the sign convention:
        :data:`compare.study.gap.GAP_CONVENTION`)."""

        def est(r) -> Estimate:
            return Estimate(float(r.mean), float(r.low), float(r.high), int(r.n))

        transitions = {r.transition: _row_json(r.fluid, est(r))
                       for r in self.transitions.itertuples(index=False)}
        places: dict = {p: {k: v for k, v in fp.to_json().items()
                            if k in ("state", "inflow", "capacity", "wait_served", "within")
                            or (k == "convention" and v is not None)}
                        for p, fp in self.fluid_places.items()}
        for r in self.places.itertuples(index=False):
            places.setdefault(r.place, {})[r.metric] = _row_json(r.fluid, est(r))
        pools = {r.pool: {"staff": num(r.staff), "load": num(r.load),
                          "offered_load": num(r.offered_load), "busy": _row_json(r.fluid, est(r))}
                 for r in self.pools.itertuples(index=False)}
        totals = {r.metric: _row_json(r.fluid, est(r)) for r in self.totals.itertuples(index=False)}
        return {"transitions": transitions, "places": places, "pools": pools, "totals": totals}


def gap_tables(scenario: Scenario, fluid: FluidResult, sim: SimulationResult) -> Gaps:
    """Build the gap tables of ``scenario`` from its fluid answer and its simulation."""
    trans = [[q, *_row(fluid.rates[q], sim.transitions[q]["rate"])] for q in scenario.transitions]
    places_fluid = fluid_places(scenario, fluid)
    place_rows = []
    for p, fp in places_fluid.items():
        sim_p = sim.places[p]
        values = {"wait": fp.wait, "abandoned": fp.abandoned, "queue": fp.queue}
        if fp.served_within is not None and "served_within" in sim_p:
            values["served_within"] = fp.served_within
        for metric, value in values.items():
            place_rows.append([p, metric, fp.state, *_row(value, sim_p[metric])])
    busy = fluid_busy(scenario, fluid)
    pool_rows = [[r, fluid.staff.get(r, math.nan), fluid.load.get(r, math.nan),
                  fluid.offered_load.get(r, math.nan), *_row(busy[r], sim.pools[r]["busy"])]
                 for r in scenario.pools]
    output = simulated_output(scenario, sim)
    abandonment = sim.overall_abandonment()
    totals = [["output_rate", *_row(fluid.output_rate, output)],
              ["abandonment", *_row(fluid_abandonment(scenario, places_fluid, fluid),
                                    abandonment)]]
    return Gaps(
        time_unit=scenario.time_unit,
        transitions=pd.DataFrame(trans, columns=["transition", *TABLE_COLUMNS]),
        places=pd.DataFrame(place_rows, columns=["place", "metric", "state", *TABLE_COLUMNS]),
        pools=pd.DataFrame(pool_rows, columns=["pool", "staff", "load", "offered_load",
                                                 *TABLE_COLUMNS]),
        totals=pd.DataFrame(totals, columns=["metric", *TABLE_COLUMNS]),
        fluid_places=places_fluid,
        estimates={"output_rate": output, "abandonment": abandonment},
    )
