"""fluidgap staff per interval and --shifts: JSON, the written scenario, the report, refusals."""

from __future__ import annotations

import json
import pathlib

from compare.cli.main import main
from fluid import load_scenario

ROOT = pathlib.Path(__file__).resolve().parents[3]
TWO_POOL = str(ROOT / "configs" / "two-pool-day.yaml")
DAY = str(ROOT / "configs" / "day-with-shifts.yaml")
SINGLE = str(ROOT / "configs" / "single-station.yaml")
FAST = ("--reps", "4", "--workers", "1", "--quiet", "--max-iterations", "3")


def run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def test_shift_plan_json_schedule_and_written_scenario(capsys, tmp_path):
    written = tmp_path / "planned.yaml"
    code, out, err = run(capsys, "staff", TWO_POOL, "--shifts", "--json", *FAST,
                         "--write-scenario", written, "--report", tmp_path / "report")
    assert code == 0, err
    doc = json.loads(out)
    assert "decision support" in doc["caution"].lower()
    req, plan = doc["requirement"], doc["plan"]
    assert req["iterations"] <= 3 and set(req["staff"]) == {"desk", "specialists"}
    assert len(req["staff"]["desk"]) == 40 and req["step"] == 15
    # the plan covers the requirement in every interval, and its cost is that of its shifts
    for p, need in req["staff"].items():
        assert all(a >= b for a, b in zip(plan["staff"][p], need))
    assert plan["cost"] == round(sum(r["cost"] for r in plan["shifts"]), 9)
    assert doc["flat_plan"]["cost"] >= plan["cover_cost"]
    # the written scenario loads and has the plan as its schedules (and nothing else changed)
    s, original = load_scenario(written), load_scenario(TWO_POOL)
    for p in ("desk", "specialists"):
        assert s.pools[p].schedule.staff == tuple(plan["staff"][p])
        assert s.pools[p].schedule.step == 15
    assert s.sources == original.sources and s.places == original.places
    assert s.shifts == original.shifts and s.targets == original.targets
    assert doc["schedule"]["pools"]["desk"]["schedule"]["staff"] == plan["staff"]["desk"]
    report = tmp_path / "report"
    assert {"report.html", "intervals.csv", "shifts.csv", "shift_plan.png",
            "result.json"} <= {p.name for p in report.iterdir()}


def test_staff_per_interval_text_on_a_profile(capsys):
    code, out, err = run(capsys, "staff", DAY, *FAST)
    assert code == 0, err
    assert "staff required per interval" in out and "simulations" in out
    assert "Decision support" in out


def test_refusals(capsys, tmp_path):
    code, _, err = run(capsys, "staff", DAY, "--write-scenario", tmp_path / "x.yaml", *FAST)
    assert code == 2 and "give --shifts too" in err
    code, _, err = run(capsys, "staff", SINGLE, "--shifts", *FAST)
    assert code == 2 and "needs shift patterns" in err
    code, _, err = run(capsys, "staff", DAY, "--cost", "agents=2", *FAST)
    assert code == 2 and "--cost is for the flat search" in err
    # the scenario file itself is never overwritten
    code, _, err = run(capsys, "staff", DAY, "--shifts", "--write-scenario", DAY, *FAST)
    assert code == 2 and "never overwritten" in err
    # one replication gives no interval: refused once, the command named once
    code, _, err = run(capsys, "staff", DAY, "--shifts", "--reps", "1", "--quiet")
    assert code == 2
    assert err == ("fluidgap staff: --reps must be >= 2 for an interval, and its verdicts need "
                   "one (got 1)\n")


def test_shifts_with_fluid_only_is_refused(capsys):
    code, _, err = run(capsys, "staff", DAY, "--shifts", "--fluid-only", "--quiet")
    assert code == 2 and "leave out --fluid-only" in err
