"""Shift patterns: the shifts: key, its validation, and when a shift is on duty (by hand)."""

import textwrap

import pytest

from fluid import load_scenario
from fluid.errors import ScenarioError
from fluid.loading import load_scenario_text

BASE = """
name: shift test (invented)
time_unit: min
run: {horizon: 600}
sources: {calls: {rate: 1.0, into: queue}}
pools: {agents: 3}
places: {queue: {}, talk: {hold: 2.0}}
transitions:
  answer: {in: [queue, agents], out: [talk]}
  close: {in: [talk], out: [agents]}
"""


def load(shifts: str):
    return load_scenario_text(BASE + textwrap.dedent(shifts), file="s.yaml")


def test_patterns_parse_with_lists_ranges_and_breaks():
    s = load("""
    shifts:
      early: {pool: agents, starts: [60, 0, 30], length: 480, breaks: [{after: 240, length: 30}],
              cost: 8}
      late: {pool: agents, starts: {first: 240, last: 360, every: 60}, length: 240}
    """)
    early, late = s.shifts["early"], s.shifts["late"]
    assert early.starts == (0.0, 30.0, 60.0) and early.cost == 8
    assert late.starts == (240.0, 300.0, 360.0) and late.cost == 1.0 and late.breaks == ()
    # on duty 30-270 and 300-510 when starting at 30 (by hand: break 240 after the start)
    assert early.on_duty(30) == ((30, 270), (300, 510))
    assert early.covers(30, 30, 60) and early.covers(30, 240, 270)
    assert not early.covers(30, 255, 285)  # the break starts inside: partly present is absent
    assert not early.covers(30, 0, 30)
    assert load("").shifts == {}


@pytest.mark.parametrize("shifts, message", [
    ("shifts: {x: {pool: nobody, starts: [0], length: 10}}", "shifts.x.pool"),
    ("shifts: {x: {pool: agents, starts: [], length: 10}}", "shifts.x.starts"),
    ("shifts: {x: {pool: agents, starts: [0], length: 0}}", "shifts.x.length: must be > 0"),
    ("shifts: {x: {pool: agents, starts: [0], length: 10, colour: red}}", "shifts.x.colour"),
    ("shifts: {x: {pool: agents, starts: [0], length: 10, breaks: [{after: 8, length: 2}]}}",
     "shifts.x.breaks[0]: must end before the shift's end"),
    ("shifts: {x: {pool: agents, starts: [0], length: 10, cost: -1}}", "shifts.x.cost"),
    ("shifts: {x: {pool: agents, starts: {first: 0, last: 1e9, every: 1}, length: 10}}",
     "shifts.x.starts: gives"),
    ("shifts: [1, 2]", "shifts: must be a mapping"),
])
def test_bad_patterns_name_the_field(shifts, message):
    with pytest.raises(ScenarioError, match=message.replace("[", r"\[").replace("]", r"\]")):
        load(shifts)


def test_example_configs_have_shifts():
    from pathlib import Path

    root = Path(__file__).resolve().parents[2] / "configs"
    day = load_scenario(root / "day-with-shifts.yaml")
    two = load_scenario(root / "two-pool-day.yaml")
    assert set(day.shifts) == {"full_day", "part_time"}
    assert {p.pool for p in two.shifts.values()} == {"desk", "specialists"}
