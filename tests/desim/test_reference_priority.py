"""The simulator against Cobham's non-preemptive priority formula (Cobham 1954, references.md).

A three-class M/M/c station written as a net: three sources, three queues and one pool whose
``priority`` orders the three answer transitions; every class holds an agent for the same
exponential time. The tolerance rule (family-corrected Student t interval on per-replication
values, half-width below 10 % of the reference) is the one of test_reference_erlang.py.
"""

from __future__ import annotations

import textwrap

import numpy as np
import pytest

from compare.formulas.erlang import erlang_c_queue
from compare.formulas.priority import cobham_waits
from fluid.loading import load_scenario_text

from .test_reference_erlang import agrees, simulate

QUEUES = ("queue_1", "queue_2", "queue_3")


def priority_station(servers: int, rates: tuple[float, float, float], mean_hold: float):
    """Classes 1 (highest) to 3, Poisson arrivals at ``rates`` per min into queue_1..queue_3,
    one pool of ``servers`` agents serving them non-preemptively in class order, exponential
    holds of mean ``mean_hold`` min for every class (one talk place)."""
    text = textwrap.dedent(f"""\
        name: three-class priority station (invented)
        time_unit: min
        run: {{horizon: 100, warmup: 0, replications: 2, seed: 1}}
        sources:
          class_1: {{rate: {rates[0]}, into: queue_1}}
          class_2: {{rate: {rates[1]}, into: queue_2}}
          class_3: {{rate: {rates[2]}, into: queue_3}}
        pools:
          agents: {{staff: {servers}, priority: [answer_1, answer_2, answer_3]}}
        places:
          queue_1: {{}}
          queue_2: {{}}
          queue_3: {{}}
          talk: {{hold: {{dist: exponential, mean: {mean_hold}}}}}
        transitions:
          answer_1: {{in: [queue_1, agents], out: [talk]}}
          answer_2: {{in: [queue_2, agents], out: [talk]}}
          answer_3: {{in: [queue_3, agents], out: [talk]}}
          close: {{in: [talk], out: [agents]}}
        """)
    return load_scenario_text(text, file="<priority station>")


def cobham_checks(servers, rates, mean_hold, *, reps, horizon, warmup, seed):
    """Per-class mean waits against Cobham, and the callers' overall mean wait against the FCFS
    Erlang C wait (the conservation law; 4 interval checks)."""
    waits = cobham_waits(servers, rates, mean_hold)
    sim = simulate(priority_station(servers, rates, mean_hold), reps=reps, horizon=horizon,
                   warmup=warmup, seed=seed, record_waits=False)
    for k, (queue, reference) in enumerate(zip(QUEUES, waits), start=1):
        agrees(sim.raw("place", queue, "wait"), reference, f"mean wait of class {k}",
               "Cobham (1954), non-preemptive priority M/M/c, references.md")
    # Per replication, the mean wait over all callers taken in the window (waits weighted by
    # callers). Work conservation: Σ (λ_k/λ)·W_k equals the FCFS Erlang C mean wait.
    overall = []
    for run in sim.runs:
        left = np.array([run.places[q]["left"] for q in QUEUES], dtype=float)
        mean = np.array([run.places[q]["wait"] for q in QUEUES])
        overall.append(float(np.sum(left * mean) / np.sum(left)))
    agrees(overall, erlang_c_queue(servers, sum(rates), mean_hold).mean_wait,
           "mean wait over all classes",
           "Cobham (1954) conservation check = FCFS Erlang C mean wait, references.md")


def test_cobham_worked_value_single_server():
    # references.md, recomputed: c = 1, λ = (0.3, 0.5), μ = 1: W = (1.142857, 5.714286). The
    # formula module is tested in tests/compare; this pins the values the simulation checks use.
    assert cobham_waits(1, (0.3, 0.5), 1.0) == pytest.approx((1.142857, 5.714286), abs=1e-6)


def test_cobham_three_classes_four_agents():
    # 4 agents, λ = (0.6, 1.0, 1.4) per min, mean hold 1 min: load 0.75, σ = (0.15, 0.4, 0.75).
    cobham_checks(4, (0.6, 1.0, 1.4), 1.0, reps=20, horizon=12_000, warmup=100, seed=401)


@pytest.mark.slow
def test_cobham_three_classes_ten_agents_heavy_load():
    # 10 agents, λ = (2.0, 3.0, 3.5) per min, mean hold 1 min: load 0.85.
    cobham_checks(10, (2.0, 3.0, 3.5), 1.0, reps=20, horizon=10_000, warmup=200, seed=402)
