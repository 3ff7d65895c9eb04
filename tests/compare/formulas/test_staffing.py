"""Square-root staffing, the Halfin–Whitt function and exact minimum staffing.

Sources: Halfin and Whitt (1981), Operations Research 29(3):567–588; Erlang C and Erlang A as in
references.md. Brute-force loops below use only erlang_c_queue / erlang_a_queue, which are
themselves checked against a birth–death chain in test_erlang.py.
"""

from __future__ import annotations

import math

import pytest
from scipy import stats

from compare.formulas.erlang import erlang_a_queue, erlang_c, erlang_c_queue
from compare.formulas.staffing import (
    erlang_a_min_servers,
    erlang_c_min_servers,
    halfin_whitt_alpha,
    square_root_staffing,
)


def test_halfin_whitt_alpha_recomputed():
    # references.md: α(1) = 0.223361 (recomputed)
    assert halfin_whitt_alpha(1.0) == pytest.approx(0.223361, abs=5e-7)


@pytest.mark.parametrize("beta", [0.1, 0.5, 2.0, 5.0])
def test_halfin_whitt_alpha_against_scipy_normal(beta):
    # Halfin and Whitt (1981): α(β) = [1 + β·Φ(β)/φ(β)]^{−1}, Φ and φ from scipy.stats.norm
    expected = 1 / (1 + beta * stats.norm.cdf(beta) / stats.norm.pdf(beta))
    assert halfin_whitt_alpha(beta) == pytest.approx(expected, rel=1e-12)


def test_halfin_whitt_alpha_ends():
    # β = 0: N = R is critical loading, everyone waits in the limit (α = 1); large β: nobody waits
    assert halfin_whitt_alpha(0.0) == 1.0
    assert 0.0 <= halfin_whitt_alpha(40.0) < 1e-300
    with pytest.raises(ValueError):
        halfin_whitt_alpha(-0.5)


def test_erlang_c_approaches_halfin_whitt_limit():
    # Halfin and Whitt (1981): C(R + β√R, R) → α(β) as R grows. With β = 1 and R a square, N is
    # a whole number. The gap closes like 1/√R (common practice, from memory), so each 100-fold
    # increase in R divides it by about 10.
    alpha = halfin_whitt_alpha(1.0)
    gaps = [erlang_c(int(r + math.isqrt(r)), float(r)) - alpha for r in (10**2, 10**4, 10**6)]
    assert all(g > 0 for g in gaps)
    assert 8 < gaps[0] / gaps[1] < 12
    assert 8 < gaps[1] / gaps[2] < 12


def test_square_root_staffing_by_hand():
    # by hand: R = 100, β = 1 → 100 + 10 = 110 exactly
    assert square_root_staffing(100.0, 1.0, 1.0) == 110
    # R = 90, β = 0.5 → 90 + 0.5·√90 = 94.74 → 95
    assert square_root_staffing(90.0, 1.0, 0.5) == 95
    # R = 0.1·30 = 3 (3.0000000000000004 in floating point), β = 0 → 3, not 4
    assert square_root_staffing(0.1, 30.0, 0.0) == 3
    # negative β (efficiency-driven staffing with abandonment): R = 100, β = −1 → 90
    assert square_root_staffing(100.0, 1.0, -1.0) == 90
    assert square_root_staffing(1.0, 1.0, -5.0) == 0


@pytest.mark.parametrize(
    "goal, expected",
    [(0.5, 1), (0.9, 2), (0.977, 2), (0.978, 3), (0.98, 3)],
)
def test_erlang_c_min_servers_by_hand(goal, expected):
    # Derived by hand from the Hillier–Lieberman example rates (λ = 2/h, μ = 3/h, so R = 2/3),
    # target "answered within 0.5 h"; SL(s) = 1 − C·exp(−(sμ − λ)·0.5):
    #   s = 1: C = ρ = 2/3,                  SL = 1 − (2/3)e^{−0.5} = 0.595653
    #   s = 2: C = 1 − P0 − P1 = 1/6,        SL = 1 − (1/6)e^{−2}   = 0.977444
    #   s = 3: terms 1, 2/3, 2/9, (4/81)·(9/7) = 4/63, sum 41/21, C = (4/63)/(41/21) = 4/123,
    #                                        SL = 1 − (4/123)e^{−3.5} = 0.999018
    assert erlang_c_min_servers(2.0, 1 / 3, 0.5, goal) == expected


