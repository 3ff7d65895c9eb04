"""Per-interval fluid figures of the pools (compare.study.transient: ``staff`` and ``busy``)
against hand derivations on the counters of design.md §4.1 (exact on a grid that divides the
holds and the steps, here 0.01)."""

from __future__ import annotations

import pytest

from compare.study.transient import fluid_interval_value
from fluid import load_scenario_text
from fluid.counters import integrate_counters

SCHEDULED = """
name: scheduled station (invented)
time_unit: min
run: {horizon: 20, warmup: 0, replications: 2, seed: 1}
sources:
  calls: {into: queue, profile: {step: 10, rates: [1.0, 3.0]}}
pools:
  agents: {schedule: {step: 10, staff: [2, 4]}}
places:
  queue: {}
  talk: {hold: 1.0}
transitions:
  answer: {in: [queue, agents], out: [talk]}
  close: {in: [talk], out: [agents]}
"""


def test_staff_and_busy_by_hand():
    # Rates 1 then 3 per min, hold 1, staff 2 then 4 (never short: at most 3 busy).
    # staff: 2 on [0, 10), 4 on [10, 20); over [5, 15]: (5·2 + 5·4) / 10 = 3 (exact).
    # busy agents at t: the calls still in their hold, ∫ λ over [t − 1, t]: t on [0, 1], then
    # 1 until 10; on [10, 11] 1 + 2 (t − 10); then 3. Busy agent-time over [0, 10]: 0.5 + 9 =
    # 9.5; over [10, 20]: 2 + 27 = 29; busy shares 9.5/20 and 29/40.
    s = load_scenario_text(SCHEDULED, file="<test>")
    sol = integrate_counters(s, horizon=20)
    get = lambda m, a, b: fluid_interval_value(s, sol, m, "agents", a, b)  # noqa: E731
    assert get("staff", 0, 10) == 2.0
    assert get("staff", 10, 20) == 4.0
    assert get("staff", 5, 15) == pytest.approx(3.0, abs=1e-12)
    assert get("busy", 0, 10) == pytest.approx(9.5 / 20, abs=1e-9)
    assert get("busy", 10, 20) == pytest.approx(29 / 40, abs=1e-9)
