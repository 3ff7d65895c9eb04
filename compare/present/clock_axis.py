"""Time axes in clock times: ticks on whole clock quarters, halves or hours from ``run.start``
(08:00, 09:00, ... whatever the start), labelled by :func:`fluid.clock.clock_label`."""

from __future__ import annotations

import math

import numpy as np
from matplotlib.ticker import FixedLocator, FuncFormatter

from fluid.clock import axis_label, clock_label, has_clock, minutes_per_unit

__all__ = ["clock_ticks", "set_clock_axis"]

#: Spacings of clock ticks tried, in minutes: the first that gives at most ``MAX_TICKS`` ticks
#: (and is no finer than the intervals drawn) is used.
TICK_MINUTES = (15, 30, 60, 120, 180, 240, 360, 720, 1440)
MAX_TICKS = 12


def clock_ticks(scenario, step: float, end: float, max_ticks: int = MAX_TICKS) -> np.ndarray:
    """Tick positions over [0, end] (scenario time unit) on whole clock times, spaced at least
    ``step`` apart, at most ``max_ticks`` of them. Needs :func:`fluid.clock.has_clock`."""
    per = minutes_per_unit(scenario.time_unit)
    start = scenario.run.start  # minutes after midnight
    for minutes in TICK_MINUTES:
        if minutes / per >= step * (1 - 1e-9) and end * per / minutes <= max_ticks:
            break
    first = math.ceil(start / minutes - 1e-9) * minutes  # the first whole tick, clock minutes
    return (np.arange(first, start + end * per + 1e-9, minutes) - start) / per


def set_clock_axis(ax, scenario, step: float, end: float, max_ticks: int = MAX_TICKS) -> bool:
    """Clock-time ticks (at most ``max_ticks``) and label on ``ax``'s x axis when ``scenario``
    has a clock (True), else nothing (False)."""
    if scenario is None or not has_clock(scenario):
        return False
    ax.xaxis.set_major_locator(FixedLocator(clock_ticks(scenario, step, end, max_ticks)))
    ax.xaxis.set_major_formatter(FuncFormatter(lambda t, _pos: clock_label(scenario, float(t))))
    ax.set_xlabel(axis_label(scenario))
    return True
