"""Erlang B, Erlang C and Erlang A (Palm) formulas for a single station.

All times share one unit (the scenario's ``time_unit``): ``arrival_rate`` is callers per time
unit, ``mean_hold`` and ``mean_patience`` are in time units, and ``service_level(t)`` takes ``t``
in the same unit. Sources of every formula are in the project's references (Erlang 1917;
Kleinrock 1975; Garnett, Mandelbaum and Reiman 2002; Mandelbaum and Zeltyn 2005).

Everything is computed in log space so that large stations (thousands of agents) and very small
or very large probabilities neither overflow nor lose their relative accuracy.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import special

__all__ = [
    "erlang_b",
    "erlang_c",
    "erlang_b_loss",
    "ErlangC",
    "erlang_c_queue",
    "ErlangA",
    "erlang_a_queue",
]


# --------------------------------------------------------------------------- checks


def _check_servers(servers: int, minimum: int = 0) -> int:
    if isinstance(servers, bool) or int(servers) != servers:
        raise ValueError(f"servers must be a whole number (got {servers!r})")
    if servers < minimum:
        raise ValueError(f"servers must be >= {minimum} (got {servers!r})")
    return int(servers)


def _check_nonnegative(name: str, value: float) -> float:
    value = float(value)
    if not math.isfinite(value) or value < 0:
        raise ValueError(f"{name} must be a finite number >= 0 (got {value!r})")
    return value


def _check_positive(name: str, value: float) -> float:
    value = float(value)
    if not math.isfinite(value) or value <= 0:
        raise ValueError(f"{name} must be a finite number > 0 (got {value!r})")
    return value


# --------------------------------------------------------------------------- Erlang B and C


def _log_inverse_erlang_b(servers: int, offered_load: float) -> float:
    """−log B(servers, offered_load), by the recursion 1/B_n = 1 + (n/A)·(1/B_{n−1}).

    Carrying log(1/B) instead of B keeps tiny blocking probabilities (far below 1e-308) exact in
    relative terms; the usual recursion B_n = A·B_{n−1}/(n + A·B_{n−1}) underflows there."""
    if servers == 0:
        return 0.0
    if offered_load == 0:
        return math.inf
    log_a = math.log(offered_load)
    level = 0.0
    for n in range(1, servers + 1):
        level = _log1p_exp(math.log(n) - log_a + level)
    return level


def _log1p_exp(u: float) -> float:
    """log(1 + e^u) without overflow."""
    return u + math.log1p(math.exp(-u)) if u > 0 else math.log1p(math.exp(u))


def erlang_b(servers: int, offered_load: float) -> float:
    """Blocking probability of the M/M/N/N loss system (Erlang B).

    ``offered_load`` is in erlangs (arrival rate × mean hold). Returns 1 for zero servers and
    0 for zero load."""
    servers = _check_servers(servers)
    offered_load = _check_nonnegative("offered_load", offered_load)
    return math.exp(-_log_inverse_erlang_b(servers, offered_load))


def _log_erlang_c(servers: int, offered_load: float, log_inv_b: float) -> float:
    # 1/C = A/N + (1 − A/N)/B, written as a log-sum so that B ≪ 1 does not overflow.
    ratio = offered_load / servers
    if ratio == 0:
        return -math.inf
    return -float(np.logaddexp(math.log(ratio), math.log1p(-ratio) + log_inv_b))


def erlang_c(servers: int, offered_load: float) -> float:
    """Probability that a caller waits, P(W > 0), in the M/M/N queue (Erlang C).

    ``offered_load`` is in erlangs. Returns 1.0 when ``offered_load >= servers`` (no steady
    state: every caller eventually waits)."""
    servers = _check_servers(servers)
    offered_load = _check_nonnegative("offered_load", offered_load)
    if offered_load >= servers:
        return 1.0
    log_inv_b = _log_inverse_erlang_b(servers, offered_load)
    return math.exp(_log_erlang_c(servers, offered_load, log_inv_b))


def erlang_b_loss(servers: int, arrival_rate: float, mean_hold: float) -> float:
    """Share of callers blocked by an M/G/N/N loss station (Erlang B; insensitive to the
    holding-time distribution beyond its mean). ``arrival_rate`` per time unit, ``mean_hold``
    in the same time unit."""
    arrival_rate = _check_nonnegative("arrival_rate", arrival_rate)
    mean_hold = _check_positive("mean_hold", mean_hold)
    return erlang_b(servers, arrival_rate * mean_hold)


@dataclass(frozen=True)
class ErlangC:
    """Steady state of an M/M/N queue without abandonment.

    Times are in the caller's time unit. ``mean_wait`` is over all callers (those served at once
    count zero); ``mean_queue`` is the time-average number waiting; ``utilisation`` is the busy
    share of the agents (1 when the station is unstable)."""

    servers: int
    arrival_rate: float
    mean_hold: float
    p_wait: float
    mean_wait: float
    mean_queue: float
    utilisation: float

    @property
    def offered_load(self) -> float:
        """Offered load in erlangs."""
        return self.arrival_rate * self.mean_hold

    @property
    def stable(self) -> bool:
        return self.offered_load < self.servers

    def wait_exceeds(self, t: float) -> float:
        """P(W > t) for a caller, t in time units: C·exp(−(Nμ − λ)t)."""
        if t < 0:
            return 1.0
        if not self.stable:
            return 1.0
        drain = self.servers / self.mean_hold - self.arrival_rate
        return self.p_wait * math.exp(-drain * t)

    def service_level(self, t: float) -> float:
        """P(W <= t): share of callers answered within t time units."""
        if t < 0:
            return 0.0
        return 1.0 - self.wait_exceeds(t)

    def to_frame(self) -> pd.DataFrame:
        """One row per figure: columns ``metric`` and ``value``."""
        return _frame(self, ("p_wait", "mean_wait", "mean_queue", "utilisation"))


def erlang_c_queue(servers: int, arrival_rate: float, mean_hold: float) -> ErlangC:
    """Erlang C figures for N agents, Poisson arrivals at ``arrival_rate`` per time unit and
    exponential holds of mean ``mean_hold`` time units."""
    servers = _check_servers(servers, minimum=1)
    arrival_rate = _check_nonnegative("arrival_rate", arrival_rate)
    mean_hold = _check_positive("mean_hold", mean_hold)
    load = arrival_rate * mean_hold
    if load >= servers:
        return ErlangC(servers, arrival_rate, mean_hold, 1.0, math.inf, math.inf, 1.0)
    p_wait = erlang_c(servers, load)
    mean_wait = p_wait / (servers / mean_hold - arrival_rate)
    mean_queue = arrival_rate * mean_wait
    return ErlangC(servers, arrival_rate, mean_hold, p_wait, mean_wait, mean_queue, load / servers)


# --------------------------------------------------------------------------- Erlang A

# Notation of Mandelbaum and Zeltyn: θ = 1/mean patience, x = Nμ/θ, y = λ/θ. A caller who
# arrives to find all N agents busy and j callers waiting does so with probability t_j/A, where
# t_j = y^j / Π_{k=1..j}(x + k) and A = Σ_{j≥0} t_j = x·e^y·y^{−x}·γ(x, y).
#
# Two ways of evaluating A and what depends on it:
# * y < x (callers are patient enough or the station is underloaded): the terms t_j decrease
#   from t_0 = 1, so the positive series is fast and exact; it also avoids the cancellation in
#   P(Ab | W > 0) = 1/(ρA) + 1 − 1/ρ, which for ρ < 1 is a small difference of two numbers.
# * y >= x: the series first grows for about y − x terms, so use the incomplete gamma form, in
#   which γ(x, y) = Γ(x)·P(x, y) with P(x, y) not small, and every term of P(Ab | W > 0) is >= 0.

_SERIES_MARGIN = 60.0  # stop the series once terms are e^−60 below the ones that matter


def _queue_series(x: float, y: float) -> tuple[np.ndarray, np.ndarray]:
    """j = 0..J and log t_j, for y < x (terms strictly decreasing)."""
    log_y = math.log(y)
    floor = min(0.0, log_y - math.log(x + 1.0)) - _SERIES_MARGIN
    pieces = [np.zeros(1)]
    last, start, chunk = 0.0, 1, 256
    while True:
        k = np.arange(start, start + chunk, dtype=float)
        logs = last + np.cumsum(log_y - np.log(x + k))
        pieces.append(logs)
        last, start = float(logs[-1]), start + chunk
        # the j-weighted sum Σ j·t_j needs the extra log(start) of headroom
        if last + math.log(start) < floor:
            break
        chunk *= 2
    log_t = np.concatenate(pieces)
    return np.arange(log_t.size, dtype=float), log_t


@dataclass(frozen=True)
class _PalmTerms:
    """What the Erlang A figures need from A(x, y)."""

    x: float
    y: float
    log_a: float
    p_abandon_if_wait: float


def _palm_terms(
    servers: int, arrival_rate: float, mean_hold: float, patience_rate: float
) -> _PalmTerms:
    x = servers / (mean_hold * patience_rate)
    y = arrival_rate / patience_rate
    rho = y / x
    if y < x:
        j, log_t = _queue_series(x, y)
        log_a = float(special.logsumexp(log_t))
        # P(Ab | W > 0) = Σ j·t_j / (y·A): the chain has π_{N+j} = π_N·t_j, so P(W > 0) = π_N·A
        # and E[Q] = π_N·Σ j·t_j; abandonments flow at θ·E[Q] = λ·P(Ab), hence the ratio.
        log_m = float(special.logsumexp(log_t[1:] + np.log(j[1:])))
        p_ab_wait = math.exp(log_m - math.log(y) - log_a)
    else:
        log_a = (
            math.log(x)
            + y
            - x * math.log(y)
            + float(special.gammaln(x))
            + math.log(float(special.gammainc(x, y)))
        )
        p_ab_wait = math.exp(-log_a) / rho + (1.0 - 1.0 / rho)
    return _PalmTerms(x, y, log_a, min(1.0, max(0.0, p_ab_wait)))


def _served_within_if_wait(terms: _PalmTerms, patience_rate: float, t: float) -> float:
    """P(served and W <= t | W > 0).

    Series form (y < x): given j callers ahead, the caller's wait T is a sum of exponentials of
    rates θ(x+i), i = 0..j, and it is served within t iff T <= t and T < its patience, so the
    probability is E[e^{−θT}; T <= t] = x/(x+j+1)·I_p(j+1, x+1) with p = 1 − e^{−θt}. (The
    tilt e^{−θT} multiplies by Π x+i/(x+i+1) = x/(x+j+1) and raises every rate by θ; a sum of
    exponentials of rates θ(x+1+i), i = 0..j, is the time of the (j+1)-th of x+j+1 unit-rate-θ
    deaths, P = P(Bin(x+j+1, p) >= j+1) = I_p(j+1, x+1), the incomplete beta extending it to
    any real x.)
    Gamma form (y >= x): x·[P(x+1, y) − P(x+1, y·e^{−θt})] / (y·P(x, y))."""
    x, y = terms.x, terms.y
    if y < x:
        j, log_t = _queue_series(x, y)
        p = -math.expm1(-patience_rate * t)
        weights = np.exp(log_t - terms.log_a) * x / (x + j + 1.0)
        return float(np.sum(weights * special.betainc(j + 1.0, x + 1.0, p)))
    z = y * math.exp(-patience_rate * t)
    if z >= x + 1.0:
        # both arguments in the upper tail: subtract the small complements instead
        diff = float(special.gammaincc(x + 1.0, z) - special.gammaincc(x + 1.0, y))
    else:
        diff = float(special.gammainc(x + 1.0, y) - special.gammainc(x + 1.0, z))
    return x * diff / (y * float(special.gammainc(x, y)))


@dataclass(frozen=True)
class ErlangA:
    """Steady state of the M/M/N+M (Erlang A, Palm) queue: callers abandon after an
    exponential patience of mean ``mean_patience``.

    Times are in the caller's time unit. ``mean_wait`` is over all callers, the wait lasting
    until service or abandonment; ``mean_queue`` is the time-average number waiting;
    ``utilisation`` is the busy share of the agents. Defined for any load, overload included."""

    servers: int
    arrival_rate: float
    mean_hold: float
    mean_patience: float
    p_wait: float
    p_abandon: float
    mean_wait: float
    mean_queue: float
    utilisation: float

    @property
    def offered_load(self) -> float:
        """Offered load in erlangs."""
        return self.arrival_rate * self.mean_hold

    def service_level(self, t: float) -> float:
        """P(served and W <= t): share of all callers answered within t time units (callers who
        abandon count against it); tends to 1 − p_abandon as t grows."""
        if t < 0:
            return 0.0
        if self.arrival_rate == 0:
            return 1.0
        rate = 1.0 / self.mean_patience
        terms = _palm_terms(self.servers, self.arrival_rate, self.mean_hold, rate)
        within = _served_within_if_wait(terms, rate, t) if t > 0 else 0.0
        return min(1.0, max(0.0, 1.0 - self.p_wait + self.p_wait * within))

    def to_frame(self) -> pd.DataFrame:
        """One row per figure: columns ``metric`` and ``value``."""
        return _frame(self, ("p_wait", "p_abandon", "mean_wait", "mean_queue", "utilisation"))


def erlang_a_queue(
    servers: int, arrival_rate: float, mean_hold: float, mean_patience: float
) -> ErlangA:
    """Erlang A figures for N agents, Poisson arrivals at ``arrival_rate`` per time unit,
    exponential holds of mean ``mean_hold`` and exponential patience of mean ``mean_patience``
    (both in time units). For no abandonment use :func:`erlang_c_queue`."""
    servers = _check_servers(servers, minimum=1)
    arrival_rate = _check_nonnegative("arrival_rate", arrival_rate)
    mean_hold = _check_positive("mean_hold", mean_hold)
    mean_patience = _check_positive("mean_patience", mean_patience)
    if arrival_rate == 0:
        return ErlangA(servers, 0.0, mean_hold, mean_patience, 0.0, 0.0, 0.0, 0.0, 0.0)
    rate = 1.0 / mean_patience
    terms = _palm_terms(servers, arrival_rate, mean_hold, rate)
    log_inv_b = _log_inverse_erlang_b(servers, arrival_rate * mean_hold)
    # P(W > 0) = A·E / (1 + (A − 1)·E) = expit(log A + log E − log(1 − E)), E = Erlang B
    log_one_minus_e = math.log(-math.expm1(-log_inv_b))
    p_wait = float(special.expit(terms.log_a - log_inv_b - log_one_minus_e))
    p_abandon = terms.p_abandon_if_wait * p_wait
    # Abandonments leave at θ per waiting caller, so λ·P(Ab) = θ·E[Q]; with Little, E[W] = E[Q]/λ.
    mean_queue = arrival_rate * p_abandon * mean_patience
    mean_wait = p_abandon * mean_patience
    utilisation = arrival_rate * (1.0 - p_abandon) * mean_hold / servers
    return ErlangA(
        servers, arrival_rate, mean_hold, mean_patience,
        p_wait, p_abandon, mean_wait, mean_queue, min(1.0, utilisation),
    )


def _frame(result: object, names: tuple[str, ...]) -> pd.DataFrame:
    values = [float(getattr(result, n)) for n in names]
    return pd.DataFrame({"metric": list(names), "value": values})
