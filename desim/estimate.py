"""Across-replication estimates: a mean with a Student t confidence interval.

The interval is computed on per-replication values (one number per independent replication), as
design.md §4.2 asks; never a pooled binomial interval over correlated jobs. A quantity with natural
bounds (a share or a busy fraction in [0, 1], a count, time or queue length of at least 0) gets its
t interval cut at those bounds, and the estimate says so in ``method``: the symmetric t interval
can reach past a bound when the values lie near it (a share of 0.997 with a half-width of 0.006),
and a figure outside its bounds cannot be defended.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Iterable

import numpy as np

__all__ = ["Estimate", "LEVEL", "SHARE", "NON_NEGATIVE", "STUDENT_T", "interval_method"]

#: Confidence level of every interval the simulator reports.
LEVEL = 0.95
#: Natural bounds of a share, a service level or a busy fraction.
SHARE = (0.0, 1.0)
#: Natural bounds of a count, a time, a rate or a queue length.
NON_NEGATIVE = (0.0, math.inf)
#: The method of an interval with no bounds to respect.
STUDENT_T = "student t"


def _bound_text(x: float) -> str:
    return f"{x:g}"


def interval_method(bounds: tuple[float, float] | None) -> str:
    """The method of an interval cut at ``bounds`` (None: no bounds), as the results state it."""
    if bounds is None:
        return STUDENT_T
    lo, hi = bounds
    if math.isinf(hi):
        return f"{STUDENT_T}, cut at the natural bound {_bound_text(lo)}"
    return f"{STUDENT_T}, cut at the natural bounds [{_bound_text(lo)}, {_bound_text(hi)}]"


def _json_number(x: float) -> float | None:
    return None if not math.isfinite(x) else float(x)


@dataclass(frozen=True)
class Estimate:
    """Mean of ``n`` per-replication values and a two-sided 95 % Student t interval
    ``[low, high]``. With n = 1 the interval is unknown (low = high = nan); with n = 0 everything
    is nan. Values that are nan in a replication (nothing to measure there) are left out of n.
    ``method``: how the interval was made, :data:`STUDENT_T` or, for a quantity with natural
    bounds, "student t, cut at the natural bounds [0, 1]" (or "... bound 0")."""

    mean: float
    low: float
    high: float
    n: int
    method: str = STUDENT_T

    @classmethod
    def from_values(cls, values: Iterable[float], level: float = LEVEL,
                    bounds: tuple[float, float] | None = None) -> "Estimate":
        """The estimate of ``values``. ``bounds``: (lowest, highest) value the quantity can take
        (e.g. :data:`SHARE`, :data:`NON_NEGATIVE`); the t interval, and the mean (which can
        leave them only by rounding, e.g. a busy fraction of -4e-16), are cut at them."""
        method = interval_method(bounds)
        x = np.asarray(list(values), dtype=float)
        x = x[np.isfinite(x)]
        n = int(x.size)
        if n == 0:
            return cls(math.nan, math.nan, math.nan, 0, method)
        mean = float(x.mean())
        if n == 1:
            return cls(_cut(mean, bounds), math.nan, math.nan, 1, method)
        from scipy import stats  # (here, not at module level: importing it takes a second)

        sd = float(x.std(ddof=1))
        half = float(stats.t.ppf(0.5 + level / 2, n - 1)) * sd / math.sqrt(n)
        return cls(_cut(mean, bounds), _cut(mean - half, bounds), _cut(mean + half, bounds), n,
                   method)

    @property
    def half_width(self) -> float:
        return (self.high - self.low) / 2

    def contains(self, value: float) -> bool:
        """True when ``value`` lies in ``[low, high]``."""
        return self.low <= value <= self.high

    def to_json(self) -> dict:
        """``{"mean", "low", "high", "n"}`` (pinned by design.md §5; the methods of a result's
        intervals are listed once beside them, see ``SimulationResult.to_json``); nan becomes
        None (JSON null)."""
        return {"mean": _json_number(self.mean), "low": _json_number(self.low),
                "high": _json_number(self.high), "n": self.n}


def _cut(x: float, bounds: tuple[float, float] | None) -> float:
    """``x`` moved into ``bounds`` (nan stays nan)."""
    if bounds is None or not math.isfinite(x):
        return x
    return min(max(x, bounds[0]), bounds[1])
