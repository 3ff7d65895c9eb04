"""What ``fluidgap simulate --report DIR`` and ``--csv DIR`` write: the simulation's tidy tables
(:mod:`compare.present.tidy`), and for the report the figures that make sense without a fluid
side (the waiting-time distributions, the per-interval means with their bands)."""

from __future__ import annotations

from .figures import transient_figure
from .html import ReportFiles, write_report
from .reports import simulation_waits_figure
from .tidy import estimates_table, per_replication_table, table_files, write_tables

__all__ = ["simulation_tables", "simulation_report", "simulation_csv"]


def simulation_tables(sim, scenario, *, per_replication: bool = False) -> dict:
    """``{"estimates": table}`` and, with ``per_replication``, ``"per_replication"`` too."""
    tables = {"estimates": estimates_table(sim, scenario)}
    if per_replication:
        tables["per_replication"] = per_replication_table(sim, scenario)
    return tables


def simulation_csv(directory, sim, scenario, *, json_doc: dict, per_replication: bool = False):
    """Write the tables (CSV, and Parquet with pyarrow) and ``result.json`` into ``directory``,
    swapped in whole; returns the files written."""
    return write_tables(directory, simulation_tables(sim, scenario,
                                                     per_replication=per_replication), json_doc)


def simulation_report(directory, sim, scenario, *, json_doc: dict, caution: str,
                      summary: list[str], per_replication: bool = False) -> ReportFiles:
    """The report of a simulation: the estimates table (``per_replication``: the
    per-replication table beside it, as files only), the waits figure (when the runs kept
    their waits) and, with intervals, the per-interval simulated means in their 95 % bands."""
    figures = {}
    waits = simulation_waits_figure(sim, scenario)
    if waits is not None:
        figures["waits"] = waits
    if sim.intervals is not None and len(sim.intervals):
        figures["per_interval"] = transient_figure(
            sim.intervals, scenario.time_unit, title="Interval by interval: simulated means",
            warmup=sim.warmup or None)
    tables = simulation_tables(sim, scenario, per_replication=per_replication)
    # (the page shows the estimates; the per-replication values, one row per replication and
    # figure, go beside it as files only)
    shown = {"estimates": tables.pop("estimates")}
    extra = [(n, b) for n, b in table_files(shown) if n.endswith(".parquet")]
    extra += table_files(tables)
    return write_report(directory, title=f"fluidgap simulate: {scenario.name}",
                        summary_lines=summary, tables=shown, figures=figures,
                        json_doc=json_doc, caution=caution, extra_files=extra)
