"""From interval counts over many days to a mean profile, its dispersion and a day factor.

The counts come as a CSV file in one of two layouts:

* wide: one row per day, one column per interval (the column names label the intervals), and
  optionally a day column (``--day``) that only labels the row;
* long: one row per (day, interval) with the columns day, interval and count (names chosen by
  the caller), or a timestamp column (``--timestamp``: the interval's start; the day is its
  date and the interval its time of day) and a count column.

From the days x intervals matrix: the mean profile (the mean count of each interval over the
days, divided by the step: a rate per scenario time unit) with exact Poisson (Garwood)
intervals, the index of dispersion of the daily totals and of each interval across days
(1 for Poisson counts), and the gamma day factor of Jongbloed and Koole (2001): a mean-1
gamma multiplier of the whole day's profile, fitted to the daily totals
(:func:`compare.formulas.counts.gamma_day_factor`). A factor fitted this way also takes up
any weekday pattern of the days given; fit one weekday at a time to keep it out.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from fluid.errors import ScenarioError

from ..formulas.counts import DayFactor, dispersion_index, gamma_day_factor, garwood_interval
from .fit_input import SECONDS_PER_UNIT, Table, clock, count_column, read_table, time_column

__all__ = ["CountColumns", "DailyCounts", "CountsFit", "read_counts", "fit_counts"]


@dataclass(frozen=True)
class CountColumns:
    """Column names: ``day`` (label of a day), ``interval`` and ``count`` (long layout),
    ``timestamp`` (long layout with the interval's start instead of day and interval)."""

    day: str = "day"
    interval: str = "interval"
    count: str = "count"
    timestamp: str | None = None


@dataclass(frozen=True)
class DailyCounts:
    """Counts as a matrix ``counts[day, interval]`` with the ``days`` and ``intervals``
    labels (strings), ``starts`` the intervals' times of day in the scenario's time unit
    (None when the file does not give them), and the ``layout`` read."""

    file: str
    counts: np.ndarray
    days: list
    intervals: list
    starts: np.ndarray | None
    layout: str


def _wide(table: Table, columns: CountColumns) -> DailyCounts:
    names = [c for c in table.columns if c != columns.day]
    if not names:
        raise ScenarioError(table.file, "", "has no interval columns (wide layout)")
    counts = np.column_stack([count_column(table, c) for c in names])
    days = (table.columns[columns.day] if columns.day in table.columns
            else [str(i + 1) for i in range(table.rows)])
    return DailyCounts(file=table.file, counts=counts, days=list(days), intervals=names,
                       starts=None, layout="wide")


def _long(table: Table, columns: CountColumns, time_unit: str) -> DailyCounts:
    count = count_column(table, columns.count, "--count")
    starts = None
    if columns.timestamp is not None:
        stamps = time_column(table, columns.timestamp, "--timestamp", time_unit,
                             required=True)
        if not stamps.stamped:
            raise ScenarioError(table.file, f"column {columns.timestamp}",
                                "must hold timestamps (--timestamp)")
        day_length = 86400.0 / SECONDS_PER_UNIT[time_unit]
        of_day = np.round(stamps.values - stamps.day * day_length, 9)
        day_key, interval_key = stamps.day, of_day
    else:
        day_key = np.asarray(table.column(columns.day, "--day"), dtype=object)
        interval_key = np.asarray(table.column(columns.interval, "--interval"), dtype=object)
        try:
            interval_key = np.asarray([float(v) for v in interval_key])
        except ValueError:
            pass
    day_labels, day_index = np.unique(day_key, return_inverse=True)
    if isinstance(interval_key[0], float) or interval_key.dtype.kind == "f":
        int_labels, int_index = np.unique(interval_key, return_inverse=True)
    else:  # labels in the order they first appear
        _, first = np.unique(interval_key, return_index=True)
        int_labels = interval_key[np.sort(first)]
        where = {v: i for i, v in enumerate(int_labels)}
        int_index = np.asarray([where[v] for v in interval_key])
    matrix = np.full((day_labels.size, int_labels.size), np.nan)
    seen = np.zeros_like(matrix, dtype=bool)
    for row, (d, i) in enumerate(zip(day_index, int_index)):
        if seen[d, i]:
            raise ScenarioError(table.file, f"line {table.lines[row]}",
                                "repeats a day and interval given before")
        seen[d, i] = True
        matrix[d, i] = count[row]
    if not seen.all():
        d, i = np.argwhere(~seen)[0]
        raise ScenarioError(table.file, "", f"day {_label(day_labels[d])} has no count for "
                            f"interval {_label(int_labels[i])} (long layout: every day needs "
                            "every interval)")
    if columns.timestamp is not None:
        starts = np.asarray(int_labels, dtype=float)
    labels = ([clock(float(i), time_unit, True) for i in int_labels] if starts is not None
              else [_label(i) for i in int_labels])
    return DailyCounts(file=table.file, counts=matrix, days=[_label(d) for d in day_labels],
                       intervals=labels, starts=starts, layout="long")


def _label(value) -> str:
    if isinstance(value, (float, np.floating)) and float(value).is_integer():
        return str(int(value))
    if isinstance(value, (np.integer,)):
        import pandas as pd

        return str((pd.Timestamp("1970-01-01") + pd.Timedelta(days=int(value))).date())
    return str(value)


def read_counts(path, columns: CountColumns = CountColumns(), *, layout: str = "auto",
                time_unit: str = "min", max_rows: int = 1_000_000) -> DailyCounts:
    """Read interval counts (see the module docstring); ``layout``: ``"wide"``, ``"long"`` or
    ``"auto"`` (long when the file has the count column)."""
    table = read_table(path, max_rows)
    if layout == "auto":
        layout = "long" if columns.count in table.columns else "wide"
    out = _long(table, columns, time_unit) if layout == "long" else _wide(table, columns)
    if out.counts.shape[0] < 2:
        raise ScenarioError(table.file, "", "holds one day only: the dispersion and the day "
                            "factor need at least two days")
    return out


@dataclass(frozen=True)
class CountsFit:
    """The fit of :func:`fit_counts`: per interval the ``mean`` count, the ``rates`` (mean /
    step) with Garwood ``low``/``high`` at ``level`` and the index of ``dispersion`` (with its
    Poisson tail probability ``dispersion_p``); of the daily totals the index
    ``total_dispersion`` (``total_dispersion_p``); the day ``factor``."""

    file: str
    step: float
    start: float
    days: int
    intervals: list
    mean: np.ndarray
    rates: np.ndarray
    low: np.ndarray
    high: np.ndarray
    dispersion: np.ndarray
    dispersion_p: np.ndarray
    total_dispersion: float
    total_dispersion_p: float
    factor: DayFactor
    level: float

    def to_frame(self):
        import pandas as pd

        return pd.DataFrame({"interval": self.intervals, "mean_count": self.mean,
                             "rate": self.rates, "low": self.low, "high": self.high,
                             "dispersion": self.dispersion, "dispersion_p": self.dispersion_p})

    def to_json(self) -> dict:
        f = self.factor
        return {"file": self.file, "step": self.step, "start": self.start, "days": self.days,
                "level": self.level, "intervals": list(self.intervals),
                "mean_counts": list(map(float, self.mean)),
                "rates": list(map(float, self.rates)), "low": list(map(float, self.low)),
                "high": list(map(float, self.high)),
                "dispersion": list(map(float, self.dispersion)),
                "total_dispersion": self.total_dispersion,
                "total_dispersion_p": self.total_dispersion_p,
                "day_factor": {"dist": "gamma", "cv": f.cv, "low": f.low, "high": f.high,
                               "moments_cv": f.moments_cv, "mean_total": f.mean,
                               "loglik_gain": f.loglik_gain,
                               "interval": "profile likelihood"}}


def fit_counts(data: DailyCounts, step: float | None = None, *, start: float | None = None,
               level: float = 0.95) -> CountsFit:
    """Fit the mean profile, the dispersion and the gamma day factor of ``data``. ``step``:
    the interval length in the scenario's time unit (None: the spacing of the intervals'
    start times, when the file gives them); ``start``: the first interval's start (default:
    the file's, or 0)."""
    starts = data.starts
    if step is None:
        if starts is None or starts.size < 2:
            raise ScenarioError(data.file, "--step", "is needed: the file does not say how "
                                "long an interval is")
        step = float(np.min(np.diff(starts)))
    if not (step > 0 and math.isfinite(step)):
        raise ScenarioError(data.file, "--step", f"must be > 0 (got {step:g})")
    if starts is not None and starts.size > 1 and not np.allclose(
            np.diff(starts), step, rtol=1e-9, atol=1e-9):
        raise ScenarioError(data.file, "", "the intervals are not evenly spaced by the step "
                            f"{step:g}: a profile needs equal intervals")
    if start is None:
        start = float(starts[0]) if starts is not None else 0.0
    x = data.counts
    days = x.shape[0]
    mean = x.mean(axis=0)
    low, high = garwood_interval(x.sum(axis=0), step * days, level)
    d, p = dispersion_index(x, axis=0)
    totals = x.sum(axis=1)
    dt, pt = dispersion_index(totals)
    return CountsFit(file=data.file, step=float(step), start=float(start), days=days,
                     intervals=list(data.intervals), mean=mean, rates=mean / step, low=low,
                     high=high, dispersion=d, dispersion_p=p, total_dispersion=float(dt),
                     total_dispersion_p=float(pt), factor=gamma_day_factor(totals, level),
                     level=level)
