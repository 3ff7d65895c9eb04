"""What goes into the ``--report DIR`` of each command: the figures, the tables and the JSON.

Each builder turns one result object into the arguments of :func:`compare.report.write_report`.
"""

from __future__ import annotations

import math
from typing import Any

from ..study.gap import GAP_CONVENTION
from fluid.clock import axis_label, clock_label

from ..study.day_table import day_table
from .day_figure import day_figure
from .figures import pooled_waits, rates_figure, scale_figure, transient_figure, waits_figure
from .html import ReportFiles, write_report

__all__ = ["comparison_report", "station_report", "scale_report", "phases_report",
           "staffing_report", "simulation_waits_figure"]


def simulation_waits_figure(sim, scenario) -> Any | None:
    """Waiting-time distributions of the places where somebody waited (None if nobody did or the
    runs kept no waits)."""
    if not sim.runs or sim.runs[0].waits is None:
        return None
    waits = pooled_waits(sim.runs)
    if not waits:
        return None
    targets = {p: t.within for p, t in scenario.targets.service.items()}
    return waits_figure(waits, scenario.time_unit, targets)


def service_waits(sim, scenario) -> Any | None:
    """The served jobs' waits and the abandoners' times apart, per place with a service target
    (None without targets or recorded waits); see :mod:`compare.present.wait_figure`."""
    if not scenario.targets.service or not sim.runs or sim.runs[0].waits is None:
        return None
    from .wait_figure import pooled_outcome_waits, service_waits_figure

    waits = pooled_outcome_waits(sim.runs, scenario.targets.service)
    return service_waits_figure(waits, scenario.targets.service, scenario.time_unit)


def comparison_report(directory, comparison, scenario, *, caution: str,
                      summary: list[str]) -> ReportFiles:
    sim, fl = comparison.simulation, comparison.fluid
    figures = {"rates": rates_figure(fl.rates, {t: v["rate"] for t, v in sim.transitions.items()},
                                     scenario.time_unit)}
    waits = simulation_waits_figure(sim, scenario)
    if waits is not None:
        figures["waits"] = waits
    served = service_waits(sim, scenario)
    if served is not None:
        figures["service_waits"] = served
    tables = {
        "flags": comparison.flags_frame(),
        "transition_gaps": comparison.gaps.transitions,
        "place_gaps": comparison.gaps.places,
        "pool_gaps": comparison.gaps.pools,
        "totals": comparison.gaps.totals,
    }
    if comparison.transient is not None and len(comparison.transient):
        day = day_table(scenario, comparison.transient)
        figures["day"] = day_figure(scenario, day)
        goals = {p: t.goal for p, t in scenario.targets.service.items()}
        figures["transient"] = transient_figure(
            comparison.transient, scenario.time_unit, warmup=comparison.settings.warmup or None,
            goals=goals, clock=lambda t: clock_label(scenario, t), xlabel=axis_label(scenario),
            scenario=scenario)
        tables["per_interval_day"] = day  # one row per interval (compare.study.day_table)
        tables["per_interval"] = comparison.transient  # the tidy table, as before
    return write_report(directory, title=f"fluidgap compare: {scenario.name}",
                        summary_lines=[*summary, GAP_CONVENTION], tables=tables,
                        figures=figures, json_doc=comparison.to_json(), caution=caution)


def station_report(directory, station, *, caution: str, summary: list[str]) -> ReportFiles:
    figures = {}
    waits = simulation_waits_figure(station.simulation, station.scenario)
    if waits is not None:
        figures["waits"] = waits
    served = service_waits(station.simulation, station.scenario)
    if served is not None:
        figures["service_waits"] = served
    return write_report(directory, title="fluidgap station: self-check against the classical "
                        "formulas", summary_lines=summary, tables={"checks": station.to_frame()},
                        figures=figures, json_doc=station.to_json(), caution=caution)


def scale_report(directory, result, *, caution: str, summary: list[str]) -> ReportFiles:
    long = scale_long_table(result)
    fits = {m: {"exponent": f.exponent, "coefficient": math.exp(f.intercept)}
            for m, f in result.fits.items() if math.isfinite(f.exponent)}
    figures = {"scale": scale_figure(long, fits)}
    return write_report(directory, title=f"fluidgap scale: {result.scenario_name}",
                        summary_lines=summary,
                        tables={"scale": result.table, "fits": result.fits_frame()},
                        figures=figures, json_doc=result.to_json(), caution=caution)


def scale_long_table(result):
    """The scale table in the long form the scale figure reads: factor, measure, gap, low, high."""
    import pandas as pd

    rows = []
    for rec in result.table.to_dict("records"):
        for metric in result.fits:
            rows.append({"factor": rec["factor"], "measure": metric, "gap": rec[metric],
                         "low": rec.get(f"{metric}_low"), "high": rec.get(f"{metric}_high")})
    return pd.DataFrame(rows, columns=["factor", "measure", "gap", "low", "high"])


def phases_report(directory, diagram, overlay, figure, *, json_doc: dict, caution: str,
                  title: str, summary: list[str]) -> ReportFiles:
    """The report of a phase diagram: its pieces (or grid), the simulated overlay if any, the
    figure (also as PNG)."""
    tables = {"pieces" if diagram.pieces else "grid": diagram.wide_frame()}
    if overlay is not None:
        tables["overlay"] = overlay
    return write_report(directory, title=title, summary_lines=summary, tables=tables,
                        figures={"phases": figure}, json_doc=json_doc, caution=caution,
                        write_png=True)


def staffing_report(directory, result, figure, *, json_doc: dict, caution: str, title: str,
                    summary: list[str]) -> ReportFiles:
    """The report of a staffing search: the plans tried, the fluid plan per pool, the figure
    (also as PNG)."""
    pools = result.fluid_plan.wide_frame().rename(columns={"staff": "fluid_plan"})
    pools["plan"] = [result.plan[p] for p in pools["pool"]]
    tables = {"fluid_plan": pools}
    if result.tried:
        tables = {"plans": result.plans_table()} | tables
    return write_report(directory, title=title, summary_lines=summary, tables=tables,
                        figures={"staffing": figure}, json_doc=json_doc, caution=caution,
                        write_png=True)
