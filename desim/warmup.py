"""MSER-5 warm-up detection (White 1997, Simulation 69(6):323-334; White, Cobb and Spratt 2000).

Batch means Z_1..Z_k of 5 raw observations; MSER(d) = Σ_{j>d} (Z_j − Z̄_d)² / (k − d)²;
d* = the smallest argmin over d ≤ k/2; delete the first 5·d* observations. When the minimum over
all d lies in the second half of the series, no truncation is reliable: the run is too short.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["MserResult", "mser5", "BATCH", "MIN_TAIL"]

BATCH = 5
#: Batches always kept when looking for the global minimum: with fewer, MSER(d) is the variance
#: of a handful of numbers and can be tiny by chance, which would cry "run longer" on a
#: stationary series.
MIN_TAIL = 10


@dataclass(frozen=True)
class MserResult:
    """``truncation``: raw observations to delete (5·d*); ``batches``: k; ``statistic``: MSER(d)
    for the d searched; ``late_minimum``: the overall minimum lies beyond k/2 (run longer)."""

    truncation: int
    batches: int
    statistic: np.ndarray
    late_minimum: bool


def mser5(series, batch: int = BATCH, min_tail: int = MIN_TAIL) -> MserResult:
    """MSER-``batch`` of a raw output series (trailing observations that do not fill a batch are
    ignored). Needs at least two batches; with fewer it truncates nothing and flags nothing."""
    x = np.asarray(series, dtype=float)
    k = x.size // batch
    if k < 2:
        return MserResult(0, k, np.zeros(0), False)
    z = x[: k * batch].reshape(k, batch).mean(axis=1)
    last = k - min(min_tail, max(2, k // 2))  # largest d searched
    # Direct sums (k is a few hundred): cumulative-sum shortcuts cancel badly on a series with a
    # large mean and would break the "smallest d on ties" rule with rounding noise.
    stat = np.array([np.sum((z[d:] - z[d:].mean()) ** 2) / (k - d) ** 2 for d in range(last + 1)])
    half = k // 2
    d_star = int(np.argmin(stat[: half + 1]))  # argmin returns the first (smallest d) on ties
    late = int(np.argmin(stat)) > half
    return MserResult(batch * d_star, k, stat, late)
