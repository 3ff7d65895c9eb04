"""Reading the CSV files ``fluidgap fit`` takes: bounded, and every problem one clear line.

A file is read as UTF-8 CSV with a header line, row by row (the standard ``csv`` module), at
most ``max_rows`` rows (``--max-file-values``) of at most :data:`fluid.datafiles.LINE_BYTES`
bytes each, from a regular file only (:func:`fluid.datafiles.open_input`). Problems are
:class:`fluid.errors.ScenarioError` naming the file, the column and the line, never quoting
the content.

Times are numbers (in the scenario's time unit) or ISO 8601 timestamps (``2003-03-03 07:05``,
``2003-03-03T07:05:00Z``), one kind per file; timestamps are read as the wall-clock time they
state (a time-zone suffix is dropped, not converted), and become days (the calendar date) and
times of day in the scenario's time unit (s, min or h).
"""

from __future__ import annotations

import csv
import io
from dataclasses import dataclass

import numpy as np

from fluid.datafiles import LINE_BYTES, open_input
from fluid.errors import ScenarioError

__all__ = ["Table", "read_table", "TimeColumn", "time_column", "SECONDS_PER_UNIT",
           "count_column", "clock"]

#: Seconds in one scenario time unit, for the units a timestamp can be converted to.
SECONDS_PER_UNIT = {"s": 1.0, "sec": 1.0, "min": 60.0, "h": 3600.0, "hour": 3600.0}
#: Bytes of a CSV file per row it may hold (the cap on the file's size is this × max_rows).
BYTES_PER_ROW = 256


@dataclass(frozen=True)
class Table:
    """A CSV file read whole: ``columns`` name -> list of the cells (stripped strings),
    ``lines`` the file line of each row (the header is line 1), ``file`` its name."""

    file: str
    columns: dict
    lines: list

    def column(self, name: str, flag: str | None = None) -> list:
        if name not in self.columns:
            how = f" (choose it with {flag})" if flag else ""
            raise ScenarioError(self.file, f"column {name}",
                                "no such column; the file has " + ", ".join(
                                    list(self.columns)[:20]) + how)
        return self.columns[name]

    @property
    def rows(self) -> int:
        return len(self.lines)


def read_table(path, max_rows: int) -> Table:
    """Read the CSV file ``path`` (header line first) with at most ``max_rows`` rows."""
    file = str(path)
    handle, size = open_input(path, "a CSV file")
    too_large = (f"holds more than the limit of {max_rows:,} rows (or "
                 f"{BYTES_PER_ROW * max_rows:,} bytes); raise it with --max-file-values")
    with handle:
        if size > BYTES_PER_ROW * max_rows + LINE_BYTES:
            raise ScenarioError(file, "", too_large)
        lines_text = []
        for line_no in range(1, max_rows + 3):
            raw = handle.readline(LINE_BYTES + 1)
            if not raw:
                break
            if len(raw) > LINE_BYTES:
                raise ScenarioError(file, f"line {line_no}",
                                    f"is longer than {LINE_BYTES:,} bytes")
            try:
                lines_text.append(raw.decode("utf-8-sig" if line_no == 1 else "utf-8"))
            except UnicodeDecodeError:
                raise ScenarioError(file, f"line {line_no}", "is not UTF-8 text") from None
        else:
            raise ScenarioError(file, "", too_large)
    reader = csv.reader(io.StringIO("".join(lines_text)))
    try:
        rows = list(reader)
    except csv.Error as exc:
        raise ScenarioError(file, f"line {reader.line_num}", f"is not CSV ({exc})") from None
    if not rows or not any(cell.strip() for cell in rows[0]):
        raise ScenarioError(file, "", "is empty: expected a header line and rows")
    header = [h.strip() for h in rows[0]]
    if len(set(header)) != len(header):
        raise ScenarioError(file, "line 1", "names a column twice")
    body, lines = [], []
    # csv.reader's line_num counts physical lines; rows here are one line each except quoted
    # newlines, which the line numbers below then undercount (said nowhere else: rare)
    for i, row in enumerate(rows[1:], start=2):
        if not any(cell.strip() for cell in row):
            continue
        if len(row) != len(header):
            raise ScenarioError(file, f"line {i}",
                                f"has {len(row)} cells, the header {len(header)}")
        body.append(row)
        lines.append(i)
    if not body:
        raise ScenarioError(file, "", "has a header but no rows")
    if len(body) > max_rows:
        raise ScenarioError(file, "", too_large)
    columns = {h: [row[j].strip() for row in body] for j, h in enumerate(header)}
    return Table(file=file, columns=columns, lines=lines)


