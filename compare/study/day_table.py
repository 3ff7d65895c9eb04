"""The day as analysts read it: one row per interval, the figures of that interval side by side.

:func:`day_table` turns the comparison's tidy per-interval table (:mod:`compare.study.transient`:
one row per interval, metric and name, with the simulated ``mean``/``low``/``high``/``n`` and the
``fluid`` value) into a wide table, one row per interval:

* ``interval``, ``start``, ``end`` (scenario time unit) and ``clock`` (``"08:00-08:30"`` with
  ``run.start``, else ``"0-30"``: :func:`fluid.clock.clock_range`);
* ``arrivals``: jobs arriving in the interval;
* per pool ``r``: ``scheduled.r``, the scheduled staff (time average over the interval, from the
  scenario); ``staff.r``, the simulated agents on duty (metric ``staff``, when present);
  ``offered.r``, the fluid offered load in agents (:func:`fluid.offered.pool_work` at the
  interval's mean arrival rates, every pool unlimited); ``occupancy.r``, the simulated busy
  share of the agents on duty (metric ``busy``);
* per service target ``p``: ``service_level.p`` (metric ``service_level``);
* ``abandonment``: the share of the interval's callers who ended unserved (metric
  ``abandonment``);
* per waiting place ``p``: ``wait.p``, the mean wait (metric ``wait``).

Each simulated figure ``K`` comes with ``K.low``, ``K.high`` (its 95 % interval over
replications) and ``K.n`` (replications that measured it), and ``K.fluid`` where the fluid model
gives the figure. A metric the per-interval table does not hold (older runs) is left out.
"""

from __future__ import annotations

import math

import pandas as pd

from fluid.clock import clock_range
from fluid.offered import offered_rates, pool_work
from fluid.scenario import Scenario
from fluid.structure import waiting_places

__all__ = ["DAY_FIGURES", "IntervalLoads", "day_table", "interval_arrival_rates",
           "scheduled_staff"]

#: (metric of the tidy table, column prefix of the wide one), in the order of the columns.
DAY_FIGURES = (("arrivals", "arrivals"), ("staff", "staff"), ("busy", "occupancy"),
               ("service_level", "service_level"), ("abandonment", "abandonment"),
               ("wait", "wait"))


def scheduled_staff(pool, start: float, end: float) -> float:
    """Time-average scheduled staff of ``pool`` over ``[start, end)`` (time units)."""
    if pool.schedule is None or not end > start:
        return float(pool.staff_at(start))
    step, staff = pool.schedule.step, pool.schedule.staff
    total, i = 0.0, max(int(start // step), 0)
    while True:
        # staff[i] holds on [i·step, (i+1)·step); the last value holds after the schedule's end
        last = i >= len(staff) - 1
        lo, hi = max(start, i * step), end if last else min(end, (i + 1) * step)
        total += staff[min(i, len(staff) - 1)] * max(hi - lo, 0.0)
        if last or hi >= end:
            break
        i += 1
    return total / (end - start)


def interval_arrival_rates(scenario: Scenario, start: float, end: float) -> dict[str, float]:
    """Source -> mean arrival rate over ``[start, end]`` (per time unit)."""
    span = end - start
    return {n: (s.arrivals.cumulative(end) - s.arrivals.cumulative(start)) / span
            for n, s in scenario.sources.items()}


class IntervalLoads:
    """The fluid offered figures of any interval of one scenario: the offered inflows and work
    are linear in the arrival rates (:mod:`fluid.offered`: the flow balance x = λ + Pᵀx), so
    the response to one unit of rate of each source is computed once and each interval is a
    weighted sum of those, at its sources' mean rates. A place whose jobs never end has an
    unbounded inflow (inf) once any source that reaches it arrives; 0 × inf counts as 0."""

    def __init__(self, scenario: Scenario):
        self.scenario = scenario
        names = list(scenario.sources)
        self._inflow, self._work = {}, {}
        for n in names:
            unit = {m: float(m == n) for m in names}
            inflow = offered_rates(scenario, arrival_rates=unit)[1]
            self._inflow[n] = inflow
            self._work[n] = pool_work(scenario, inflow)

    @staticmethod
    def _sum(rates: dict[str, float], unit: dict[str, dict[str, float]], keys) -> dict:
        out = {}
        for k in keys:
            total = 0.0
            for n, rate in rates.items():
                value = unit[n][k]
                if math.isnan(value):
                    total = math.nan
                    break
                if rate != 0 and value != 0:
                    total += rate * value
            out[k] = total
        return out

    def inflow(self, start: float, end: float) -> dict[str, float]:
        """Place -> offered inflow (jobs per time unit) at the mean rates of ``[start, end]``."""
        rates = interval_arrival_rates(self.scenario, start, end)
        return self._sum(rates, self._inflow, self.scenario.places)

    def work(self, start: float, end: float) -> dict[str, float]:
        """Pool -> fluid offered load (agents busy, every pool unlimited) at the mean arrival
        rates of ``[start, end]`` (:func:`fluid.offered.pool_work`)."""
        rates = interval_arrival_rates(self.scenario, start, end)
        return self._sum(rates, self._work, self.scenario.pools)


def _names(scenario: Scenario, metric: str) -> list[str]:
    if metric in ("arrivals", "abandonment"):
        return [""]
    if metric in ("staff", "busy"):
        return list(scenario.pools)
    if metric == "service_level":
        return list(scenario.targets.service)
    return list(waiting_places(scenario))


def day_table(scenario: Scenario, transient: pd.DataFrame) -> pd.DataFrame:
    """The wide per-interval table of ``transient`` (the tidy table of
    :func:`compare.study.transient.transient_table`; a table without a ``fluid`` column is read
    as having no fluid values). Columns as in the module's docstring; rows in interval order."""
    if transient is None or len(transient) == 0:
        return pd.DataFrame(columns=["interval", "start", "end", "clock"])
    t = transient.copy()
    t["name"] = t["name"].fillna("").astype(str)
    spans = (t[["interval", "start", "end"]].drop_duplicates("interval")
             .sort_values("interval").reset_index(drop=True))
    rows = {int(r.interval): {"interval": int(r.interval), "start": float(r.start),
                              "end": float(r.end),
                              "clock": clock_range(scenario, float(r.start), float(r.end))}
            for r in spans.itertuples(index=False)}
    cells = {(int(r.interval), r.metric, r.name): r for r in t.itertuples(index=False)}
    present = set(zip(t["metric"], t["name"]))
    has_fluid = "fluid" in t.columns
    loads = IntervalLoads(scenario)
    for i, row in rows.items():
        offered = loads.work(row["start"], row["end"])
        for r, pool in scenario.pools.items():
            row[f"scheduled.{r}"] = scheduled_staff(pool, row["start"], row["end"])
            row[f"offered.{r}"] = offered[r]
        for metric, prefix in DAY_FIGURES:
            for name in _names(scenario, metric):
                if (metric, name) not in present:
                    continue
                key = f"{prefix}.{name}" if name else prefix
                cell = cells.get((i, metric, name))
                value = (lambda col: float(getattr(cell, col)) if cell is not None
                         else math.nan)
                row[key] = value("mean")
                row[f"{key}.low"] = value("low")
                row[f"{key}.high"] = value("high")
                row[f"{key}.n"] = int(cell.n) if cell is not None else 0
                if has_fluid:
                    row[f"{key}.fluid"] = value("fluid")
    frame = pd.DataFrame(list(rows.values()))
    # a fluid column with no value anywhere says nothing: leave it out
    empty = [c for c in frame.columns if c.endswith(".fluid") and not frame[c].notna().any()]
    return frame.drop(columns=empty)
