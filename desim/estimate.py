"""Across-replication estimates: a mean with a Student t confidence interval.

The interval is computed on per-replication values (one number per independent replication), as
design.md §4.2 asks; never a pooled binomial interval over correlated jobs.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Iterable

import numpy as np

__all__ = ["Estimate", "LEVEL"]

#: Confidence level of every interval the simulator reports.
LEVEL = 0.95


def _json_number(x: float) -> float | None:
    return None if not math.isfinite(x) else float(x)


@dataclass(frozen=True)
class Estimate:
    """Mean of ``n`` per-replication values and a two-sided 95 % Student t interval
    ``[low, high]``. With n = 1 the interval is unknown (low = high = nan); with n = 0 everything
    is nan. Values that are nan in a replication (nothing to measure there) are left out of n."""

    mean: float
    low: float
    high: float
    n: int

    @classmethod
    def from_values(cls, values: Iterable[float], level: float = LEVEL) -> "Estimate":
        x = np.asarray(list(values), dtype=float)
        x = x[np.isfinite(x)]
        n = int(x.size)
        if n == 0:
            return cls(math.nan, math.nan, math.nan, 0)
        mean = float(x.mean())
        if n == 1:
            return cls(mean, math.nan, math.nan, 1)
        from scipy import stats  # (here, not at module level: importing it takes a second)

        sd = float(x.std(ddof=1))
        half = float(stats.t.ppf(0.5 + level / 2, n - 1)) * sd / math.sqrt(n)
        return cls(mean, mean - half, mean + half, n)

    @property
    def half_width(self) -> float:
        return (self.high - self.low) / 2

    def contains(self, value: float) -> bool:
        """True when ``value`` lies in ``[low, high]``."""
        return self.low <= value <= self.high

    def to_json(self) -> dict:
        """``{"mean", "low", "high", "n"}``; nan becomes None (JSON null)."""
        return {"mean": _json_number(self.mean), "low": _json_number(self.low),
                "high": _json_number(self.high), "n": self.n}
