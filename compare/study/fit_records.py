"""From call records to the pieces of a scenario: the arrival profile, the holding-time
family, and patience from censored waits.

A record is one row per call (a CSV file, column names chosen by the caller):

* ``arrival``: when the caller joined the queue (required on every row);
* ``answered``: when an agent took the call (empty when the caller was not answered);
* ``ended``: when the call ended: the hang-up after the talk for an answered caller; for an
  unanswered one the time the caller gave up, unless the file has an ``abandoned`` column;
* ``abandoned`` (optional column): when an unanswered caller gave up.

Times are numbers in the scenario's time unit or ISO 8601 timestamps
(:mod:`compare.study.fit_input`). From them:

* the arrival profile: arrivals per interval of ``step`` from the day's start, summed over the
  days of the records and divided by step × days, with exact Poisson (Garwood) intervals;
* the hold of answered callers (ended - answered), its family chosen by AIC;
* patience: an abandoning caller's wait (abandoned - arrival) is a patience seen exactly, an
  answered caller's wait (answered - arrival) a right-censored one (the patience was longer);
  the Kaplan-Meier estimator (:func:`compare.formulas.survival.kaplan_meier`) on both, then the
  family by AIC with censoring (:mod:`compare.study.fit_families`).
Durations of 0 are left out of the family fits (the families have no mass at 0), and said so.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from fluid.errors import ScenarioError

from ..formulas.counts import garwood_interval
from ..formulas.survival import SurvivalCurve, kaplan_meier
from .fit_families import FamilyChoice, choose_family
from .fit_input import SECONDS_PER_UNIT, read_table, time_column

__all__ = ["RecordColumns", "CallRecords", "ArrivalProfile", "RecordsFit", "read_records",
           "arrival_profile", "fit_records"]


@dataclass(frozen=True)
class RecordColumns:
    """The names of the record columns (``abandoned``: used when the file has it)."""

    arrival: str = "arrival"
    answered: str = "answered"
    ended: str = "ended"
    abandoned: str = "abandoned"


#: The flag that names each column, for messages.
COLUMN_FLAGS = {"arrival": "--arrival", "answered": "--answered", "ended": "--ended",
                "abandoned": "--abandoned"}


@dataclass(frozen=True)
class CallRecords:
    """Call records read and checked: per call the ``arrival``, ``answered``, ``ended`` and
    ``abandoned`` times (nan when absent) on one axis in the scenario's ``time_unit``,
    ``day`` (the arrival's calendar day as days since 1970-01-01; all 0 for plain numbers), ``day_length`` (the length of a day in the
    time unit; None for plain numbers), ``lines`` (file line of each call)."""

    file: str
    time_unit: str
    arrival: np.ndarray
    answered: np.ndarray
    ended: np.ndarray
    abandoned: np.ndarray
    day: np.ndarray
    day_length: float | None
    lines: np.ndarray

    @property
    def stamped(self) -> bool:
        return self.day_length is not None

    @property
    def time_of_day(self) -> np.ndarray:
        """Arrival times from the start of their own day (as written for plain numbers)."""
        if self.day_length is None:
            return self.arrival
        return self.arrival - self.day * self.day_length

    @property
    def days(self) -> int:
        return int(np.unique(self.day).size)

    @property
    def served(self) -> np.ndarray:
        return ~np.isnan(self.answered)

    @property
    def gave_up(self) -> np.ndarray:
        return ~np.isnan(self.abandoned)


def read_records(path, columns: RecordColumns = RecordColumns(), *, time_unit: str = "min",
                 max_rows: int = 1_000_000) -> CallRecords:
    """Read and check the call records in the CSV file ``path`` (see the module docstring).
    Raises :class:`fluid.errors.ScenarioError` naming the file, line and column."""
    table = read_table(path, max_rows)
    arrival = time_column(table, columns.arrival, "--arrival", time_unit, required=True)
    kind = arrival.stamped
    answered = time_column(table, columns.answered, "--answered", time_unit, required=False,
                           stamped=kind)
    ended = time_column(table, columns.ended, "--ended", time_unit, required=False,
                        stamped=kind)
    if columns.abandoned in table.columns:
        abandoned = time_column(table, columns.abandoned, "--abandoned", time_unit,
                                required=False, stamped=kind).values
        has_abandoned = True
    else:
        abandoned = np.where(np.isnan(answered.values), ended.values, np.nan)
        has_abandoned = False
    lines = np.asarray(table.lines)
    file = table.file
    a, s, e = arrival.values, answered.values, ended.values

    def fail(mask: np.ndarray, column: str, message: str) -> None:
        if mask.any():
            line = lines[int(np.argmax(mask))]
            raise ScenarioError(file, f"line {line}, column {column}", message)

    served = ~np.isnan(s)
    fail(served & ~np.isnan(abandoned) & has_abandoned, columns.abandoned,
         f"holds a time for a caller who was answered ({columns.answered} is not empty)")
    fail(served & np.isnan(e), columns.ended, "is empty for an answered caller")
    with np.errstate(invalid="ignore"):
        fail(served & (s < a), columns.answered,
             f"is before {columns.arrival}: a negative wait")
        fail(served & (e < s), columns.ended, f"is before {columns.answered}: a negative hold")
        gave = ~np.isnan(abandoned)
        fail(gave & (abandoned < a), columns.abandoned if has_abandoned else columns.ended,
             f"is before {columns.arrival}: a negative wait")
    day_length = 86400.0 / SECONDS_PER_UNIT[time_unit] if kind else None
    return CallRecords(file=file, time_unit=time_unit, arrival=a, answered=s, ended=e,
                       abandoned=abandoned, day=arrival.day,
                       day_length=day_length, lines=lines)


@dataclass(frozen=True)
class ArrivalProfile:
    """Arrival rates per interval: interval i covers [``start`` + i step, ``start`` +
    (i + 1) step) of the day (scenario time unit; from midnight for timestamps), ``counts``
    the arrivals in it over all ``days``, ``rates`` = counts / (step × days), ``low``/``high``
    the Garwood interval of the rate at ``level``."""

    start: float
    step: float
    days: int
    counts: np.ndarray
    rates: np.ndarray
    low: np.ndarray
    high: np.ndarray
    level: float

    def to_frame(self):
        import pandas as pd

        n = self.counts.size
        return pd.DataFrame({"interval": np.arange(n), "start": self.start + self.step * np.arange(n),
                             "end": self.start + self.step * np.arange(1, n + 1),
                             "arrivals": self.counts.astype(int), "rate": self.rates,
                             "low": self.low, "high": self.high})

    def to_json(self) -> dict:
        return {"start": self.start, "step": self.step, "days": self.days,
                "level": self.level, "counts": [int(c) for c in self.counts],
                "rates": list(map(float, self.rates)), "low": list(map(float, self.low)),
                "high": list(map(float, self.high))}


#: Points of the Kaplan-Meier curve the JSON document holds at most.
JSON_CURVE_POINTS = 2000
#: Most intervals a profile may have (the scenario's limit on intervals, Limits.intervals).
MAX_INTERVALS = 10_000


def arrival_profile(records: CallRecords, step: float, *, day_start: float | None = None,
                    level: float = 0.95, max_intervals: int = MAX_INTERVALS) -> ArrivalProfile:
    """The arrival profile of ``records`` per interval of ``step`` (scenario time unit) from
    ``day_start`` (default: the first arrival's time of day rounded down to a whole step; for
    timestamps measured from midnight)."""
    if not (step > 0 and math.isfinite(step)):
        raise ScenarioError(records.file, "--step", f"must be > 0 (got {step:g})")
    t = records.time_of_day
    first = float(np.min(t))
    start = math.floor(first / step) * step if day_start is None else float(day_start)
    early = t < start
    if early.any():
        line = records.lines[int(np.argmax(early))]
        raise ScenarioError(records.file, f"line {line}", "arrives before the day's start "
                            f"{start:g} (--day-start)")
    index = np.floor((t - start) / step).astype(np.int64)
    n = int(index.max()) + 1
    if n > max_intervals:
        raise ScenarioError(records.file, "--step", f"cuts the records into {n:,} intervals, "
                            f"more than the {max_intervals:,} a profile may have (raise it "
                            "with --max-intervals, or give a longer step)")
    counts = np.bincount(index, minlength=n).astype(float)
    days = records.days
    exposure = step * days
    low, high = garwood_interval(counts, exposure, level)
    return ArrivalProfile(start=start, step=float(step), days=days, counts=counts,
                          rates=counts / exposure, low=low, high=high, level=level)


@dataclass(frozen=True)
class RecordsFit:
    """What the records give: the ``profile``, the ``hold`` choice (None without answered
    calls) with the ``hold_times`` it was fitted to, the ``patience`` choice (None without
    abandonment) with its Kaplan-Meier ``curve`` and the ``waits`` (observed, censored),
    ``calls``/``served``/``abandoned``/``unresolved`` counts, ``most_in_talk`` (the most
    answered calls in progress at once: a lower bound on the staff that was on duty),
    ``notes`` and ``stamped`` (the records held timestamps: profile times are from midnight)."""

    file: str
    time_unit: str
    profile: ArrivalProfile
    hold: FamilyChoice | None
    hold_times: np.ndarray
    patience: FamilyChoice | None
    curve: SurvivalCurve | None
    waits: tuple[np.ndarray, np.ndarray]
    calls: int
    served: int
    abandoned: int
    unresolved: int
    most_in_talk: int
    notes: tuple[str, ...] = field(default=())
    stamped: bool = False

    def to_json(self) -> dict:
        curve = None
        if self.curve is not None:
            c = self.curve
            # at most JSON_CURVE_POINTS steps (evenly picked, the last kept), so that a
            # million records do not make a JSON document of a million times
            pick = np.unique(np.linspace(0, c.times.size - 1,
                                         min(c.times.size, JSON_CURVE_POINTS)).round()
                             .astype(int))
            curve = {"times": list(map(float, c.times[pick])),
                     "survival": list(map(float, c.survival[pick])),
                     "steps": int(c.times.size), "events": c.events, "censored": c.censored}
        return {"file": self.file, "time_unit": self.time_unit, "calls": self.calls,
                "served": self.served, "abandoned": self.abandoned,
                "unresolved": self.unresolved, "most_in_talk": self.most_in_talk,
                "profile": self.profile.to_json(),
                "hold": None if self.hold is None else self.hold.to_json(),
                "patience": None if self.patience is None else self.patience.to_json(),
                "kaplan_meier": curve, "notes": list(self.notes)}


def _most_at_once(start: np.ndarray, end: np.ndarray) -> int:
    if start.size == 0:
        return 0
    times = np.concatenate([start, end])
    steps = np.concatenate([np.ones(start.size), -np.ones(end.size)])
    order = np.lexsort((steps, times))  # an end before a start at the same instant
    return int(np.max(np.cumsum(steps[order])))


def fit_records(records: CallRecords, step: float, *, day_start: float | None = None,
                level: float = 0.95, max_intervals: int = MAX_INTERVALS) -> RecordsFit:
    """Fit the profile, the hold and patience of ``records`` (see the module docstring);
    ``level``: of every interval."""
    notes = []
    profile = arrival_profile(records, step, day_start=day_start, level=level,
                              max_intervals=max_intervals)
    served, gave = records.served, records.gave_up
    holds = (records.ended - records.answered)[served]
    positive = holds[holds > 0]
    if positive.size < holds.size:
        notes.append(f"hold: {holds.size - positive.size} answered calls of length 0 left out "
                     "of the fit")
    hold = None
    if positive.size >= 2:
        hold = choose_family(positive, level=level)
    else:
        notes.append("hold: fewer than two answered calls of positive length: not fitted")
    observed = (records.abandoned - records.arrival)[gave]
    censored = (records.answered - records.arrival)[served]
    if (observed == 0).any():
        notes.append(f"patience: {int((observed == 0).sum())} callers who gave up at once "
                     "(wait 0) left out of the fit")
    observed = observed[observed > 0]
    patience, curve = None, None
    if observed.size >= 2:
        curve = kaplan_meier(observed, censored, level=level)
        patience = choose_family(observed, censored, level=level, curve=curve)
    else:
        notes.append("patience: fewer than two callers gave up after waiting: not fitted "
                     "(the scenario's queue is then written without patience)")
    unresolved = int((~served & ~gave).sum())
    if unresolved:
        notes.append(f"{unresolved} calls neither answered nor given up (counted as arrivals "
                     "only)")
    return RecordsFit(file=records.file, time_unit=records.time_unit, profile=profile,
                      hold=hold, hold_times=positive, patience=patience, curve=curve,
                      waits=(observed, censored), calls=int(records.arrival.size),
                      served=int(served.sum()), abandoned=int(gave.sum()),
                      unresolved=unresolved,
                      most_in_talk=_most_at_once(records.answered[served],
                                                 records.ended[served]),
                      notes=tuple(notes), stamped=records.stamped)