@dataclass(frozen=True)
class TimeColumn:
    """One column of times: ``values`` in the scenario's time unit (nan where the cell is
    empty), on one axis across days for timestamps (from 1970-01-01) and as written for
    numbers;
    ``day`` the day index of each row (0 for numbers; for timestamps the calendar date as
    days since 1970-01-01), ``stamped`` whether the cells were timestamps."""

    values: np.ndarray
    day: np.ndarray
    stamped: bool


def time_column(table: Table, name: str, flag: str, time_unit: str, *, required: bool,
                stamped: bool | None = None) -> TimeColumn:
    """The column ``name`` of ``table`` as times in ``time_unit`` (see the module docstring).
    ``required``: every cell must hold a time; ``stamped``: the kind the file's other
    columns hold (None: whatever this one holds). Absolute times: a timestamp becomes
    (days since 1970-01-01) × day length + time of day, so durations across midnight come
    out right."""
    import pandas as pd

    cells = table.column(name, flag)
    series = pd.Series(cells, dtype=object)
    empty = series.eq("")
    if required and empty.any():
        line = table.lines[int(np.argmax(empty.to_numpy()))]
        raise ScenarioError(table.file, f"line {line}, column {name}", "is empty, expected a "
                            "time")
    numbers = pd.to_numeric(series.where(~empty), errors="coerce")
    filled = ~empty.to_numpy()
    # the kind of time is the first filled cell's: a later cell of the other kind is an error
    first = int(np.argmax(filled)) if filled.any() else -1
    is_stamped = bool(first >= 0 and np.isnan(numbers.iloc[first]))
    if stamped is not None and filled.any() and is_stamped != stamped:
        raise ScenarioError(table.file, f"line {table.lines[first]}, column {name}", "holds " + (
            "a timestamp" if is_stamped else "a number") + " while the arrival column holds " +
            ("timestamps" if stamped else "numbers") + ": use one kind of time")
    if not is_stamped:
        values = numbers.to_numpy(dtype=float)
        bad = ~np.isfinite(values) & filled
        if bad.any():
            raise ScenarioError(table.file, f"line {table.lines[int(np.argmax(bad))]}, column "
                                f"{name}", "is not a finite number (the column holds numbers)")
        return TimeColumn(values=values, day=np.zeros(len(cells), dtype=np.int64),
                          stamped=False)
    unit = SECONDS_PER_UNIT.get(time_unit)
    if unit is None:
        raise ScenarioError(table.file, f"column {name}", "holds timestamps, which convert "
                            "to the time units " + ", ".join(SECONDS_PER_UNIT) +
                            f" only (--time-unit is {time_unit})")
    try:
        stamps = pd.to_datetime(series.where(~empty), format="ISO8601", errors="coerce")
    except (ValueError, TypeError, OverflowError):  # pandas refuses mixed time zones
        raise ScenarioError(table.file, f"column {name}", "mixes time zones or kinds of "
                            "timestamp: write every time in one time zone") from None
    if getattr(stamps.dt, "tz", None) is not None:
        stamps = stamps.dt.tz_localize(None)  # the wall-clock time written
    bad = stamps.isna().to_numpy() & ~empty.to_numpy()
    if bad.any():
        line = table.lines[int(np.argmax(bad))]
        raise ScenarioError(table.file, f"line {line}, column {name}",
                            "is not a number or an ISO 8601 timestamp")
    seconds = (stamps - pd.Timestamp("1970-01-01")).dt.total_seconds().to_numpy(dtype=float)
    day = np.floor(seconds / 86400.0)
    day = np.where(np.isnan(day), 0, day).astype(np.int64)
    return TimeColumn(values=seconds / unit, day=day, stamped=True)


def count_column(table: Table, name: str, flag: str | None = None) -> np.ndarray:
    """The column ``name`` as whole numbers >= 0 (counts)."""
    cells = table.column(name, flag)
    out = np.empty(len(cells), dtype=float)
    for i, cell in enumerate(cells):
        try:
            v = float(cell)
        except ValueError:
            v = float("nan")
        if not (v >= 0 and v == int(v) if np.isfinite(v) else False):
            raise ScenarioError(table.file, f"line {table.lines[i]}, column {name}",
                                "is not a whole number >= 0")
        out[i] = v
    return out


def clock(t: float, time_unit: str, stamped: bool) -> str:
    """A time of day for labels: ``HH:MM`` (``HH:MM:SS`` when not on a whole minute) for
    timestamps (``t`` in ``time_unit`` from midnight), else the number as written."""
    if not stamped:
        return f"{t:g}"
    seconds = round(t * SECONDS_PER_UNIT[time_unit])
    h, rest = divmod(seconds, 3600)
    m, sec = divmod(rest, 60)
    return f"{h:02d}:{m:02d}" + (f":{sec:02d}" if sec else "")
