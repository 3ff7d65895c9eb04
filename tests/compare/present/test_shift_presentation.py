"""The shift plan's text and figure say what they show: the off-duty spans of each shift worked,
what each service level measures, and clock times on the time axis (issue 11, items 4-5).
Exact checks on an invented station, with the Erlang C evaluator of the study tests (so no
simulation runs)."""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

import numpy as np  # noqa: E402
import pytest  # noqa: E402

from compare.present.clock_axis import clock_ticks  # noqa: E402
from compare.present.shift_figure import shift_figure  # noqa: E402
from compare.present.shift_text import shift_plan_text  # noqa: E402
from compare.study.shift_plan import shift_plan  # noqa: E402
from fluid.loading import load_scenario_text  # noqa: E402
from tests.compare.study.test_interval_staffing import erlang_evaluator  # noqa: E402

DAY = """
name: shift text test (invented)
time_unit: min
run: {horizon: 240, warmup: 0, replications: 20, seed: 3, start: "08:30"}
sources: {calls: {profile: {step: 60, rates: [1.0, 4.0, 4.0, 1.5]}, into: queue}}
pools: {agents: 10}
places: {queue: {}, talk: {hold: {dist: exponential, mean: 3.0}}}
transitions:
  answer: {in: [queue, agents], out: [talk]}
  close: {in: [talk], out: [agents]}
targets: {queue: {within: 0.5, goal: 0.8, abandoned: excluded}}
shifts:
  long: {pool: agents, starts: [0, 60], length: 180, breaks: [{after: 60, length: 30}], cost: 2}
  short: {pool: agents, starts: {first: 0, last: 180, every: 60}, length: 60, cost: 1.2}
"""


@pytest.fixture(scope="module")
def planned():
    s = load_scenario_text(DAY, file="day.yaml")
    return s, shift_plan(s, evaluator=erlang_evaluator(s, 60))


def test_the_shift_table_lists_each_shifts_break_in_clock_time(planned):
    s, plan = planned
    text = shift_plan_text(s, plan)
    assert "off duty" in text
    for row in plan.shift_rows():
        if row["shift"] == "long":  # a break 60 min after the start, 30 min long
            start = 8 * 60 + 30 + int(row["start"])
            lo, hi = start + 60, start + 90
            assert f"{lo // 60:02d}:{lo % 60:02d}-{hi // 60:02d}:{hi % 60:02d}" in text
    assert "service level at queue: within 0.5 min, abandoners excluded" in text


def test_the_figure_shows_clock_times_and_the_convention(planned):
    s, plan = planned
    fig = shift_figure(plan, scenario=s)
    ax = fig.axes[-1]
    fig.canvas.draw()
    labels = [t.get_text() for t in ax.get_xticklabels()]
    # intervals of an hour: ticks on the whole hours of 08:30-12:30
    assert labels == ["09:00", "10:00", "11:00", "12:00"]
    titles = [a.get_title() for a in fig.axes]
    assert any("abandoners excluded" in t for t in titles)
    assert ax.get_xlabel() == "clock time (time 0 = 08:30)"


def test_clock_ticks_fall_on_whole_clock_times():
    s = load_scenario_text(DAY.replace('"08:30"', '"08:10"'), file="day.yaml")
    ticks = clock_ticks(s, 15.0, 600.0)
    # at most 12 ticks: every hour, on the hour (08:10 + 50 min = 09:00)
    assert np.allclose(ticks, np.arange(50.0, 601.0, 60.0))


def test_inspect_lists_the_shift_patterns(capsys):
    import json

    from compare.cli.main import main

    from pathlib import Path

    path = Path(__file__).resolve().parents[3] / "configs" / "two-pool-day.yaml"
    assert main(["inspect", str(path)]) == 0
    out = capsys.readouterr().out
    assert "shift patterns (for `fluidgap staff --shifts`):" in out
    # desk_day: starts {first: 0, last: 240, every: 15} from 08:00, 360 long, a break of 15
    row = next(line for line in out.splitlines() if line.startswith("desk_day "))
    assert row.split() == ["desk_day", "desk", "17", "from", "08:00", "to", "12:00", "every", "15",
                           "min", "360", "min", "15", "after", "180", "6"]
    assert main(["inspect", str(path), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["shifts"]["desk_short"] == {"pool": "desk", "starts": [15.0 * k for k in range(25)],
                                           "length": 240.0, "breaks": [], "cost": 4.4}
