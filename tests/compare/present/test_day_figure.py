"""The day figure: service level against its goal line, and the staff steps, in clock times."""

from __future__ import annotations

from compare.present.day_figure import day_figure
from compare.present.day_text import day_text
from compare.present.figures import transient_figure
from compare.study.day_table import day_table
from tests.compare.study.test_day_table import FIGURES, NET, tidy
from fluid import load_scenario_text


def test_day_figure_goal_line_staff_steps_and_clock_ticks():
    s = load_scenario_text(NET)
    fig = day_figure(s, day_table(s, tidy()))
    level, abandonment, staff = fig.axes
    goal = [ln for ln in level.get_lines() if ln.get_label() == "goal"][0]
    assert list(goal.get_ydata()) == [0.8, 0.8]
    maximum = [ln for ln in abandonment.get_lines() if ln.get_label() == "maximum"][0]
    assert list(maximum.get_ydata()) == [0.05, 0.05]
    scheduled = [ln for ln in staff.get_lines() if ln.get_label() == "agents: scheduled"][0]
    assert scheduled.get_xdata().tolist() == [0.0, 15.0, 30.0, 45.0, 60.0]
    assert scheduled.get_ydata().tolist() == [2.0, 2.0, 3.0, 3.0, 3.0]
    fig.canvas.draw()
    ticks = [t.get_text() for t in staff.get_xticklabels()]
    assert ticks == ["08:00", "08:15", "08:30", "08:45", "09:00"]
    assert staff.get_xlabel() == "clock time (time 0 = 08:00)"


def test_transient_figure_draws_the_goal_line_when_given():
    s = load_scenario_text(NET)
    fig = transient_figure(tidy(), "min", goals={"queue": 0.8})
    level = [ax for ax in fig.axes if ax.get_title() == "service_level: queue"][0]
    assert [ln.get_label() for ln in level.get_lines()] == ["simulated mean", "fluid", "goal"]
    assert s.run.start == 480.0


def test_day_text_one_line_per_interval():
    s = load_scenario_text(NET)
    old = {k: v for k, v in FIGURES.items() if k[0] in ("arrivals", "service_level")}
    text = day_text(s, day_table(s, tidy(old)), reps=5)
    lines = text.splitlines()
    head = next(i for i, line in enumerate(lines) if line.startswith("interval"))
    assert lines[head].split() == ["interval", "arrivals", "fluid", "staff", "agents", "offered",
                                   "agents", "SL", "queue", "(goal", "0.8)", "fluid"]
    body = lines[head + 2:]
    assert [line.split()[0] for line in body] == ["08:00-08:15", "08:15-08:30", "08:30-08:45",
                                                  "08:45-09:00"]
    # interval 2: 61 [55, 67] arrivals (fluid 60), staff 3, offered 4, SL 0.4 [0.3, 0.5] (0.2)
    assert body[2].split() == ["08:30-08:45", "61", "[55,", "67]", "60", "3", "4", "0.4",
                               "[0.3,", "0.5]", "0.2"]
