"""Clock times of a scenario: what scenario time ``t`` reads on the wall clock.

A scenario's times count from 0 in its ``time_unit``. With ``run.start`` (``"08:00"``: the
clock time of time 0, 24-hour ``HH:MM``) and a time unit the clock can convert (seconds,
minutes or hours), interval tables and figures show clock times: :func:`clock_label` gives
``"08:15"`` for t = 15 min. Without ``run.start``, or for a unit such as ``day`` or ``shift``,
the label is the number as the tables print it (4 significant digits).

A time past midnight wraps round and says on which day it falls (``"00:30+1"``); a time that is
not a whole minute shows its seconds (``"08:15:30"``).
"""

from __future__ import annotations

import math
import re
from typing import Any

from .errors import FieldError

__all__ = ["MINUTES_PER_UNIT", "axis_label", "clock_label", "clock_range", "has_clock",
           "minutes_per_unit", "parse_start"]

#: Minutes in one time unit, for the units the clock converts (their usual spellings).
MINUTES_PER_UNIT = {
    "s": 1 / 60, "sec": 1 / 60, "second": 1 / 60, "seconds": 1 / 60,
    "min": 1.0, "minute": 1.0, "minutes": 1.0,
    "h": 60.0, "hr": 60.0, "hour": 60.0, "hours": 60.0,
}

_START = re.compile(r"(\d{1,2}):(\d{2})")
_DAY = 24 * 60


def parse_start(value: Any, path: str = "run.start") -> float:
    """``"HH:MM"`` (24 h, ``00:00`` to ``23:59``) as minutes after midnight; anything else raises
    a :class:`~fluid.errors.FieldError` naming ``path``."""
    if not isinstance(value, str):
        # (an unquoted 8:00 may reach here as a number from a YAML 1.1 reader: ask for quotes)
        raise FieldError(path, 'must be a clock time "HH:MM" in quotes, such as "08:00"', value)
    match = _START.fullmatch(value.strip())
    if not match:
        raise FieldError(path, 'must be a clock time "HH:MM", such as "08:00"', value)
    hours, minutes = int(match.group(1)), int(match.group(2))
    if hours > 23 or minutes > 59:
        raise FieldError(path, "must be a clock time from 00:00 to 23:59", value)
    return float(60 * hours + minutes)


def minutes_per_unit(time_unit: str) -> float | None:
    """Minutes in one ``time_unit``, or None when the clock does not convert it."""
    return MINUTES_PER_UNIT.get(str(time_unit).strip().lower())


def _number(t: float) -> str:
    # the tables' number format (compare.present.tables.fmt), which fluid cannot import
    if isinstance(t, int):
        return str(t)
    t = float(t)
    if math.isnan(t):
        return "n/a"
    if math.isinf(t):
        return "inf" if t > 0 else "-inf"
    return "0" if t == 0 else f"{t:.4g}"


def _converts(scenario) -> float | None:
    start = getattr(scenario.run, "start", None)
    per = minutes_per_unit(scenario.time_unit)
    return None if start is None or per is None else per


def has_clock(scenario) -> bool:
    """True when times of ``scenario`` are shown as clock times (``run.start`` is set and its
    time unit converts to minutes)."""
    return _converts(scenario) is not None


def clock_label(scenario, t: float) -> str:
    """The clock time of scenario time ``t`` (in ``scenario.time_unit``): ``"08:15"``, with
    seconds when not a whole minute (``"08:15:30"``) and ``+D`` for a later day; the number
    itself (``"15"``) without ``run.start`` or for a unit the clock does not convert."""
    per = _converts(scenario)
    if per is None or not math.isfinite(float(t)):
        return _number(t)
    seconds = round((scenario.run.start + float(t) * per) * 60)
    day, seconds = divmod(seconds, _DAY * 60)
    hours, rest = divmod(seconds, 3600)
    minutes, secs = divmod(rest, 60)
    text = f"{hours:02d}:{minutes:02d}" + (f":{secs:02d}" if secs else "")
    return text + (f"{day:+d}" if day else "")


def clock_range(scenario, start: float, end: float) -> str:
    """``"08:00-08:30"``: the labels of an interval's two ends (see :func:`clock_label`)."""
    return f"{clock_label(scenario, start)}-{clock_label(scenario, end)}"


def axis_label(scenario) -> str:
    """The label of a time axis: ``"clock time (time 0 = 08:00)"`` when the axis shows clock
    times, else ``"time (min)"``."""
    if _converts(scenario) is None:
        return f"time ({scenario.time_unit})"
    return f"clock time (time 0 = {clock_label(scenario, 0.0)})"
