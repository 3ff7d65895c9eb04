"""Cobham's non-preemptive priority waits (Cobham 1954, Operations Research 2(1):70–76)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import sparse
from scipy.sparse import linalg as sparse_linalg

from compare.formulas.erlang import erlang_c_queue
from compare.formulas.priority import cobham_waits


def test_cobham_recomputed_single_server():
    # references.md, Cobham recomputed: c = 1, λ = (0.3, 0.5), μ = 1 → W = (1.142857, 5.714286)
    waits = cobham_waits(1, (0.3, 0.5), 1.0)
    assert waits == pytest.approx((1.142857, 5.714286), abs=5e-7)
    # by hand: C = ρ = 0.8 for M/M/1; W1 = 0.8/(1·1·0.7) = 8/7, W2 = 0.8/(0.7·0.2) = 40/7
    assert waits == pytest.approx((8 / 7, 40 / 7), rel=1e-12)


def test_cobham_conservation_three_servers_three_classes():
    # references.md, conservation check: Σ (λ_k/λ)·W_k equals the FCFS Erlang C mean wait
    rates = (0.5, 1.0, 1.2)
    waits = cobham_waits(3, rates, 1.0)
    total = sum(rates)
    weighted = sum(r / total * w for r, w in zip(rates, waits))
    assert weighted == pytest.approx(erlang_c_queue(3, total, 1.0).mean_wait, rel=1e-12)
    assert waits[0] < waits[1] < waits[2]


def test_cobham_one_class_is_erlang_c():
    # with one class the formula is C/(cμ(1 − ρ)) = C/(cμ − λ), the Erlang C mean wait (Kleinrock)
    (wait,) = cobham_waits(4, (3.0,), 1.2)
    assert wait == pytest.approx(erlang_c_queue(4, 3.0, 1.2).mean_wait, rel=1e-12)


def test_cobham_against_priority_markov_chain():
    # Brute force: the CTMC of a 2-server station with two non-preemptive classes, state
    # (busy agents b, waiting q1, waiting q2); waiting only when b = c. On a completion the agent
    # takes a class-1 caller if any, else class 2, else goes idle. Queues truncated at M = 100
    # (arrivals beyond are blocked). Here the marginal of q2 falls like ~0.7^m (mass at q2 = 40
    # is 7e-8, at q2 = 80 5e-14; same answers to 1e-12 with M = 150), so truncation is invisible.
    # W_k = E[q_k]/λ_k (Little).
    c, mu, rates, cap = 2, 1.0, (0.6, 0.8), 100
    states = [(b, 0, 0) for b in range(c)]
    states += [(c, q1, q2) for q1 in range(cap + 1) for q2 in range(cap + 1)]
    index = {s: i for i, s in enumerate(states)}
    rows, cols, vals = [], [], []

    def move(src, dst, rate):
        rows.append(index[src])
        cols.append(index[dst])
        vals.append(rate)

    for b, q1, q2 in states:
        s = (b, q1, q2)
        if b < c:
            move(s, (b + 1, 0, 0), sum(rates))
            if b > 0:
                move(s, (b - 1, 0, 0), b * mu)
            continue
        if q1 < cap:
            move(s, (c, q1 + 1, q2), rates[0])
        if q2 < cap:
            move(s, (c, q1, q2 + 1), rates[1])
        if q1 > 0:
            move(s, (c, q1 - 1, q2), c * mu)
        elif q2 > 0:
            move(s, (c, 0, q2 - 1), c * mu)
        else:
            move(s, (c - 1, 0, 0), c * mu)
    n = len(states)
    q = sparse.csr_matrix((vals, (rows, cols)), shape=(n, n))
    q = q - sparse.diags(np.asarray(q.sum(axis=1)).ravel())
    system = q.T.tolil()
    system[n - 1, :] = np.ones(n)  # replace one balance equation by Σπ = 1
    rhs = np.zeros(n)
    rhs[-1] = 1.0
    pi = sparse_linalg.spsolve(system.tocsc(), rhs)
    q1s = np.array([s[1] for s in states])
    q2s = np.array([s[2] for s in states])
    chain_waits = (float(q1s @ pi) / rates[0], float(q2s @ pi) / rates[1])
    assert cobham_waits(c, rates, 1 / mu) == pytest.approx(chain_waits, rel=1e-8)


def test_cobham_saturated_classes_get_infinite_waits():
    # by hand: c = 2, μ = 1, λ = (1.5, 1.0): σ1 = 0.75, σ2 = 1.25. Agents always busy (C = 1),
    # so W1 = 1/(2·1·(1 − 0)(1 − 0.75)) = 2; class 2 saturates.
    assert cobham_waits(2, (1.5, 1.0), 1.0) == (pytest.approx(2.0, rel=1e-12), math.inf)
    assert cobham_waits(2, (2.5, 0.1, 0.1), 1.0)[1:] == (math.inf, math.inf)


def test_cobham_zero_rate_class_and_bad_input():
    # an empty class changes nothing for the others (σ does not move)
    with_empty = cobham_waits(1, (0.3, 0.0, 0.5), 1.0)
    assert with_empty[::2] == pytest.approx(cobham_waits(1, (0.3, 0.5), 1.0), rel=1e-15)
    bad_calls = [
        (0, (0.3,), 1.0), (1, (), 1.0), (1, (-0.1,), 1.0), (1, (0.3,), 0.0), (1.5, (0.3,), 1.0)
    ]
    for bad in bad_calls:
        with pytest.raises(ValueError):
            cobham_waits(*bad)
