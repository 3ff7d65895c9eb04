"""The derived facts of fluid.structure, read off the example configs and small invented nets by
hand (every expected value below follows from the YAML it is checked on)."""

from __future__ import annotations

import pathlib

import pytest

from fluid import load_scenario
from fluid.structure import (
    bottlenecks,
    inflow,
    lp_applies,
    lp_obstacles,
    outflow,
    output_rises,
    output_transitions,
    places_that_can_end,
    places_without_exit,
    route_share,
    serving_pools,
    statistics_window,
    unlimited_share,
    waiting_places,
)

from . import nets
from .test_lp import EXITLESS

CONFIGS = pathlib.Path(__file__).resolve().parents[2] / "configs"

# A queue whose first-priority output sends the job round a circuit (back to the queue after a
# hold) and whose second one ends it: a job *can* end there, but with unlimited agents every job
# takes the first output and none ends.
RECYCLE = """
name: recycling queue (invented test net)
sources:
  calls: {rate: 1.0, into: queue}
pools:
  agents: 3
places:
  queue: {priority: [recycle, done]}
  held: {hold: 1.0}
transitions:
  recycle: {in: [queue, agents], out: [held]}
  back: {in: [held], out: [agents, queue]}
  done: {in: [queue], out: []}
"""


def config(name: str):
    return load_scenario(CONFIGS / f"{name}.yaml")


def test_routing_shares():
    s = config("utility-line")
    assert route_share(s, "ivr", "ivr_done") == 0.25  # the route in the YAML
    assert route_share(s, "front_queue", "front_answer") == 1.0  # no route: one output
    assert route_share(s, "billing_desk", "callback_start") == 1.0  # a pool
    r = nets.load(RECYCLE)
    assert route_share(r, "queue", "done") == 1.0  # a priority is not a route
    assert unlimited_share(r, "queue", "recycle") == 1.0  # the highest priority takes all
    assert unlimited_share(r, "queue", "done") == 0.0
    assert unlimited_share(s, "front_talk", "front_transfer") == 0.2  # no priority: the route


def test_where_jobs_can_end():
    r = nets.load(RECYCLE)
    assert places_without_exit(r) == []  # `done` ends jobs from the queue, `back` leads there
    assert places_that_can_end(r) == {"queue", "held"}
    assert places_that_can_end(r, unlimited_share) == set()  # every job takes `recycle`
    assert places_without_exit(nets.load(EXITLESS)) == ["queue", "talk"]


def test_output_transitions():
    s = config("utility-line")
    assert output_transitions(s) == ("ivr_done", "front_close", "wrap_close", "billing_close",
                                     "callback_close")
    # no transition ends a job: the output is every transition
    assert output_transitions(nets.load(EXITLESS)) == ("answer", "again")


def test_waiting_places_and_serving_pools():
    s = config("utility-line")
    # ivr and the talk, consult and wrap places take no agents and have no patience or target
    assert waiting_places(s) == ("front_queue", "consult_wait", "billing_queue", "callback_list")
    assert serving_pools(s, "consult_wait") == ["supervisors"]
    assert serving_pools(s, "front_talk") == []  # its outputs give agents back, take none
    assert waiting_places(config("single-station")) == ("queue",)


def test_flows_at_given_rates():
    s = config("utility-line")
    rates = {q: 0.0 for q in s.transitions} | {"front_close": 1.0, "front_transfer": 0.5,
                                                "front_callback": 0.25, "wrap_close": 2.0,
                                                "front_answer": 4.0}
    # front_desk gets its agents back from the three closing outputs of front_talk and wrap_close
    assert inflow(s, "front_desk", rates, {"calls": 4.0}) == 1.0 + 0.5 + 0.25 + 2.0
    assert outflow(s, "front_desk", rates) == 4.0  # front_answer takes one agent per firing
    assert inflow(s, "ivr", rates, {"calls": 4.0}) == 4.0  # the source only
    assert outflow(s, "front_talk", rates) == 1.0 + 0.5 + 0.25  # front_consult at rate 0


def test_whether_the_lp_applies():
    assert lp_applies(config("single-station"))
    assert lp_obstacles(config("single-station")) == ()
    # the billing desk serves billing_answer before callback_start
    assert lp_obstacles(config("utility-line")) == ("priorities",)
    assert lp_obstacles(config("priority-desk")) == ("priorities",)
    day = config("day-with-shifts")
    assert lp_obstacles(day) == ("arrival profiles or traces", "schedules")
    assert lp_obstacles(day, constant_staff=True) == ("arrival profiles or traces",)
    assert lp_obstacles(nets.load(EXITLESS)) == ("jobs that can never end",)


def test_the_one_more_agent_test():
    # the tolerance is relative to max(1, |base|): 1e-7 for the LP, 1e-6 for the counters
    assert output_rises(10.0, 10.0 + 2e-6, "lp")
    assert not output_rises(10.0, 10.0 + 2e-6, "counters")
    assert output_rises(0.5, 0.5 + 2e-7, "lp")  # below 1 the tolerance is absolute
    assert not output_rises(10.0, 10.0, "lp")
    outputs = {"a": 1.0, "b": 2.0, "c": 1.0 + 1e-9}
    assert bottlenecks(["c", "b", "a"], 1.0, outputs.__getitem__, "lp") == ("b",)
    with pytest.raises(KeyError):
        output_rises(1.0, 2.0, "simulation")


def test_statistics_window():
    s = config("utility-line")  # warm-up 60
    assert statistics_window(s, 600.0) == (60, 600.0)
    assert statistics_window(s, 50.0) == (0.0, 50.0)  # the warm-up is not before the end
