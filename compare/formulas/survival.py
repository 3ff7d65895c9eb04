"""The Kaplan-Meier (product-limit) estimator of a survival function from right-censored data.

Kaplan and Meier (1958), "Nonparametric estimation from incomplete observations", JASA 53:
at each distinct observed time t_i with d_i events and n_i still at risk (observed or censored
at a time >= t_i), S(t) = prod over t_i <= t of (1 - d_i / n_i). Computed by
``scipy.stats.ecdf`` on ``scipy.stats.CensoredData``; the pointwise interval is Greenwood's
variance on the log(-log) scale (``method="log-log"``), which stays inside [0, 1].

In a call centre a caller's patience is seen only when the caller abandons; a served caller's
wait is a right-censored patience (the patience was at least that long). Times in any unit.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

__all__ = ["SurvivalCurve", "kaplan_meier"]


@dataclass(frozen=True)
class SurvivalCurve:
    """A right-continuous step survival function: ``survival[i]`` holds on
    [``times[i]``, ``times[i + 1]``), 1 before ``times[0]``; ``low``/``high`` the pointwise
    interval at ``level`` (nan where it is undefined, e.g. where the estimate is 0);
    ``events`` and ``censored``: how many observations of each kind it was made from."""

    times: np.ndarray
    survival: np.ndarray
    low: np.ndarray
    high: np.ndarray
    level: float
    events: int
    censored: int

    def at(self, t) -> np.ndarray:
        """S(t) at the times ``t`` (array-like)."""
        t = np.asarray(t, dtype=float)
        i = np.searchsorted(self.times, t, side="right") - 1
        return np.where(i >= 0, self.survival[np.maximum(i, 0)], 1.0)


def kaplan_meier(observed, censored=(), level: float = 0.95) -> SurvivalCurve:
    """The Kaplan-Meier estimate from the ``observed`` event times and the right-``censored``
    times (both >= 0), with its pointwise Greenwood interval (log-log) at ``level``."""
    from scipy import stats

    observed = np.asarray(observed, dtype=float)
    censored = np.asarray(censored, dtype=float)
    if observed.size == 0:
        raise ValueError("Kaplan-Meier needs at least one observed event")
    data = stats.CensoredData(uncensored=observed, right=censored)
    sf = stats.ecdf(data).sf
    with warnings.catch_warnings():  # undefined where S = 0 or 1: nan, said in the docstring
        warnings.simplefilter("ignore", RuntimeWarning)
        ci = sf.confidence_interval(confidence_level=level, method="log-log")
    return SurvivalCurve(times=np.asarray(sf.quantiles, dtype=float),
                         survival=np.asarray(sf.probabilities, dtype=float),
                         low=np.asarray(ci.low.probabilities, dtype=float),
                         high=np.asarray(ci.high.probabilities, dtype=float),
                         level=level, events=int(observed.size), censored=int(censored.size))
