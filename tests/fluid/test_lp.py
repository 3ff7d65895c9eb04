"""The throughput LP (design.md §4.1) against closed forms derived by hand and against the
integrated counter equations.

Closed forms (references.md, "Throughput LP of a fluid timed Petri net"): a single pool of N
agents with mean hold h fed at rate λ carries min(λ, N/h); a pool whose agents are held over
several places per job supports N over the expected total hold per job entering it; a place
downstream of a routing split sees the split share of the upstream rate, capped by its own pool.
"""

from __future__ import annotations

import math

import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from fluid.counters import integrate_counters
from fluid.errors import SolverError
from fluid.lp import throughput_lp
from fluid.structure import places_without_exit

from . import nets

EXACT = 1e-9  # LP answers are exact up to HiGHS's tolerances


@pytest.mark.parametrize(
    "rate, staff, hold",
    [(3.0, 5, 2.0), (2.0, 5, 2.0), (2.5, 5, 2.0), (0.4, 1, 4.0), (7.0, 12, 0.5)],
)
def test_single_pool_is_min_of_inflow_and_capacity(rate, staff, hold):
    # references.md: ρ = min(λ, N/h)
    sol = throughput_lp(nets.load(nets.single_pool(rate, staff, hold)))
    expected = min(rate, staff / hold)
    assert sol.rates["answer"] == pytest.approx(expected, abs=EXACT)
    assert sol.rates["close"] == pytest.approx(expected, abs=EXACT)
    assert sol.source_rates["calls"] == pytest.approx(rate, abs=EXACT)


def test_cold_transfer_caps_only_the_downstream_pool():
    # By hand: front capacity 10/2 = 5 > λ = 4, so the front answers all 4 per minute and splits
    # them 0.75/0.25: close 3, transfer 1. Billing is offered 1 per minute but carries only
    # 3 agents / 5 min = 0.6.
    sol = throughput_lp(nets.load(nets.cold_transfer()))
    expected = {"front_answer": 4.0, "front_close": 3.0, "front_transfer": 1.0,
                "billing_answer": 0.6, "billing_close": 0.6}
    for q, value in expected.items():
        assert sol.rates[q] == pytest.approx(value, abs=EXACT), q


@pytest.mark.parametrize(
    "front, supervisors, answer",
    [
        # front limits: 10 / (2 + 0.5 × 2) = 10/3 < supervisors' 4 / (0.5 × 2) = 4 < λ = 5
        (10, 4, 10 / 3),
        # supervisors limit: 2 / (0.5 × 2) = 2 < front's 10/3; the spare front agents wait in
        # consult_wait, the answer rate settles where returns balance: ρ = 0.5 ρ + 1
        (10, 2, 2.0),
    ],
)
def test_hand_over_capacity_in_both_regimes(front, supervisors, answer):
    # A front agent stays with the job until a supervisor takes it, so front capacity =
    # staff / (own hold + share × joint hold) (references.md: N over the expected total hold)
    sol = throughput_lp(nets.load(nets.hand_over(front, supervisors)))
    assert sol.rates["front_answer"] == pytest.approx(answer, abs=EXACT)
    assert sol.rates["front_close"] == pytest.approx(answer / 2, abs=EXACT)
    for q in ("front_consult", "consult_start", "consult_end"):
        assert sol.rates[q] == pytest.approx(answer / 2, abs=EXACT), q


def test_two_agents_per_job_halve_the_capacity():
    # By hand: each job holds 2 of 5 agents for 2 min: capacity 5 / (2 × 2) = 1.25 < λ = 2
    sol = throughput_lp(nets.load(nets.two_agents(rate=2.0, staff=5, hold=2.0)))
    assert sol.rates["start"] == pytest.approx(1.25, abs=EXACT)
    assert sol.rates["finish"] == pytest.approx(1.25, abs=EXACT)


def test_marking_duals_are_the_capacity_slope():
    # By hand, overloaded single pool (λ = 3 > N/h = 2.5, h = 2): the objective Σρ counts the
    # source (3) plus answer and close (N/h each), so d objective / dN = 2/h = 1; with weight 1 on
    # the ending transition only it is 1/h = 0.5. Underloaded (λ = 2): 0.
    over = nets.load(nets.single_pool(3.0, 5, 2.0))
    assert throughput_lp(over).marking_duals["agents"] == pytest.approx(1.0, abs=EXACT)
    ending = {"answer": 0.0, "close": 1.0, "calls": 0.0}
    weighted = throughput_lp(over, weights=ending)
    assert weighted.marking_duals["agents"] == pytest.approx(0.5, abs=EXACT)
    under = nets.load(nets.single_pool(2.0, 5, 2.0))
    assert throughput_lp(under).marking_duals["agents"] == pytest.approx(0.0, abs=EXACT)


def test_staff_and_arrival_overrides():
    s = nets.load(nets.single_pool(3.0, 5, 2.0))
    # min(3, 7/2) = 3 and min(3, 5.5/2) = 2.75 (real staff allowed for phase diagrams)
    assert throughput_lp(s, staff={"agents": 7}).rates["answer"] == pytest.approx(3.0, abs=EXACT)
    assert throughput_lp(s, staff={"agents": 5.5}).rates["answer"] == pytest.approx(2.75, abs=EXACT)
    fewer = throughput_lp(s, arrival_rates={"calls": 1.0})
    assert fewer.rates["answer"] == pytest.approx(1.0, abs=EXACT)


