"""The wide per-interval table and the per-interval verdicts, on a synthetic tidy table.

The net: arrivals by a 15-minute profile (1, 2, 4, 2 per min) into a queue without patience,
agents on a 30-minute schedule (2, then 3), a deterministic talk of 1 min; so the fluid offered
load of an interval is its rate × 1 min agents. The simulated figures are invented for the test
(the table is what desim's per-interval table would hold, with the contract's metric names).
"""

from __future__ import annotations

import math
import textwrap

import pandas as pd
import pytest

from compare.study.day_table import day_table, scheduled_staff
from compare.study.flags import FLAG_KINDS
from compare.study.interval_verdicts import interval_flags
from fluid import load_scenario_text

NET = textwrap.dedent(
    """
    name: day desk (invented)
    time_unit: min
    run: {horizon: 60, start: "08:00", replications: 5}
    sources:
      calls: {into: queue, profile: {step: 15, rates: [1, 2, 4, 2]}}
    pools:
      agents: {schedule: {step: 30, staff: [2, 3]}}
    places:
      queue: {}
      talk: {hold: 1.0}
    transitions:
      answer: {in: [queue, agents], out: [talk]}
      close: {in: [talk], out: [agents]}
    targets:
      queue: {within: 0.5, goal: 0.8}
      abandonment: {max: 0.05}
    """)

#: (metric, name) -> per interval (mean, low, high, fluid); invented figures
FIGURES = {
    ("arrivals", ""): [(14, 12, 16, 15), (29, 26, 32, 30), (61, 55, 67, 60), (31, 27, 35, 30)],
    ("service_level", "queue"): [(0.9, 0.85, 0.95, 1.0), (0.6, 0.5, 0.7, 0.9),
                                 (0.4, 0.3, 0.5, 0.2), (0.85, 0.75, 0.95, 1.0)],
    ("abandonment", ""): [(0.0, 0.0, 0.01, math.nan), (0.02, 0.0, 0.04, math.nan),
                          (0.1, 0.08, 0.12, math.nan), (0.03, 0.01, 0.05, math.nan)],
    ("busy", "agents"): [(0.5, 0.4, 0.6, math.nan), (0.9, 0.85, 0.95, math.nan),
                         (0.99, 0.97, 1.0, math.nan), (0.6, 0.5, 0.7, math.nan)],
    ("staff", "agents"): [(2, 2, 2, math.nan), (2, 2, 2, math.nan), (3, 3, 3, math.nan),
                          (3, 3, 3, math.nan)],
    ("wait", "queue"): [(0.1, 0.05, 0.15, math.nan), (0.6, 0.4, 0.8, math.nan),
                        (1.5, 1.0, 2.0, math.nan), (0.2, 0.1, 0.3, math.nan)],
    ("queue", "queue"): [(0.1, 0.0, 0.2, 0.0)] * 4,  # (not a figure of the wide table)
}


@pytest.fixture(scope="module")
def scenario():
    return load_scenario_text(NET)


def tidy(figures=FIGURES) -> pd.DataFrame:
    rows = [(i, 15.0 * i, 15.0 * (i + 1), metric, name, fl, mean, low, high, 5)
            for (metric, name), values in figures.items()
            for i, (mean, low, high, fl) in enumerate(values)]
    return pd.DataFrame(rows, columns=["interval", "start", "end", "metric", "name", "fluid",
                                       "mean", "low", "high", "n"])


def test_scheduled_staff_is_the_time_average(scenario):
    pool = scenario.pools["agents"]
    assert scheduled_staff(pool, 0, 15) == 2.0
    assert scheduled_staff(pool, 15, 45) == 2.5    # 15 min of 2, 15 of 3
    assert scheduled_staff(pool, 50, 120) == 3.0   # the last value holds after the end


def test_wide_table_one_row_per_interval(scenario):
    day = day_table(scenario, tidy())
    assert list(day.columns) == [
        "interval", "start", "end", "clock", "scheduled.agents", "offered.agents",
        "arrivals", "arrivals.low", "arrivals.high", "arrivals.n", "arrivals.fluid",
        "staff.agents", "staff.agents.low", "staff.agents.high", "staff.agents.n",
        "occupancy.agents", "occupancy.agents.low", "occupancy.agents.high", "occupancy.agents.n",
        "service_level.queue", "service_level.queue.low", "service_level.queue.high",
        "service_level.queue.n", "service_level.queue.fluid",
        "abandonment", "abandonment.low", "abandonment.high", "abandonment.n",
        "wait.queue", "wait.queue.low", "wait.queue.high", "wait.queue.n"]
    assert day["clock"].tolist() == ["08:00-08:15", "08:15-08:30", "08:30-08:45", "08:45-09:00"]
    assert day["scheduled.agents"].tolist() == [2.0, 2.0, 3.0, 3.0]
    # offered load = the interval's rate (1, 2, 4, 2 per min) × the 1-min talk
    assert day["offered.agents"].tolist() == pytest.approx([1.0, 2.0, 4.0, 2.0], abs=1e-12)
    row = day.iloc[2].to_dict()
    assert (row["service_level.queue"], row["service_level.queue.low"],
            row["service_level.queue.high"], row["service_level.queue.n"],
            row["service_level.queue.fluid"]) == (0.4, 0.3, 0.5, 5, 0.2)
    assert (row["arrivals"], row["arrivals.fluid"], row["occupancy.agents.high"],
            row["abandonment.low"], row["wait.queue"]) == (61, 60, 1.0, 0.08, 1.5)


