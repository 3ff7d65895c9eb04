"""Tidy tables of a simulation (and of a comparison) for ``--csv DIR`` and ``--report DIR``, and
the folder they are written to.

Every table has one row per figure. Estimates (:func:`estimates_table`): kind, name, metric,
interval, mean, low, high, n, where ``kind`` is transition, place, pool, source or total (a
figure of the whole net, name empty), and ``interval`` is empty (NA) for a figure over the
whole window ``[warmup, horizon]`` and the interval's index i (covering ``[i·STEP,
(i+1)·STEP)`` from time 0, the last one cut at the horizon; STEP in ``result.json``) for a
per-interval figure. Per-replication values (:func:`per_replication_table`): kind, name,
metric, interval, replication, value. Comparison gaps (:func:`gaps_table`): kind, name, metric,
interval, fluid, mean, low, high, n, gap, rel_gap. Times in the scenario's time unit.

:func:`table_files` turns tables into files: ``NAME.csv`` for each, and ``NAME.parquet`` beside
it when pyarrow is installed (the optional extra ``parquet``); :func:`write_tables` swaps a
folder of them (with ``result.json``) in whole (:func:`compare.present.swap.replace_folder`).
"""

from __future__ import annotations

import importlib.util
import io
import json
import os
from pathlib import Path
from typing import Any, Mapping

import pandas as pd

from fluid.json_values import json_ready

from .swap import ReportFolderError, replace_folder, report_folder_problem

__all__ = ["ESTIMATE_COLUMNS", "PER_REPLICATION_COLUMNS", "GAP_COLUMNS", "estimates_table",
           "per_replication_table", "gaps_table", "parquet_available", "table_files",
           "write_tables"]

ESTIMATE_COLUMNS = ["kind", "name", "metric", "interval", "mean", "low", "high", "n"]
PER_REPLICATION_COLUMNS = ["kind", "name", "metric", "interval", "replication", "value"]
GAP_COLUMNS = ["kind", "name", "metric", "interval", "fluid", "mean", "low", "high", "n", "gap",
               "rel_gap"]


def _kind_of(scenario, name: str) -> str:
    """The kind of node ``name`` names in ``scenario`` ("total" for the whole net)."""
    for kind, table in (("place", scenario.places), ("pool", scenario.pools),
                        ("source", scenario.sources), ("transition", scenario.transitions)):
        if name in table:
            return kind
    return "total"


def _no_interval(frame: pd.DataFrame) -> pd.DataFrame:
    return frame.assign(interval=pd.array([pd.NA] * len(frame), dtype="Int64"))


def _interval_rows(frame: pd.DataFrame, scenario, columns: list[str]) -> pd.DataFrame:
    """Rows of a per-interval table (columns interval, metric, name, ...) with their kind."""
    names = frame["name"].fillna("").astype(str)
    out = frame.assign(name=names, kind=[_kind_of(scenario, n) for n in names])
    out["interval"] = out["interval"].astype("Int64")
    return out[columns]


def estimates_table(sim, scenario) -> pd.DataFrame:
    """Every estimate of ``sim`` (a :class:`desim.SimulationResult` of ``scenario``), one row
    each: the whole-window figures, then the per-interval ones when the run had intervals."""
    whole = _no_interval(sim.to_frame())[ESTIMATE_COLUMNS]
    parts = [whole]
    if sim.intervals is not None and len(sim.intervals):
        parts.append(_interval_rows(sim.intervals, scenario, ESTIMATE_COLUMNS))
    out = pd.concat(parts, ignore_index=True)
    out["n"] = out["n"].astype(int)
    return out


def per_replication_table(sim, scenario) -> pd.DataFrame:
    """Every per-replication value of ``sim``, one row each (replications in order; the
    per-interval values after the whole-window ones)."""
    whole = sim.per_replication()
    parts = [_no_interval(whole)[PER_REPLICATION_COLUMNS]]
    runs = [r for r in sim.runs if r.intervals is not None and len(r.intervals)]
    if runs:
        frame = pd.concat([r.intervals.assign(replication=r.replication) for r in runs],
                          ignore_index=True)
        parts.append(_interval_rows(frame, scenario, PER_REPLICATION_COLUMNS))
    return pd.concat(parts, ignore_index=True)


def gaps_table(comparison, scenario) -> pd.DataFrame:
    """The fluid-against-simulation rows of ``comparison``, one per figure: the whole-window
    gaps (:meth:`compare.study.gaps.Gaps.to_frame`), then the per-interval rows when there
    are any (their gap columns empty)."""
    whole = _no_interval(comparison.gaps.to_frame())
    parts = [whole.reindex(columns=GAP_COLUMNS)]
    transient = comparison.transient
    if transient is not None and len(transient):
        parts.append(_interval_rows(transient.reindex(
            columns=[c for c in GAP_COLUMNS if c != "kind"]), scenario, GAP_COLUMNS))
    return pd.concat(parts, ignore_index=True)


def parquet_available() -> bool:
    """True when pyarrow is installed (``pip install 'fluidgap[parquet]'``)."""
    return importlib.util.find_spec("pyarrow") is not None


def _parquet(table: pd.DataFrame) -> bytes:
    buf = io.BytesIO()
    table.to_parquet(buf, index=False, engine="pyarrow")
    return buf.getvalue()


def table_files(tables: Mapping[str, pd.DataFrame], *,
                parquet: bool | None = None) -> list[tuple[str, bytes]]:
    """``(file name, bytes)`` for every table: its CSV (full precision, no index, NA as an
    empty field) and, with ``parquet`` (default: when pyarrow is installed), its Parquet file."""
    parquet = parquet_available() if parquet is None else parquet
    out = []
    for name, table in tables.items():
        out.append((f"{name}.csv", table.to_csv(index=False, lineterminator="\n")
                    .encode("utf-8")))
        if parquet:
            out.append((f"{name}.parquet", _parquet(table)))
    return out


def write_tables(directory: str | os.PathLike, tables: Mapping[str, pd.DataFrame],
                 json_doc: Mapping[str, Any]) -> list[Path]:
    """Make ``directory`` hold exactly the tables (:func:`table_files`) and ``result.json``
    (``json_doc``, strict JSON), swapped in whole; returns the files written. A folder that
    holds anything else raises :class:`compare.present.swap.ReportFolderError` before anything
    is built."""
    directory = Path(directory)
    problem = report_folder_problem(directory)
    if problem is not None:
        raise ReportFolderError(f"{directory} {problem}")
    contents = table_files(tables)
    text = json.dumps(json_ready(json_doc), allow_nan=False, indent=2) + "\n"
    contents.append(("result.json", text.encode("utf-8")))
    replace_folder(directory, contents)
    return [directory / name for name, _ in contents]
