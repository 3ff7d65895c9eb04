"""Erlang B, C and A against published values and against a birth–death chain built here.

Sources (see /work/shared/references.md): Erlang (1917); Kleinrock, Queueing Systems I (1975);
Hillier and Lieberman, Introduction to Operations Research (worked example, from memory);
Garnett, Mandelbaum and Reiman (2002); Mandelbaum and Zeltyn (2005). Values marked
"recomputed" were computed independently (birth–death chain or high-precision sum).
"""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest
from scipy import linalg, optimize, stats

from compare.formulas.erlang import (
    ErlangA,
    ErlangC,
    erlang_a_queue,
    erlang_b,
    erlang_b_loss,
    erlang_c,
    erlang_c_queue,
)

# --------------------------------------------------------------------------- reference chain


def chain_generator(servers, arrival_rate, service_rate, patience_rate, states):
    """Generator of the M/M/N+M birth–death chain on 0..states (θ = 0 gives M/M/N),
    truncated by blocking arrivals in the last state."""
    n = np.arange(states + 1)
    death = np.minimum(n, servers) * service_rate + np.maximum(n - servers, 0) * patience_rate
    q = np.zeros((states + 1, states + 1))
    q[n[:-1], n[:-1] + 1] = arrival_rate
    q[n[1:], n[1:] - 1] = death[1:]
    q[n, n] = -q.sum(axis=1)
    return q


def chain_stationary(servers, arrival_rate, service_rate, patience_rate, states):
    """Brute force: solve π·Q = 0 with Σπ = 1 by a dense linear solve."""
    q = chain_generator(servers, arrival_rate, service_rate, patience_rate, states)
    system = q.T.copy()
    system[-1, :] = 1.0  # replace one (redundant) balance equation by the normalisation
    rhs = np.zeros(states + 1)
    rhs[-1] = 1.0
    pi = np.linalg.solve(system, rhs)
    assert np.all(pi > -1e-12)
    return pi


def chain_stationary_large(servers, arrival_rate, service_rate, patience_rate, states):
    """For stations too big for a dense solve: the cut equations λ·π_{n−1} = d_n·π_n summed in
    logs (still the chain itself, not the Erlang formulas)."""
    n = np.arange(1, states + 1)
    death = np.minimum(n, servers) * service_rate + np.maximum(n - servers, 0) * patience_rate
    log_pi = np.concatenate([[0.0], np.cumsum(np.log(arrival_rate) - np.log(death))])
    log_pi -= np.logaddexp.reduce(log_pi)
    return np.exp(log_pi)


def chain_figures(pi, servers, arrival_rate, patience_rate):
    n = np.arange(pi.size)
    waiting = np.maximum(n - servers, 0)
    p_wait = pi[servers:].sum()  # PASTA: an arrival sees the stationary state
    mean_queue = float(waiting @ pi)
    return {
        "p_wait": p_wait,
        "mean_queue": mean_queue,
        "mean_wait": mean_queue / arrival_rate,  # Little's law
        "p_abandon": patience_rate * mean_queue / arrival_rate,  # abandon flow θ·E[Q] over λ
    }


def chain_served_within(pi, servers, service_rate, patience_rate, t):
    """P(served and W <= t) for an arriving caller, from the chain.

    Derivation: by PASTA the caller sees state n with probability π_n. If n < N an agent is
    free and it is served at once (W = 0). If n >= N there are j = n − N callers ahead. Under
    FCFS only those ahead matter: with i ahead, the next move i → i − 1 happens at rate
    Nμ + iθ (an agent finishes and the head of the line is taken, or one of the i ahead
    abandons); with i = 0 an agent finishing (rate Nμ) takes our caller ("served"); at every
    moment our caller itself abandons at rate θ ("abandoned"). That is an absorbing chain on
    {0..J, served, abandoned}; P(served by t | start j) = [exp(G·t)]_{j, served}. The chain only
    moves down, so it is exact for every start j <= J (no truncation in this part)."""
    jobs = pi.size - servers  # possible numbers ahead: 0 .. jobs − 1
    served, abandoned = jobs, jobs + 1
    g = np.zeros((jobs + 2, jobs + 2))
    for i in range(jobs):
        g[i, i - 1 if i > 0 else served] = servers * service_rate + i * patience_rate
        g[i, abandoned] = patience_rate
        g[i, i] = -g[i].sum()
    served_by_t = linalg.expm(g * t)[:jobs, served]
    return float(pi[:servers].sum() + pi[servers:] @ served_by_t)


# --------------------------------------------------------------------------- Erlang B


def test_erlang_b_recomputed_value():
    # references.md, Erlang B: B(10, 5) = 0.018385 (recomputed)
    assert erlang_b(10, 5.0) == pytest.approx(0.018385, abs=5e-7)


