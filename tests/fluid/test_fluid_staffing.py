"""The fluid staffing plan (fluid.staffing) against minima derived by hand and against the
throughput LP solved independently at and below the plan.

Closed forms (references.md, "Throughput LP of a fluid timed Petri net"): a pool of N agents with
mean hold h fed at rate λ carries min(λ, N/h), so it reaches the inflow exactly when N ≥ λh; a
pool whose agents are held over several places per job needs N ≥ λ × (expected total hold per
job entering it). With every rate at its inflow, each pool's need is its offered work R, so the
cheapest whole-agent plan is ceil(R) per pool whatever the (positive) costs.
"""

from __future__ import annotations

import json
import math
import pathlib
import warnings

import pytest

from fluid import load_scenario
from fluid.lp import throughput_lp
from fluid.loading import with_changes
from fluid.offered import offered_work
from fluid.staffing import fluid_plan, with_staff

from . import nets

ROOT = pathlib.Path(__file__).resolve().parents[2]


@pytest.mark.parametrize("rate, staff, hold, expected", [
    (2.0, 5, 5.0, 10),   # R = 10 exactly: N/h = 10/5 = 2 = λ, so 10 agents suffice
    (2.1, 5, 5.0, 11),   # R = 10.5
    (0.3, 9, 4.0, 2),    # R = 1.2
    (7.0, 1, 0.5, 4),    # R = 3.5
])
def test_single_pool_needs_the_offered_load_rounded_up(rate, staff, hold, expected):
    # references.md: ρ = min(λ, N/h) reaches λ iff N ≥ λh
    plan = fluid_plan(nets.load(nets.single_pool(rate, staff, hold)))
    assert plan.staff == {"agents": expected}
    assert plan.cost == expected
    assert plan.work["agents"] == pytest.approx(rate * hold)
    assert plan.recheck == 0.0


@pytest.mark.parametrize("rate, front, sup", [
    # By hand: a front agent holds each call 2 min plus, for the half handed over, the joint
    # 2 min with a supervisor (no wait for a supervisor at the plan): R_front = λ (2 + 0.5·2)
    # = 3λ; a supervisor holds half of the calls 2 min: R_sup = λ.
    (5.0, 15, 5),   # 15 and 5 exactly
    (4.2, 13, 5),   # 12.6 → 13, 4.2 → 5
    (3.3, 10, 4),   # 9.9 → 10, 3.3 → 4
])
def test_hand_over_minimum(rate, front, sup):
    s = nets.load(nets.hand_over(1, 1, rate=rate))
    plan = fluid_plan(s, costs={"front_desk": 1.0, "supervisors": 3.5})
    assert plan.staff == {"front_desk": front, "supervisors": sup}
    assert plan.cost == pytest.approx(front + 3.5 * sup)


def test_hand_over_plan_is_minimal_by_the_lp():
    # Independent check with the throughput LP: every rate reaches its inflow at the plan, and one
    # agent fewer in either pool leaves the answered calls below the inflow of 4.2 per minute.
    s = nets.load(nets.hand_over(1, 1, rate=4.2))
    plan = fluid_plan(s)
    at_plan = throughput_lp(s, staff=plan.staff)
    assert at_plan.rates["front_answer"] == pytest.approx(4.2, abs=1e-9)
    for pool in plan.staff:
        fewer = throughput_lp(s, staff=plan.staff | {pool: plan.staff[pool] - 1})
        assert fewer.rates["front_answer"] < 4.2 - 1e-6, pool


def test_demo_multi_pool_plan_with_hand_over_and_priority():
    # By hand, the demo (configs/utility-line.yaml): λ = 4/min, 75 % past the IVR: 3 per minute
    # reach the front desk.
    # front desk: talk 4 min for every call; the 10 % consulted also hold the agent during the
    #   joint 2 min with a supervisor and the 2 min of wrap-up: 3 × (4 + 0.1 × 4) = 13.2 → 14
    # supervisors: 3 × 0.1 × 2 = 0.6 → 1
    # billing desk: 20 % transferred × 7 min + 10 % callbacks × 5 min: 3 × (1.4 + 0.5) = 5.7 → 6
    # (its priority does not matter once there is room for both outputs)
    plan = fluid_plan(load_scenario(ROOT / "configs" / "utility-line.yaml"))
    assert plan.staff == {"front_desk": 14, "supervisors": 1, "billing_desk": 6}
    assert plan.work == pytest.approx({"front_desk": 13.2, "supervisors": 0.6,
                                       "billing_desk": 5.7})
    assert any("priorit" in n for n in plan.notes)
    assert plan.recheck <= 1e-5


