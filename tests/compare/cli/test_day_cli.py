"""The day of intervals end to end: clock times, the wide per-interval table, the interval flag,
the report's day table and figure, and `fluid` printing its schedule per interval."""

from __future__ import annotations

import json
import pathlib

from compare.cli.main import main

ROOT = pathlib.Path(__file__).resolve().parents[3]
DAY = str(ROOT / "configs" / "day-with-shifts.yaml")
# a thin morning (9 and 10 agents where the config has 12 and 16) so that the peak misses
THIN = ["--set", "pools.agents.schedule.staff=[6, 9, 10, 17, 15, 14, 16, 17, 14, 11, 8, 5]"]
FAST = ["--reps", "5", "--horizon", "180", "--seed", "5", "--workers", "1"]


def run(capsys, *argv):
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def test_compare_prints_the_wide_table_and_the_interval_flag(capsys, tmp_path):
    code, out, err = run(capsys, "compare", DAY, *FAST, *THIN, "--report", str(tmp_path / "r"))
    assert code == 0, err
    assert "per interval (clock times, time 0 = 08:00)" in out
    header = next(line for line in out.splitlines() if line.startswith("interval  "))
    for column in ("arrivals", "staff agents", "offered agents", "SL queue (goal 0.8)"):
        assert column in header
    lines = out.splitlines()
    first = lines.index(header) + 2
    # one line per 30-minute interval of [0, 180] min, from 08:00
    assert [line.split()[0] for line in lines[first:first + 6]] == [
        "08:00-08:30", "08:30-09:00", "09:00-09:30", "09:30-10:00", "10:00-10:30",
        "10:30-11:00"]
    assert lines[first + 6] == ""
    flag = [line for line in lines if "[target missed in intervals] queue:" in line]
    assert len(flag) == 1  # one flag for the target, not one per interval
    text = " ".join(out.split())
    assert "lies wholly below the goal 80.0 % in" in text and "of 6 intervals" in text
    assert "agents to add to pool agents there (Erlang A" in text
    report = tmp_path / "r"
    day = (report / "per_interval_day.csv").read_text().splitlines()
    assert day[0].startswith("interval,start,end,clock,scheduled.agents,offered.agents,arrivals")
    assert day[1].split(",")[3] == "08:00-08:30" and len(day) == 7
    assert (report / "per_interval.csv").exists()  # the tidy table, as before
    html = (report / "report.html").read_text()
    assert 'id="fig-day"' in html and "per_interval_day (6 rows" in html


def test_compare_json_has_the_day_table_and_the_flag(capsys):
    code, out, err = run(capsys, "compare", DAY, *FAST, *THIN, "--json")
    assert code == 0, err
    doc = json.loads(out)
    assert [r["clock"] for r in doc["per_interval_day"]][:2] == ["08:00-08:30", "08:30-09:00"]
    assert [r["scheduled.agents"] for r in doc["per_interval_day"]] == [6, 6, 9, 9, 10, 10]
    kinds = [(f["kind"], f["where"]) for f in doc["flags"]]
    assert kinds.count(("interval_target", "queue")) == 1


def test_fluid_prints_the_schedule_per_interval(capsys):
    code, out, err = run(capsys, "fluid", DAY)
    assert code == 0, err
    assert "schedule per interval (clock times, time 0 = 08:00)" in out
    assert "08:00-08:30" in out and "19:30-20:00" in out
    assert "replace the schedule of agents by one constant level" in " ".join(out.split())
    code, out, _ = run(capsys, "fluid", DAY, "--json")
    rows = json.loads(out)["schedule_per_interval"]
    assert len(rows) == 24 and rows[2]["clock"] == "09:00-09:30"
    assert rows[2]["staff"] == {"agents": 12.0}


def test_phases_says_the_schedule_is_replaced(capsys):
    code, out, err = run(capsys, "phases", DAY, "--axes", "agents")
    assert code == 0, err
    assert "the schedule of agents is replaced by the constant staff of each point" in out
