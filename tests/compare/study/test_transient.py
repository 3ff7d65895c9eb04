"""Per-interval comparison (compare.study.transient): the fluid column against hand derivations.

The counters of design.md §4.1 are exact on a grid that divides the holds and the profile step
(here 0.01), so each fluid value is checked exactly against its hand derivation.
"""

from __future__ import annotations

import math
import pathlib

import pytest

from compare.study.comparison import compare
from compare.study.transient import (
    TRANSIENT_COLUMNS,
    default_interval,
    fluid_interval_value,
    transient_table,
)
from desim import replicate
from fluid import load_scenario, load_scenario_text
from fluid.counters import integrate_counters

ROOT = pathlib.Path(__file__).resolve().parents[3]


def profile_station(rates, staff, hold, within=1.0):
    """A profiled source (step 10) into a queue served by ``staff`` agents with a deterministic
    hold (invented test net)."""
    return load_scenario_text(f"""
name: profiled station (invented)
time_unit: min
run: {{horizon: 20, warmup: 0, replications: 2, seed: 1}}
sources:
  calls: {{into: queue, profile: {{step: 10, rates: {list(rates)}}}}}
pools:
  agents: {staff}
places:
  queue: {{}}
  talk: {{hold: {hold}}}
transitions:
  answer: {{in: [queue, agents], out: [talk]}}
  close: {{in: [talk], out: [agents]}}
targets:
  queue: {{within: {within}, goal: 0.8}}
""", file="<test>")


def fluid(table, interval, metric, name=""):
    sel = table[(table["interval"] == interval) & (table["metric"] == metric)
                & (table["name"] == name)]
    assert len(sel) == 1
    return float(sel["fluid"].iloc[0])


def test_underloaded_profile_arrivals_and_completions():
    # Hand: rates 1 then 3 per min in steps of 10, 10 agents, hold 1 (never short of agents).
    # arrivals per interval = rate × step = 10 and 30; completions are arrivals shifted by the
    # hold: ∫₁₀ λ(s − 1) ds over [0, 10] = 9·1 = 9 (nothing before t = 0), over [10, 20]
    # = 1·1 + 9·3 = 28; no queue, everyone taken at once (service level 1), no abandonment.
    s = profile_station([1.0, 3.0], 10, 1.0)
    sim = replicate(s, reps=2, horizon=20, warmup=0, seed=1, workers=1, interval=10)
    t = transient_table(s, sim.intervals)
    assert list(t.columns) == TRANSIENT_COLUMNS
    assert fluid(t, 0, "arrivals") == pytest.approx(10.0, abs=1e-9)
    assert fluid(t, 1, "arrivals") == pytest.approx(30.0, abs=1e-9)
    assert fluid(t, 0, "completed") == pytest.approx(9.0, abs=1e-9)
    assert fluid(t, 1, "completed") == pytest.approx(28.0, abs=1e-9)
    assert fluid(t, 0, "abandoned") == 0.0
    assert fluid(t, 0, "queue", "queue") == pytest.approx(0.0, abs=1e-9)
    assert fluid(t, 1, "queue", "queue") == pytest.approx(0.0, abs=1e-9)
    assert fluid(t, 0, "service_level", "queue") == pytest.approx(1.0)
    assert fluid(t, 1, "service_level", "queue") == pytest.approx(1.0)
    # the simulated columns are desim's, unchanged
    assert (t["n"] == 2).all()


def test_overloaded_profile_queue_and_service_level_by_hand():
    # Hand: λ = 4 on [0, 10), then 0; 1 agent, deterministic hold h = 0.5 (capacity 2 per min).
    # The counters give answer(t) = min(4t, 1 + answer(t − 0.5)): in period k (t in [0.5k,
    # 0.5(k+1))) answer ramps from k to k + 1 over the first 0.25 min, then stays at k + 1.
    # Queue 4t − answer(t): k on the ramp, from k to k + 1 on the flat part, mean k + 1/4 over
    # the period; over [0, 10] (k = 0..19) the time average is 9.5 + 0.25 = 9.75. After t = 10
    # the 40 arrivals drain at the same pace: queue 20 − j − ramp, mean 19.25 − j over period j,
    # so again 9.75 over [10, 20].
    # Completions close(t) = answer(t − 0.5): answer(9.5) = 19 by t = 10, answer(19.5) = 39 by 20.
    # A unit arriving at t (level 4t) is taken when answer reaches 4t: after floor(4t)/4 min, so
    # within 1 min iff t < 1.25: the share of interval 0's arrivals is 1.25/10 = 0.125; none
    # arrive in interval 1 (nan).
    s = profile_station([4.0, 0.0], 1, 0.5)
    sol = integrate_counters(s, horizon=20)
    assert sol.dt == pytest.approx(0.01)
    get = lambda m, n, a, b: fluid_interval_value(s, sol, m, n, a, b)  # noqa: E731
    assert get("arrivals", "", 0, 10) == pytest.approx(40.0, abs=1e-9)
    assert get("arrivals", "", 10, 20) == pytest.approx(0.0, abs=1e-9)
    assert get("queue", "queue", 0, 10) == pytest.approx(9.75, abs=1e-9)
    assert get("queue", "queue", 10, 20) == pytest.approx(9.75, abs=1e-9)
    assert get("completed", "", 0, 10) == pytest.approx(19.0, abs=1e-9)
    assert get("completed", "", 10, 20) == pytest.approx(20.0, abs=1e-9)
    assert get("service_level", "queue", 0, 10) == pytest.approx(0.125, abs=1e-9)
    assert math.isnan(get("service_level", "queue", 10, 20))
    # a metric the fluid model does not give
    assert math.isnan(get("no_such_metric", "queue", 0, 10))


def test_compare_builds_the_transient_table_for_time_varying_scenarios():
    # Hand: the shifts example's first 30-minute interval has rate 0.8: 24 fluid arrivals
    s = load_scenario(ROOT / "configs" / "day-with-shifts.yaml")
    assert default_interval(s, 720) == 30.0  # the profile step (30) is below the shift step (60)
    c = compare(s, reps=3, horizon=120, warmup=0, seed=2, workers=2)
    assert c.interval == 30.0
    t = c.transient
    assert list(t.columns) == TRANSIENT_COLUMNS
    assert sorted(t["interval"].unique()) == [0, 1, 2, 3]
    assert fluid(t, 0, "arrivals") == pytest.approx(0.8 * 30, abs=1e-9)
    assert fluid(t, 3, "arrivals") == pytest.approx(2.4 * 30, abs=1e-9)
    # the gap tables of a time-varying scenario read the same counters
    assert c.gaps.fluid_places["queue"].state == "time-varying"
    # constant-rate scenarios get no per-interval table unless one is asked for
    steady = load_scenario(ROOT / "configs" / "single-station.yaml")
    assert compare(steady, reps=2, horizon=100, warmup=10, workers=1).transient is None
    asked = compare(steady, reps=2, horizon=100, warmup=10, workers=1, interval=50)
    # Hand: Poisson rate 2 per min: 100 fluid arrivals per 50-minute interval
    assert fluid(asked.transient, 1, "arrivals") == pytest.approx(100.0, abs=1e-9)