def test_erlang_c_min_servers_answer_at_once():
    # by hand: within = 0 means SL = 1 − C; with the rates above 1 − C is 1/3 (s = 1), 5/6 (s = 2)
    assert erlang_c_min_servers(2.0, 1 / 3, 0.0, 0.8) == 2


def brute_erlang_c(arrival_rate, mean_hold, within, goal):
    n = math.floor(arrival_rate * mean_hold) + 1
    while erlang_c_queue(n, arrival_rate, mean_hold).service_level(within) < goal:
        n += 1
    return n


@pytest.mark.parametrize(
    "arrival_rate, mean_hold, within, goal",
    [
        (10.0, 3.0, 0.5, 0.8),
        (1.0, 3.0, 0.0, 0.5),
        (250.0, 0.2, 0.05, 0.9),
        (20.0, 4.5, 1 / 3, 0.8),
        (0.05, 180.0, 20.0, 0.8),
        (400.0, 3.0, 0.25, 0.95),
    ],
)
def test_erlang_c_min_servers_against_brute_loop(arrival_rate, mean_hold, within, goal):
    answer = erlang_c_min_servers(arrival_rate, mean_hold, within, goal)
    assert answer == brute_erlang_c(arrival_rate, mean_hold, within, goal)


def brute_erlang_a(arrival_rate, mean_hold, mean_patience, within, goal, max_abandon):
    n = 1
    while True:
        result = erlang_a_queue(n, arrival_rate, mean_hold, mean_patience)
        ok = max_abandon is None or result.p_abandon <= max_abandon
        ok = ok and (within is None or result.service_level(within) >= goal)
        if ok:
            return n
        n += 1


@pytest.mark.parametrize(
    "arrival_rate, mean_hold, mean_patience, within, goal, max_abandon",
    [
        (48.0, 1.0, 1.0, None, None, 0.04),
        (48.0, 1.0, 1.0, 0.1, 0.8, None),
        (100.0, 1.0, 1.0, None, None, 0.2),  # may staff below the offered load
        (10.0, 3.0, 2.0, 0.5, 0.8, 0.03),
        (0.5, 10.0, 5.0, 1.0, 0.9, None),
        (30.0, 1.0, 0.5, 0.0, 0.6, None),
    ],
)
def test_erlang_a_min_servers_against_brute_loop(
    arrival_rate, mean_hold, mean_patience, within, goal, max_abandon
):
    answer = erlang_a_min_servers(
        arrival_rate, mean_hold, mean_patience, within=within, goal=goal, max_abandon=max_abandon
    )
    brute = brute_erlang_a(arrival_rate, mean_hold, mean_patience, within, goal, max_abandon)
    assert answer == brute


def test_erlang_a_min_servers_recomputed_case():
    # references.md (recomputed): λ = 48, μ = 1, θ = 1, N = 50 gives P(Ab) = 0.039418 < 0.04,
    # and N = 49 must not, or 50 would not be the smallest
    assert erlang_a_queue(49, 48.0, 1.0, 1.0).p_abandon > 0.04
    assert erlang_a_min_servers(48.0, 1.0, 1.0, max_abandon=0.04) == 50


def test_staffing_bad_input_is_refused():
    with pytest.raises(ValueError):
        erlang_c_min_servers(1.0, 1.0, 0.5, 1.0)  # a goal of 100 % is never met
    with pytest.raises(ValueError):
        erlang_a_min_servers(1.0, 1.0, 1.0)  # no target
    with pytest.raises(ValueError):
        erlang_a_min_servers(1.0, 1.0, 1.0, within=0.5)  # within without goal
    with pytest.raises(ValueError):
        erlang_a_min_servers(1.0, 1.0, 1.0, max_abandon=0.0)
    with pytest.raises(ValueError):
        square_root_staffing(-1.0, 1.0, 1.0)
