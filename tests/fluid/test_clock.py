"""run.start and clock labels (fluid.clock): exact values worked out by hand."""

from __future__ import annotations

import dataclasses
import textwrap

import pytest

from fluid import ScenarioError, load_scenario_text
from fluid.clock import axis_label, clock_label, clock_range, parse_start
from fluid.errors import FieldError

NET = textwrap.dedent(
    """
    name: clock desk
    time_unit: {unit}
    run: {run}
    sources:
      calls: {{rate: 1.0, into: queue}}
    pools:
      agents: 2
    places:
      queue: {{}}
      talk: {{hold: 1.0}}
    transitions:
      answer: {{in: [queue, agents], out: [talk]}}
      close: {{in: [talk], out: [agents]}}
    """)


def net(run: str = "{horizon: 100}", unit: str = "min"):
    return load_scenario_text(NET.format(run=run, unit=unit))


def test_parse_start_minutes_after_midnight():
    assert parse_start("08:00") == 480.0
    assert parse_start("8:05") == 485.0
    assert parse_start("00:00") == 0.0
    assert parse_start("23:59") == 23 * 60 + 59.0


@pytest.mark.parametrize("value", ["24:00", "08:60", "8", "08:00:00", "8h", "", 480, None, True])
def test_parse_start_refuses(value):
    with pytest.raises(FieldError) as err:
        parse_start(value)
    assert err.value.path == "run.start"


def test_run_start_read_by_the_loader():
    assert net('{horizon: 100, start: "08:00"}').run.start == 480.0
    assert net().run.start is None


@pytest.mark.parametrize("start", ['"25:00"', '"8 am"', "480", "[8, 0]"])
def test_bad_run_start_names_the_field(start):
    with pytest.raises(ScenarioError, match=r"run\.start"):
        net(f"{{horizon: 100, start: {start}}}")


def test_clock_labels_in_minutes():
    s = net('{horizon: 100, start: "08:00"}')
    assert clock_label(s, 0) == "08:00"
    assert clock_label(s, 15) == "08:15"
    assert clock_label(s, 300) == "13:00"
    assert clock_label(s, 15.5) == "08:15:30"
    # 08:00 + 960 min = 24:00, the next day's midnight; + 990 min = 00:30 of day 1
    assert clock_label(s, 960) == "00:00+1"
    assert clock_label(s, 990) == "00:30+1"
    assert clock_range(s, 300, 315) == "13:00-13:15"
    assert axis_label(s) == "clock time (time 0 = 08:00)"


def test_clock_labels_in_seconds_and_hours():
    s = net('{horizon: 100, start: "08:00"}', unit="s")
    assert clock_label(s, 900) == "08:15"   # 900 s = 15 min
    assert clock_label(s, 45) == "08:00:45"
    h = net('{horizon: 100, start: "22:30"}', unit="h")
    assert clock_label(h, 0.25) == "22:45"
    assert clock_label(h, 2) == "00:30+1"


def test_numbers_without_start_or_for_other_units():
    s = net()
    assert clock_label(s, 15) == "15"
    assert clock_label(s, 712.5) == "712.5"
    assert clock_label(s, 0.0) == "0"
    assert axis_label(s) == "time (min)"
    d = net('{horizon: 100, start: "08:00"}', unit="day")
    assert clock_label(d, 1.5) == "1.5"
    assert axis_label(d) == "time (day)"
    assert dataclasses.replace(s.run, start=480.0).start == 480.0