@pytest.mark.parametrize(
    "servers, load", [(1, 0.5), (10, 5.0), (30, 25.0), (80, 100.0), (200, 150.0)]
)
def test_erlang_b_matches_truncated_poisson(servers, load):
    # Erlang (1917): B = (A^N/N!) / Σ_{k<=N} A^k/k! = Poisson pmf(N) / Poisson cdf(N) (SciPy)
    expected = stats.poisson.pmf(servers, load) / stats.poisson.cdf(servers, load)
    assert erlang_b(servers, load) == pytest.approx(expected, rel=1e-11)


@pytest.mark.parametrize(
    "servers, load_at_one_percent",
    # classical table of offered load for 1 % blocking (from memory, recomputed), references.md
    [(10, "4.461"), (20, "12.03"), (50, "37.90"), (100, "84.06")],
)
def test_erlang_b_one_percent_table(servers, load_at_one_percent):
    load = optimize.brentq(lambda a: erlang_b(servers, a) - 0.01, 1e-6, servers, xtol=1e-12)
    decimals = len(load_at_one_percent.split(".")[1])
    assert f"{load:.{decimals}f}" == load_at_one_percent


def test_erlang_b_edges_and_loss_convenience():
    # B(0, A) = 1 and B(N, 0) = 0 straight from the definition; erlang_b_loss is B(N, λ·h)
    assert erlang_b(0, 3.0) == 1.0
    assert erlang_b(4, 0.0) == 0.0
    assert erlang_b_loss(10, 2.5, 2.0) == erlang_b(10, 5.0)


def test_erlang_b_and_c_high_precision_large_station():
    # mpmath (50 digits) direct sums, N = 500: near-critical and far-tail loads
    for servers, load in [(500, 480.0), (500, 300.0)]:
        with mpmath.workdps(50):
            a = mpmath.mpf(load)
            terms = [a**k / mpmath.factorial(k) for k in range(servers + 1)]
            b_ref = terms[-1] / mpmath.fsum(terms)
            last = terms[-1] * servers / (servers - a)
            c_ref = last / (mpmath.fsum(terms[:-1]) + last)  # Kleinrock (1975), M/M/m P(queue)
        assert erlang_b(servers, load) == pytest.approx(float(b_ref), rel=1e-11)
        assert erlang_c(servers, load) == pytest.approx(float(c_ref), rel=1e-11)


# --------------------------------------------------------------------------- Erlang C


def test_erlang_c_hillier_lieberman_emergency_room():
    # Hillier and Lieberman, emergency-room example (from memory): λ = 2/h, μ = 3/h
    one = erlang_c_queue(1, 2.0, 1 / 3)
    assert one.mean_wait == pytest.approx(2 / 3, rel=1e-12)  # Wq = 2/3 h
    assert one.mean_queue == pytest.approx(4 / 3, rel=1e-12)  # Lq = 4/3
    two = erlang_c_queue(2, 2.0, 1 / 3)
    assert two.mean_wait == pytest.approx(1 / 24, rel=1e-12)  # Wq = 1/24 h
    assert two.mean_queue == pytest.approx(1 / 12, rel=1e-12)  # Lq = 1/12
    assert two.wait_exceeds(0.5) == pytest.approx(math.exp(-2) / 6, rel=1e-12)  # (1/6)e^-2
    assert two.wait_exceeds(0.5) == pytest.approx(0.022556, abs=5e-7)
    # P0 = 1/2 (same example): P(W > 0) = 1 − P0 − P1 with P1 = (λ/μ)·P0 = 1/3
    assert two.p_wait == pytest.approx(1 - 1 / 2 - 1 / 3, rel=1e-12)


def test_erlang_c_recomputed_value():
    # references.md, Erlang C recomputed: λ = 1/min, hold 3 min, N = 5
    result = erlang_c_queue(5, 1.0, 3.0)
    assert result.p_wait == pytest.approx(0.236152, abs=5e-7)
    assert result.mean_wait == pytest.approx(0.354227, abs=5e-7)
    assert result.utilisation == pytest.approx(0.6, rel=1e-12)
    assert erlang_c(5, 3.0) == result.p_wait


