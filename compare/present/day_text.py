"""The per-interval table in the terminal: one line per interval, clock time first.

Reads the wide table of :func:`compare.study.day_table.day_table`; every simulated figure is
printed as ``mean [low, high]`` (3 significant digits), with ``(n=k)`` where fewer replications
than the run's measured it. The full table, with every figure's fluid value, goes to the report
(``per_interval_day.csv``).
"""

from __future__ import annotations

import math

from fluid.clock import axis_label, clock_range
from fluid.scenario import Scenario

from .tables import fmt, format_table

__all__ = ["day_text", "estimate_cell", "schedule_rows", "schedule_text"]


def estimate_cell(row: dict, key: str, reps: int) -> str:
    """``mean [low, high]`` of the figure ``key`` of one wide-table row ("-" when unmeasured)."""
    mean = row.get(key, math.nan)
    if not isinstance(mean, (int, float)) or math.isnan(mean):
        return "-"
    low, high = row.get(f"{key}.low", math.nan), row.get(f"{key}.high", math.nan)
    text = (f"{fmt(mean, 3)} [no interval]" if math.isnan(low) or math.isnan(high)
            else f"{fmt(mean, 3)} [{fmt(low, 3)}, {fmt(high, 3)}]")
    n = row.get(f"{key}.n")
    return text if n is None or int(n) >= reps else f"{text} (n={int(n)})"


def _columns(s: Scenario, day) -> list[tuple[str, str, bool]]:
    """(header, key, simulated) for each printed column, when the table holds it."""
    unit = s.time_unit
    cols = [("arrivals", "arrivals", True), ("fluid", "arrivals.fluid", False)]
    for r in s.pools:
        cols += [(f"staff {r}", f"scheduled.{r}", False), (f"on duty {r}", f"staff.{r}", True),
                 (f"offered {r}", f"offered.{r}", False),
                 (f"occupancy {r}", f"occupancy.{r}", True)]
    for p, target in s.targets.service.items():
        cols += [(f"SL {p} (goal {fmt(target.goal, 3)})", f"service_level.{p}", True),
                 ("fluid", f"service_level.{p}.fluid", False)]
    cols.append(("abandonment", "abandonment", True))
    waits = [c.removeprefix("wait.") for c in day.columns
             if c.startswith("wait.") and c.count(".") == 1]
    cols += [(f"wait {p} ({unit})", f"wait.{p}", True) for p in waits]
    return [c for c in cols if c[1] in day.columns]


def day_text(s: Scenario, day, reps: int, report: bool = True) -> str:
    """The wide per-interval table ``day`` as text, with a title saying what each column is;
    ``reps``: the run's replications (fewer are marked ``n=``); ``report``: whether the title
    points to the report's CSV (``compare --report``)."""
    cols = _columns(s, day)
    rows = []
    for row in day.to_dict("records"):
        cells = [row["clock"]]
        for _, key, simulated in cols:
            cells.append(estimate_cell(row, key, reps) if simulated else fmt(row[key], 3))
        rows.append(cells)
    title = (f"per interval ({_times(s)}): simulated figures are mean [95 % interval] over "
             f"{reps} replications, by the interval the jobs arrived in; staff: scheduled; "
             "offered: fluid offered load in agents at the interval's arrival rates; "
             "occupancy: busy share of the agents on duty; SL: service level"
             + ("; every figure with its fluid value in the report's per_interval_day.csv:"
                if report else ":"))
    return format_table(["interval", *(c[0] for c in cols)], rows, title=_wrap(title))


def _times(s: Scenario) -> str:
    """"clock times, time 0 = 08:00", or "times in min" without a clock."""
    label = axis_label(s)
    if label.startswith("time ("):
        return f"times in {s.time_unit}"
    return f"clock times, {label.split('(')[1][:-1]}"


def _wrap(text: str) -> str:
    import textwrap

    return textwrap.fill(text, width=100, subsequent_indent="  ")


def schedule_rows(s: Scenario, horizon: float | None = None) -> list[dict]:
    """Per interval of the shortest profile or schedule step over ``horizon`` (default the run
    horizon; time units): ``{"interval", "start", "end", "clock", "staff": {pool: scheduled},
    "offered": {pool: fluid offered load in agents}}``, for ``fluid`` and its JSON."""
    from ..study.day_table import IntervalLoads, scheduled_staff
    from ..study.transient import default_interval

    h = s.run.horizon if horizon is None else horizon
    step = default_interval(s, h)
    rows, i, loads = [], 0, IntervalLoads(s)
    while i * step < h * (1 - 1e-12):
        start, end = i * step, min((i + 1) * step, h)
        offered = loads.work(start, end)
        rows.append({"interval": i, "start": start, "end": end,
                     "clock": clock_range(s, start, end),
                     "staff": {r: scheduled_staff(p, start, end) for r, p in s.pools.items()},
                     "offered": {r: offered[r] for r in s.pools}})
        i += 1
    return rows


def schedule_text(s: Scenario, horizon: float | None = None) -> str:
    """The schedules interval by interval (clock times) beside the fluid offered load, with the
    line saying that the staff and load figures above use one constant level."""
    rows = schedule_rows(s, horizon)
    heads = ["interval"]
    for r in s.pools:
        heads += [f"staff {r}", f"offered {r}"]
    table = [[row["clock"], *(fmt(row[k][r], 3) for r in s.pools for k in ("staff", "offered"))]
             for row in rows]
    scheduled = [r for r, p in s.pools.items() if p.schedule is not None]
    note = (f"the staff, load and offered load above replace the schedule of "
            f"{', '.join(scheduled)} by one constant level, its mean over the horizon; the fluid "
            "trajectory (rates, waiting places) follows the schedule interval by interval")
    return "\n".join([format_table(heads, table, title=_wrap(
        f"schedule per interval ({_times(s)}): staff scheduled; offered: fluid offered load "
        "in agents at the interval's arrival rates:")), _wrap("note: " + note)])
