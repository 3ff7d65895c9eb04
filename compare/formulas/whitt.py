"""Whitt's (2006) fluid model of a many-server station with abandonment (G/GI/s+GI).

Times are in the caller's time unit: ``arrival_rate`` is callers per time unit, ``mean_hold``
and the patience distribution are in time units. The fluid model keeps only the arrival rate,
the capacity s·μ and the patience CDF F:

* λ <= sμ: no queue, no abandonment, throughput λ;
* λ > sμ: every agent busy, throughput sμ, P(Ab) = 1 − sμ/λ; the wait w of served callers
  solves λ(1 − F(w)) = sμ and the queue is q = λ∫₀^w (1 − F(u)) du.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import pandas as pd
from scipy import integrate, optimize

__all__ = ["WhittFluid", "whitt_fluid"]

_TIE = 1e-300  # value given to "F(u) already at the target", so the root is the CDF's quantile


@dataclass(frozen=True)
class WhittFluid:
    """Fluid steady state of one station (Whitt 2006).

    ``throughput`` is served callers per time unit; ``p_abandon`` the share abandoning;
    ``wait_served`` the wait of served callers in time units (``inf`` if overloaded without
    patience); ``queue`` the number waiting (``inf`` likewise); ``utilisation`` the busy share of
    the agents; ``overloaded`` whether λ > sμ."""

    arrival_rate: float
    servers: float
    mean_hold: float
    throughput: float
    p_abandon: float
    wait_served: float
    queue: float
    utilisation: float
    overloaded: bool

    def to_frame(self) -> pd.DataFrame:
        """One row per figure: columns ``metric`` and ``value``."""
        names = ("throughput", "p_abandon", "wait_served", "queue", "utilisation")
        values = [float(getattr(self, n)) for n in names]
        return pd.DataFrame({"metric": list(names), "value": values})


def _as_cdf(patience_cdf: object) -> Callable[[float], float] | None:
    if patience_cdf is None:
        return None
    # a fluid.distributions object is accepted as well as its bound .cdf
    cdf = getattr(patience_cdf, "cdf", patience_cdf)
    if not callable(cdf):
        raise ValueError(f"patience_cdf must be a callable F(t) or None (got {patience_cdf!r})")
    return cdf


def _quantile(cdf: Callable[[float], float], target: float) -> float:
    """Smallest w >= 0 with F(w) >= target (0 < target < 1), by brentq.

    On a stretch where F is flat at exactly ``target`` every point solves λ(1 − F(w)) = sμ; the
    smallest one is taken (callers need wait no longer than that), so F(u) == target counts as
    "above" by a hair."""
    def gap(u: float) -> float:
        excess = float(cdf(u)) - target
        return excess if excess < 0 else max(excess, _TIE)

    if gap(0.0) > 0:
        return 0.0
    high = 1.0
    while gap(high) < 0:
        high *= 2.0
        if high > 1e300:
            raise ValueError("patience CDF never reaches the abandonment share needed")
    return float(optimize.brentq(gap, 0.0, high, xtol=1e-300, maxiter=2000))


def whitt_fluid(
    arrival_rate: float,
    servers: float,
    mean_hold: float,
    patience_cdf: Callable[[float], float] | None,
) -> WhittFluid:
    """Fluid figures for ``servers`` agents (may be fractional), arrivals at ``arrival_rate`` per
    time unit, mean hold ``mean_hold`` and patience CDF ``patience_cdf`` (time units), or
    ``None`` when callers never abandon."""
    arrival_rate = float(arrival_rate)
    servers = float(servers)
    mean_hold = float(mean_hold)
    if not math.isfinite(arrival_rate) or arrival_rate < 0:
        raise ValueError(f"arrival_rate must be a finite number >= 0 (got {arrival_rate!r})")
    if not math.isfinite(servers) or servers < 0:
        raise ValueError(f"servers must be a finite number >= 0 (got {servers!r})")
    if not math.isfinite(mean_hold) or mean_hold <= 0:
        raise ValueError(f"mean_hold must be a finite number > 0 (got {mean_hold!r})")
    cdf = _as_cdf(patience_cdf)
    capacity = servers / mean_hold
    if arrival_rate <= capacity:
        load = arrival_rate / capacity if capacity > 0 else 0.0
        return WhittFluid(
            arrival_rate, servers, mean_hold, arrival_rate, 0.0, 0.0, 0.0, load, False
        )
    if cdf is None:
        # nobody leaves, so the fluid queue grows without bound and no wait settles
        return WhittFluid(
            arrival_rate, servers, mean_hold, capacity, 0.0, math.inf, math.inf, 1.0, True
        )
    share = 1.0 - capacity / arrival_rate
    wait = _quantile(cdf, share)
    if wait > 0:
        survival, _ = integrate.quad(lambda u: 1.0 - float(cdf(u)), 0.0, wait, limit=200)
    else:
        survival = 0.0
    return WhittFluid(
        arrival_rate, servers, mean_hold, capacity, share, wait, arrival_rate * survival, 1.0, True
    )
