"""Staffing rules of thumb and exact minimum staffing for one station.

Times are in the caller's time unit: ``arrival_rate`` per time unit; ``mean_hold``,
``mean_patience`` and ``within`` in time units. Offered load R = arrival_rate × mean_hold.
Sources: Halfin and Whitt (1981) for the square-root rule; Erlang C and Erlang A as in
:mod:`compare.erlang`.
"""

from __future__ import annotations

import math

from scipy import special

from .erlang import (
    _check_nonnegative,
    _check_positive,
    _log_erlang_c,
    _log1p_exp,
    erlang_a_queue,
)

__all__ = [
    "halfin_whitt_alpha",
    "square_root_staffing",
    "erlang_c_min_servers",
    "erlang_a_min_servers",
]

_MAX_SERVERS = 2**40  # beyond this a target is treated as unreachable


def halfin_whitt_alpha(beta: float) -> float:
    """Limit of P(W > 0) under N = R + β√R staffing as R grows (Halfin and Whitt 1981):
    α(β) = [1 + β·Φ(β)/φ(β)]^{−1}, for β >= 0."""
    beta = float(beta)
    if not beta >= 0 or math.isinf(beta):
        raise ValueError(f"beta must be a finite number >= 0 (got {beta!r})")
    if beta == 0:
        return 1.0
    # β·Φ/φ grows like e^{β²/2}; in logs it neither overflows nor underflows
    log_pdf = -beta * beta / 2 - 0.5 * math.log(2 * math.pi)
    log_ratio = math.log(beta) + float(special.log_ndtr(beta)) - log_pdf
    return float(special.expit(-log_ratio))


def _ceil(value: float) -> int:
    # R = λ·h carries rounding noise (0.1 × 30 = 3.0000000000000004); do not let it cost an agent
    return math.ceil(value - 1e-9 * max(1.0, abs(value)))


def square_root_staffing(arrival_rate: float, mean_hold: float, beta: float) -> int:
    """Agents by the square-root rule: ceil(R + β√R), R = arrival_rate × mean_hold, never
    below 0. β may be negative (efficiency-driven staffing with abandonment)."""
    arrival_rate = _check_nonnegative("arrival_rate", arrival_rate)
    mean_hold = _check_positive("mean_hold", mean_hold)
    beta = float(beta)
    if not math.isfinite(beta):
        raise ValueError(f"beta must be finite (got {beta!r})")
    load = arrival_rate * mean_hold
    return max(0, _ceil(load + beta * math.sqrt(load)))


def _check_goal(goal: float) -> float:
    goal = float(goal)
    if not 0 <= goal < 1:
        raise ValueError(f"goal must be a share in [0, 1) (got {goal!r})")
    return goal


def erlang_c_min_servers(arrival_rate: float, mean_hold: float, within: float, goal: float) -> int:
    """Smallest number of agents N > R whose Erlang C service level P(W <= within) is at least
    ``goal`` (a share in [0, 1)). ``within`` in time units.

    Walks N upward carrying the Erlang B recursion, so the cost is one pass up to the answer."""
    arrival_rate = _check_nonnegative("arrival_rate", arrival_rate)
    mean_hold = _check_positive("mean_hold", mean_hold)
    within = _check_nonnegative("within", within)
    goal = _check_goal(goal)
    load = arrival_rate * mean_hold
    if load == 0:
        return 1
    log_load = math.log(load)
    log_inv_b = 0.0  # −log B(n, R), starting at n = 0
    n = 0
    while n < _MAX_SERVERS:
        n += 1
        log_inv_b = _log1p_exp(math.log(n) - log_load + log_inv_b)
        if n <= load:
            continue
        drain = n / mean_hold - arrival_rate
        log_miss = _log_erlang_c(n, load, log_inv_b) - drain * within  # log P(W > within)
        if 1.0 - math.exp(log_miss) >= goal:
            return n
    raise ValueError("service-level goal not reachable")


def erlang_a_min_servers(
    arrival_rate: float,
    mean_hold: float,
    mean_patience: float,
    within: float | None = None,
    goal: float | None = None,
    max_abandon: float | None = None,
) -> int:
    """Smallest number of agents (>= 1) meeting every given Erlang A target: service level
    P(served and W <= within) >= ``goal`` and/or P(Ab) <= ``max_abandon``. Times in time units.

    Both figures improve as agents are added, so the answer is bracketed by doubling and then
    found by bisection."""
    arrival_rate = _check_nonnegative("arrival_rate", arrival_rate)
    mean_hold = _check_positive("mean_hold", mean_hold)
    mean_patience = _check_positive("mean_patience", mean_patience)
    if (within is None) != (goal is None):
        raise ValueError("within and goal go together: give both or neither")
    if within is None and max_abandon is None:
        raise ValueError("give a service-level target (within, goal), max_abandon, or both")
    if within is not None:
        within = _check_nonnegative("within", within)
        goal = _check_goal(goal)
    if max_abandon is not None:
        max_abandon = float(max_abandon)
        if not 0 < max_abandon <= 1:
            raise ValueError(f"max_abandon must be a share in (0, 1] (got {max_abandon!r})")

    def meets(servers: int) -> bool:
        result = erlang_a_queue(servers, arrival_rate, mean_hold, mean_patience)
        if max_abandon is not None and result.p_abandon > max_abandon:
            return False
        return within is None or result.service_level(within) >= goal

    failing, passing = 0, max(1, _ceil(arrival_rate * mean_hold))
    while not meets(passing):
        failing, passing = passing, 2 * passing
        if passing > _MAX_SERVERS:
            raise ValueError("Erlang A target not reachable")
    while passing - failing > 1:
        middle = (failing + passing) // 2
        if meets(middle):
            passing = middle
        else:
            failing = middle
    return passing