@pytest.mark.parametrize(
    "servers, arrival_rate, mean_hold",
    [(1, 0.5, 1.0), (5, 1.0, 3.0), (20, 17.0, 1.0), (50, 45.0, 1.0)],
)
def test_erlang_c_against_birth_death_chain(servers, arrival_rate, mean_hold):
    # brute-force chain truncated 600 states above N: ρ <= 0.9, so ρ^600 < 1e-27 is lost
    pi = chain_stationary(servers, arrival_rate, 1 / mean_hold, 0.0, servers + 600)
    ref = chain_figures(pi, servers, arrival_rate, 0.0)
    result = erlang_c_queue(servers, arrival_rate, mean_hold)
    assert result.p_wait == pytest.approx(ref["p_wait"], rel=1e-9)
    assert result.mean_wait == pytest.approx(ref["mean_wait"], rel=1e-8)
    assert result.mean_queue == pytest.approx(ref["mean_queue"], rel=1e-8)
    for t in (0.0, 0.2 * mean_hold, mean_hold):
        chain = chain_served_within(pi, servers, 1 / mean_hold, 0.0, t)
        assert result.service_level(t) == pytest.approx(chain, abs=1e-9)
        assert result.wait_exceeds(t) == pytest.approx(1 - chain, abs=1e-9)


def test_erlang_c_unstable():
    # no steady state at load >= N: everyone waits, waits grow without bound (references.md)
    result = erlang_c_queue(3, 3.0, 1.0)
    assert (result.p_wait, result.mean_wait, result.mean_queue) == (1.0, math.inf, math.inf)
    assert result.service_level(10.0) == 0.0
    assert result.wait_exceeds(10.0) == 1.0
    assert erlang_c(3, 3.5) == 1.0


def test_erlang_c_results_are_objects_with_a_table():
    result = erlang_c_queue(5, 1.0, 3.0)
    assert isinstance(result, ErlangC)
    frame = result.to_frame()
    assert list(frame["metric"]) == ["p_wait", "mean_wait", "mean_queue", "utilisation"]
    assert frame["value"].iloc[0] == result.p_wait
    with pytest.raises(AttributeError):
        result.p_wait = 0.0  # frozen


# --------------------------------------------------------------------------- Erlang A


def test_erlang_a_recomputed_value():
    # references.md, Erlang A recomputed: λ = 48, μ = 1, θ = 1, N = 50
    result = erlang_a_queue(50, 48.0, 1.0, 1.0)
    assert result.p_wait == pytest.approx(0.405404, abs=5e-7)
    assert result.p_abandon == pytest.approx(0.039418, abs=5e-7)
    assert result.mean_wait == pytest.approx(result.p_abandon / 1.0, rel=1e-12)  # E[W] = P(Ab)/θ
    assert result.mean_queue == pytest.approx(48.0 * result.mean_wait, rel=1e-12)  # Little


def test_erlang_a_with_patience_equal_to_hold_is_a_poisson_count():
    # Derived by hand: with θ = μ the death rate is min(n,N)μ + (n−N)⁺θ = nμ in every state, the
    # M/M/∞ chain, so the number present is Poisson(λ/μ) (SciPy). Then P(W > 0) = P(X >= N) and
    # P(Ab) = θ·E[(X − N)⁺]/λ.
    servers, arrival_rate = 50, 48.0
    assert erlang_a_queue(servers, arrival_rate, 1.0, 1.0).p_wait == pytest.approx(
        stats.poisson.sf(servers - 1, arrival_rate), rel=1e-11
    )
    k = np.arange(servers, 400)
    excess = float(((k - servers) * stats.poisson.pmf(k, arrival_rate)).sum())
    assert erlang_a_queue(servers, arrival_rate, 1.0, 1.0).p_abandon == pytest.approx(
        excess / arrival_rate, rel=1e-10
    )


# (N, λ, mean hold, mean patience, states above N kept in the chain)
ERLANG_A_CASES = [
    (50, 48.0, 1.0, 1.0, 150),  # underloaded, y < x (series form)
    (3, 2.0, 1.0, 0.2, 80),  # impatient callers, y < x
    (10, 12.0, 1.0, 0.5, 100),  # overloaded, y >= x (incomplete gamma form)
    (20, 30.0, 1.0, 2.0, 300),  # overloaded, patient callers
    (1, 2.0, 1.0, 10.0, 400),  # one agent, overloaded
]


@pytest.mark.parametrize("servers, arrival_rate, mean_hold, mean_patience, extra", ERLANG_A_CASES)
def test_erlang_a_against_birth_death_chain(servers, arrival_rate, mean_hold, mean_patience, extra):
    # truncation: far enough above N that the last state carries nothing the dense solve can
    # see (its own round-off is ~1e-17; checked below)
    theta = 1 / mean_patience
    pi = chain_stationary(servers, arrival_rate, 1 / mean_hold, theta, servers + extra)
    assert pi[-1] < 1e-15
    ref = chain_figures(pi, servers, arrival_rate, theta)
    result = erlang_a_queue(servers, arrival_rate, mean_hold, mean_patience)
    for name in ("p_wait", "p_abandon", "mean_wait", "mean_queue"):
        assert getattr(result, name) == pytest.approx(ref[name], rel=1e-9), name
    # utilisation: served flow λ(1 − P(Ab)) times the hold, per agent = E[min(n, N)]/N
    busy = float(np.minimum(np.arange(pi.size), servers) @ pi) / servers
    assert result.utilisation == pytest.approx(busy, rel=1e-9)