def test_fluid_plan_equals_ceil_of_offered_work_on_random_chains():
    # the hand rule above (ceil(R) per pool) on generated chains with transfers, rework,
    # consults and two-agent jobs
    for seed, rate in [(1, 1.5), (2, 4.0), (3, 0.7)]:
        stages = [
            {"staff": 1, "weight": 1 + (seed % 2), "hold": 1.5,
             "route": {"close": 5, "transfer": 3, "rework": 1, "consult": 2},
             "sup_staff": 1, "joint_hold": 2.5},
            {"staff": 1, "weight": 1, "hold": 2.0 + seed,
             "route": {"close": 7, "transfer": 0, "rework": seed, "consult": 0}},
        ]
        s = nets.load(nets.stage_chain(stages, rate))
        plan = fluid_plan(s)
        work = offered_work(s)
        assert plan.staff == {p: math.ceil(w - 1e-9) for p, w in work.items()}, (seed, work)


def test_job_place_priority_sends_every_job_to_the_first_output():
    # overflow net: with room enough, the own desk (hold 2) takes all 2.5 calls per minute:
    # 5 agents; the overflow desk is offered nothing
    plan = fluid_plan(nets.load(nets.overflow()))
    assert plan.staff == {"own_desk": 5, "overflow_desk": 0}


def test_profiles_and_schedules_count_at_their_means():
    # By hand: the profile's mean over its 720-minute horizon × hold (5.5 + 0.15 × 1 min of
    # wrap-up per call) is the offered work; the plan rounds it up
    s = load_scenario(ROOT / "configs" / "day-with-shifts.yaml")
    mean_rate = sum(s.sources["calls"].arrivals.rates) * 30 / 720
    work = mean_rate * (5.5 + 0.15 * 1.0)
    plan = fluid_plan(s)
    assert plan.work["agents"] == pytest.approx(work)
    assert plan.staff == {"agents": math.ceil(work)}
    assert any("mean rate" in n for n in plan.notes)
    assert any("schedule" in n for n in plan.notes)


def test_costs_and_free_pools():
    s = nets.load(nets.hand_over(1, 1, rate=4.2))
    # a pool that costs nothing still gets the fewest agents that work
    plan = fluid_plan(s, costs={"supervisors": 0})
    assert plan.staff == {"front_desk": 13, "supervisors": 5}
    assert plan.cost == 13
    with pytest.raises(ValueError, match="unknown pool"):
        fluid_plan(s, costs={"nobody": 1})
    with pytest.raises(ValueError, match=">= 0"):
        fluid_plan(s, costs={"front_desk": -1})


def test_nets_without_a_plan_are_refused():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the loader warns about the leaking pool
        leaky = nets.load(nets.LEAKY)
    with pytest.raises(ValueError, match="leak"):
        fluid_plan(leaky)


def test_json_and_frame():
    plan = fluid_plan(nets.load(nets.hand_over(10, 4, rate=4.2)))
    doc = json.loads(json.dumps(plan.to_json(), allow_nan=False))
    assert doc["staff"] == {"front_desk": 13, "supervisors": 5}
    assert doc["cost"] == 18
    assert doc["scenario_staff"] == {"front_desk": 10, "supervisors": 4}
    frame = plan.wide_frame()
    assert list(frame["pool"]) == ["front_desk", "supervisors"]
    assert list(frame["staff"]) == [13, 5]


def test_with_staff_keeps_priorities_and_drops_schedules():
    demo = load_scenario(ROOT / "configs" / "utility-line.yaml")
    changed = with_staff(demo, {"billing_desk": 11, "front_desk": 3})
    assert changed.pools["billing_desk"].staff == 11
    assert changed.pools["billing_desk"].priority == ("billing_answer", "callback_start")
    assert changed.pools["front_desk"].staff == 3
    day = load_scenario(ROOT / "configs" / "day-with-shifts.yaml")
    flat = with_staff(day, {"agents": 12})
    assert flat.pools["agents"].schedule is None and flat.pools["agents"].staff == 12
    assert with_changes(day, {}).pools["agents"].schedule is not None
    with pytest.raises(ValueError, match="unknown pool"):
        with_staff(day, {"desk": 1})
