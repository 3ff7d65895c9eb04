"""Non-preemptive priority waits at one M/M/c station (Cobham 1954).

Classes are numbered from 1 (highest priority); all share one exponential service rate and are
served first-come first-served within a class. Times are in the caller's time unit:
``class_rates`` are arrivals per time unit, ``mean_hold`` and the waits are in time units.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

from .erlang import erlang_c

__all__ = ["cobham_waits"]


def cobham_waits(servers: int, class_rates: Sequence[float], mean_hold: float) -> tuple[float, ...]:
    """Mean wait in queue of each priority class, class 1 first.

    W_k = C(c, λ/μ) / (cμ·(1 − σ_{k−1})(1 − σ_k)) with σ_k = Σ_{i<=k} λ_i/(cμ) (Cobham 1954).
    A class whose cumulative load σ_k reaches 1 gets ``inf``; the classes above it keep finite
    waits even when the station as a whole is overloaded, because the agents are then always
    busy (C = 1) and only the lower classes pile up."""
    if isinstance(servers, bool) or int(servers) != servers or servers < 1:
        raise ValueError(f"servers must be a whole number >= 1 (got {servers!r})")
    rates = [float(r) for r in class_rates]
    if not rates:
        raise ValueError("class_rates must name at least one class")
    if any(not math.isfinite(r) or r < 0 for r in rates):
        raise ValueError(f"class_rates must be finite numbers >= 0 (got {tuple(class_rates)!r})")
    mean_hold = float(mean_hold)
    if not math.isfinite(mean_hold) or mean_hold <= 0:
        raise ValueError(f"mean_hold must be a finite number > 0 (got {mean_hold!r})")
    servers = int(servers)
    capacity = servers / mean_hold  # cμ, completions per time unit with every agent busy
    p_all_busy = erlang_c(servers, sum(rates) * mean_hold)
    waits = []
    before = 0.0  # σ_{k−1}
    for rate in rates:
        upto = before + rate / capacity  # σ_k
        if upto >= 1.0:
            waits.append(math.inf)
        else:
            waits.append(p_all_busy / (capacity * (1.0 - before) * (1.0 - upto)))
        before = upto
    return tuple(waits)