@pytest.mark.parametrize("weights", [{"answer": 3.0}, {"close": 0.1, "calls": 9.0}])
def test_any_positive_weights_give_the_same_rates(weights):
    # design.md §4.1: every feasible ρ is below the true one, so the optimum does not depend on
    # the (positive) weights
    s = nets.load(nets.hand_over(10, 2))
    plain, weighted = throughput_lp(s), throughput_lp(s, weights=weights)
    for q, r in plain.rates.items():
        assert weighted.rates[q] == pytest.approx(r, abs=EXACT)


def test_refuses_what_it_cannot_answer():
    with pytest.raises(ValueError, match="priority"):
        throughput_lp(nets.load(nets.priority_desk(1.0, 3.0)))
    peak = nets.load(nets.profile_peak())
    with pytest.raises(ValueError, match="profile"):
        throughput_lp(peak)
    # with a constant rate given instead, the LP applies: min(2.8, 4/2) = 2
    assert throughput_lp(peak, arrival_rates={"calls": 2.8}).rates["answer"] == pytest.approx(2.0)
    with pytest.raises(ValueError, match="schedule"):
        throughput_lp(nets.load(nets.staff_cut()))


EXITLESS = """
name: jobs that never end (invented test net)
sources:
  calls: {rate: 1.0, into: queue}
pools:
  agents: 5
places:
  queue: {}
  talk: {hold: 2.0}
transitions:
  answer: {in: [queue, agents], out: [talk]}
  again: {in: [talk], out: [agents, queue]}
"""


def test_nets_whose_jobs_cannot_end_are_refused():
    # every job returns to the queue: jobs pile up, the agents saturate at 5/2 per minute (the
    # counters), while the pinned source offsets would make the LP answer 0
    s = nets.load(EXITLESS)
    assert places_without_exit(s) == ["queue", "talk"]
    with pytest.raises(ValueError, match="never end"):
        throughput_lp(s)
    assert integrate_counters(s).rates["answer"] == pytest.approx(2.5, abs=EXACT)


def test_residuals_are_rechecked(monkeypatch):
    import fluid.lp as lp_module

    real = lp_module.linprog

    def sloppy(*args, **kwargs):
        res = real(*args, **kwargs)
        res.x = res.x.copy()
        res.x[0] += 0.5  # a solver that claims success with a wrong rate for 'answer'
        return res

    monkeypatch.setattr(lp_module, "linprog", sloppy)
    # the worst violation is named, e.g. "violates marking of talk at close by 0.0833"
    with pytest.raises(SolverError, match=r"violates (flow|marking) of \w+ (into|at) \w+"):
        throughput_lp(nets.load(nets.single_pool(3.0, 5, 2.0)))


@pytest.mark.parametrize(
    "text",
    [
        nets.single_pool(3.0, 5, 2.0),
        nets.single_pool(2.0, 5, 2.0),
        nets.cold_transfer(),
        nets.cold_transfer(0),
        nets.hand_over(10, 4),
        nets.hand_over(10, 2),
        nets.two_agents(),
        nets.SAME_TIME_CYCLE,
    ],
)
def test_lp_agrees_with_the_counters_on_the_hand_nets(text):
    # The holds are multiples of the grid step (rounding 0), so the counters are exact on the
    # grid and their long-run slopes, read over whole periods, equal the LP rates.
    s = nets.load(text)
    sol, c = throughput_lp(s), integrate_counters(s)
    assert c.rounding == 0.0
    assert c.period is not None
    for q, r in sol.rates.items():
        assert c.rates[q] == pytest.approx(r, abs=1e-9), q


# --- random priority-free nets -------------------------------------------------------------------


@st.composite
def stage_chains(draw):
    stages = []
    for i in range(draw(st.integers(1, 3))):
        stages.append(
            {
                "staff": draw(st.integers(1, 8)),
                "weight": draw(st.sampled_from([1, 1, 2])),
                "hold": draw(st.integers(1, 8)) / 2,
                "route": {
                    "close": draw(st.integers(1, 10)),
                    "transfer": draw(st.integers(0, 10)),
                    "rework": draw(st.sampled_from([0, 0, 1, 2, 3])),
                    "consult": draw(st.sampled_from([0, 0, 1, 2, 4])),
                },
                "sup_staff": draw(st.integers(1, 4)),
                "joint_hold": draw(st.integers(1, 8)) / 2,
            }
        )
    rate = draw(st.integers(1, 16)) / 4
    second = draw(st.none() | st.tuples(st.integers(0, 2), st.integers(1, 8).map(lambda k: k / 4)))
    return nets.stage_chain(stages, rate, second)


@settings(max_examples=25, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.too_slow])
@given(stage_chains())
def test_lp_agrees_with_the_counters_on_random_nets(text):
    # Holds are multiples of 0.5, so the grid divides them (rounding 0). Once the counters'
    # increments are periodic, their slope over whole periods is exact; the check is against the
    # largest rate in the net (a rate near zero is compared in absolute terms).
    s = nets.load(text)
    sol = throughput_lp(s)
    c = integrate_counters(s)
    assert c.rounding == 0.0
    assume(c.period is not None)
    scale = max([*sol.rates.values(), *sol.source_rates.values()])
    for q, r in sol.rates.items():
        assert math.isclose(c.rates[q], r, rel_tol=1e-8, abs_tol=1e-8 * scale), (q, r, c.rates[q])
