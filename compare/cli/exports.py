"""The export flags (``--csv DIR``, ``--per-replication``, and ``--report DIR`` for
``simulate``) and what they write for ``simulate`` and ``compare``.

``--csv DIR``: a folder, replaced whole, holding the tidy tables (:mod:`compare.present.tidy`)
as CSV, as Parquet beside them when pyarrow is installed, and ``result.json``;
``--per-replication`` adds the per-replication table. A comparison with per-interval rows also
gets ``per_interval_day``, the one wide table: one row per interval (clock time, staff, offered
load, each figure with its interval and fluid value; :mod:`compare.study.day_table`), a view of
the per-interval rows the tidy tables hold. Both destinations are checked before anything runs
(:mod:`compare.cli.destinations`).
"""

from __future__ import annotations

import argparse

from .outcome import _writing

__all__ = ["add_export_flags", "simulation_outputs", "comparison_csv"]


def add_export_flags(p: argparse.ArgumentParser, *, report: bool) -> None:
    """``--csv DIR`` and ``--per-replication`` (and ``--report DIR`` when ``report``)."""
    if report:
        p.add_argument("--report", metavar="DIR",
                       help="write report.html, the tidy tables (CSV) and JSON into DIR")
    p.add_argument("--csv", metavar="DIR",
                   help="write the tidy tables into DIR as CSV (and Parquet when pyarrow is "
                   "installed), with result.json; one row per figure")
    p.add_argument("--per-replication", action="store_true", dest="per_replication",
                   help="with --csv or --report, also write the per-replication values "
                   "(per_replication.csv)")


def _summary(scenario, sim) -> list[str]:
    lines = [f"{scenario.name}: {sim.replications} replications of [{sim.warmup:g}, "
             f"{sim.horizon:g}] {scenario.time_unit}, seed {sim.seed}",
             "every figure: mean and 95 % Student t interval over the replications, cut at its "
             "natural bounds"]
    for name, src in scenario.sources.items():
        if src.rate_varies:
            lines.append(f"arrivals of {name} vary by a day factor with cv "
                         f"{src.random_rate.cv:g} (gamma, mean 1, drawn once per replication)")
    return lines + list(sim.warnings)


def simulation_outputs(args, scenario, sim, text: str, doc: dict):
    """Write ``--csv`` now (naming it in ``doc`` and ``text``) and return ``(text, report)``,
    ``report`` the writer :func:`compare.cli.outcome.finish` calls for ``--report``."""
    from ..present.text import CAUTION

    per_rep = bool(getattr(args, "per_replication", False))
    if getattr(args, "csv", None):
        from ..present.simulation_report import simulation_csv  # (imports matplotlib: slow)

        doc["caution"] = CAUTION  # (finish sets the same; result.json carries it too)
        doc["csv"] = str(args.csv)
        with _writing(args, "--csv", args.csv):
            simulation_csv(args.csv, sim, scenario, json_doc=doc, per_replication=per_rep)
        text += f"\n\ntables written to {args.csv}"

    def report(directory):
        from ..present.simulation_report import simulation_report

        return simulation_report(directory, sim, scenario, json_doc=doc, caution=CAUTION,
                                 summary=_summary(scenario, sim), per_replication=per_rep)

    return text, report


def comparison_csv(args, scenario, comparison, text: str, doc: dict) -> str:
    """Write ``--csv`` of a comparison (estimates, gaps, flags, and with ``--per-replication``
    the per-replication values) and return ``text`` naming it."""
    if not getattr(args, "csv", None):
        return text
    from ..present.text import CAUTION
    from ..present.tidy import estimates_table, gaps_table, per_replication_table, write_tables

    sim = comparison.simulation
    tables = {"estimates": estimates_table(sim, scenario),
              "gaps": gaps_table(comparison, scenario),
              "flags": comparison.flags_frame()}
    if getattr(args, "per_replication", False):
        tables["per_replication"] = per_replication_table(sim, scenario)
    if comparison.transient is not None and len(comparison.transient):
        from ..study.day_table import day_table

        # the one wide table: the analyst's view of the per-interval rows of `estimates` and
        # `gaps`, one row per interval (as the report's per_interval_day.csv)
        tables["per_interval_day"] = day_table(scenario, comparison.transient)
    doc["caution"] = CAUTION
    doc["csv"] = str(args.csv)
    with _writing(args, "--csv", args.csv):
        write_tables(args.csv, tables, doc)
    return text + f"\n\ntables written to {args.csv}"