def test_absent_metrics_are_left_out(scenario):
    old = {k: v for k, v in FIGURES.items() if k[0] in ("arrivals", "service_level", "queue")}
    day = day_table(scenario, tidy(old).drop(columns="fluid"))
    assert list(day.columns) == [
        "interval", "start", "end", "clock", "scheduled.agents", "offered.agents",
        "arrivals", "arrivals.low", "arrivals.high", "arrivals.n",
        "service_level.queue", "service_level.queue.low", "service_level.queue.high",
        "service_level.queue.n"]
    assert interval_flags(scenario, tidy(old))[0].where == "queue"


def erlang_c_service_level(servers: int, load: float, within: float, hold: float) -> float:
    """P(W <= within) in M/M/N (Erlang C; e.g. Gross and Harris, Fundamentals of Queueing
    Theory, ch. 2), written out here as an independent check of the flag's agent counts."""
    if servers <= load:
        return 0.0
    top = load ** servers / math.factorial(servers) * servers / (servers - load)
    wait = top / (sum(load ** k / math.factorial(k) for k in range(servers)) + top)
    return 1 - wait * math.exp(-(servers - load) * within / hold)


def least_servers(load: float) -> int:
    n = 1
    while erlang_c_service_level(n, load, 0.5, 1.0) < 0.8:
        n += 1
    return n


def test_interval_flags_name_the_intervals_and_the_agents(scenario):
    # by hand: load 2 needs 4 agents (N=3 gives 0.730, N=4 0.936), load 4 needs 6 (N=5 0.664,
    # N=6 0.895); scheduled 2 and 3, so +2 and +3
    assert (least_servers(2.0), least_servers(4.0)) == (4, 6)
    assert "interval_target" in FLAG_KINDS
    flags = interval_flags(scenario, tidy())
    assert [(f.kind, f.where) for f in flags] == [("interval_target", "queue"),
                                                  ("interval_target", "abandonment")]
    target = scenario.targets.service["queue"]
    what = target.describe("min") if hasattr(target, "describe") else "within 0.5 min"
    assert flags[0].message == (
        f"service level ({what}) at queue lies wholly below the goal 80.0 % in 2 of 4 "
        "intervals: 08:15-08:45 (lowest 0.4 [0.3, 0.5] at 08:30-08:45); agents to add to pool "
        "agents there (Erlang C, at each interval's fluid offered load, as if in steady state: "
        "a rough guide): 08:15-08:30 +2, 08:30-08:45 +3; or run `fluidgap staff` for the "
        "cheapest staffing that meets the targets")
    assert flags[1].message == (
        "abandonment lies wholly above the maximum 5.0 % in 1 of 4 intervals: 08:30-08:45 "
        "(highest 0.1 [0.08, 0.12] at 08:30-08:45); the extra agents cannot be estimated per "
        "interval (no place has patience); or run `fluidgap staff` for the cheapest staffing "
        "that meets the targets")


def test_no_flag_when_every_interval_meets(scenario):
    good = dict(FIGURES)
    good[("service_level", "queue")] = [(0.9, 0.7, 0.95, 1.0)] * 4   # high >= goal everywhere
    good[("abandonment", "")] = [(0.05, 0.03, 0.07, math.nan)] * 4  # low <= max everywhere
    assert interval_flags(scenario, tidy(good)) == ()
    assert interval_flags(scenario, None) == ()


def test_separate_runs_are_listed_apart(scenario):
    split = dict(FIGURES)
    split[("service_level", "queue")] = [(0.5, 0.4, 0.6, 1.0), (0.9, 0.8, 1.0, 1.0),
                                        (0.5, 0.4, 0.6, 1.0), (0.5, 0.4, 0.7, 1.0)]
    (flag, *_) = interval_flags(scenario, tidy(split))
    assert "in 3 of 4 intervals: 08:00-08:15, 08:30-09:00 (lowest 0.5" in flag.message