@pytest.mark.parametrize("servers, arrival_rate, mean_hold, mean_patience, extra", ERLANG_A_CASES)
def test_erlang_a_service_level_against_chain(
    servers, arrival_rate, mean_hold, mean_patience, extra
):
    theta = 1 / mean_patience
    pi = chain_stationary(servers, arrival_rate, 1 / mean_hold, theta, servers + extra)
    result = erlang_a_queue(servers, arrival_rate, mean_hold, mean_patience)
    for t in (0.0, 0.05, 0.3, 1.0, 4.0):
        expected = chain_served_within(pi, servers, 1 / mean_hold, theta, t)
        assert result.service_level(t) == pytest.approx(expected, abs=1e-9), t
    # limit: every caller is eventually served or abandons (references.md, Erlang A service level)
    assert result.service_level(1e6) == pytest.approx(1 - result.p_abandon, abs=1e-12)
    assert result.service_level(0.0) == pytest.approx(1 - result.p_wait, abs=1e-15)


@pytest.mark.parametrize(
    "servers, arrival_rate, mean_patience",
    [(1000, 950.0, 50.0), (1000, 1020.0, 10.0), (2000, 2000.0, 1.0)],
)
def test_erlang_a_large_stations_against_chain(servers, arrival_rate, mean_patience):
    # big stations, both forms: cut equations of the chain summed in logs (no dense solve)
    theta = 1 / mean_patience
    pi = chain_stationary_large(servers, arrival_rate, 1.0, theta, servers + 20000)
    ref = chain_figures(pi, servers, arrival_rate, theta)
    result = erlang_a_queue(servers, arrival_rate, 1.0, mean_patience)
    assert result.p_wait == pytest.approx(ref["p_wait"], rel=1e-9)
    assert result.p_abandon == pytest.approx(ref["p_abandon"], rel=1e-8)


def test_erlang_a_is_continuous_where_the_two_forms_meet():
    # the series form is used for y < x and the incomplete-gamma form for y >= x; both are the
    # same function A(x, y) (references.md), so nothing may jump at y = x (here x = y = 100)
    below = erlang_a_queue(100, 100.0 * (1 - 1e-10), 1.0, 1.0)
    above = erlang_a_queue(100, 100.0 * (1 + 1e-10), 1.0, 1.0)
    for name in ("p_wait", "p_abandon", "mean_queue"):
        assert getattr(below, name) == pytest.approx(getattr(above, name), rel=1e-7), name
    for t in (0.01, 0.1, 1.0):
        assert below.service_level(t) == pytest.approx(above.service_level(t), abs=1e-8)


def test_erlang_a_tends_to_erlang_c_as_patience_grows():
    # θ → 0 recovers M/M/N (Garnett, Mandelbaum and Reiman 2002); P(Ab) is O(θ), here ~1e-9
    patient = erlang_a_queue(50, 40.0, 1.0, 1e7)
    plain = erlang_c_queue(50, 40.0, 1.0)
    assert patient.p_wait == pytest.approx(plain.p_wait, rel=1e-6)
    assert patient.mean_wait == pytest.approx(plain.mean_wait, rel=1e-6)
    assert patient.p_abandon < 1e-8
    assert patient.service_level(0.05) == pytest.approx(plain.service_level(0.05), abs=1e-6)


def test_erlang_a_edges_and_table():
    idle = erlang_a_queue(3, 0.0, 1.0, 1.0)
    assert (idle.p_wait, idle.p_abandon, idle.mean_wait, idle.service_level(0.0)) == (0, 0, 0, 1)
    result = erlang_a_queue(50, 48.0, 1.0, 1.0)
    assert isinstance(result, ErlangA)
    assert result.service_level(-1.0) == 0.0
    assert list(result.to_frame()["metric"]) == [
        "p_wait", "p_abandon", "mean_wait", "mean_queue", "utilisation"
    ]


@pytest.mark.parametrize(
    "call",
    [
        lambda: erlang_b(-1, 1.0),
        lambda: erlang_b(2.5, 1.0),
        lambda: erlang_b(3, -1.0),
        lambda: erlang_c(3, math.nan),
        lambda: erlang_c_queue(0, 1.0, 1.0),
        lambda: erlang_c_queue(2, 1.0, 0.0),
        lambda: erlang_a_queue(2, 1.0, 1.0, 0.0),
        lambda: erlang_a_queue(2, 1.0, 1.0, math.inf),
    ],
)
def test_bad_input_is_refused(call):
    with pytest.raises(ValueError):
        call()
