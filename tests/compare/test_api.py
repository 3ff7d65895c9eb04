"""The public Python API of compare (design.md §5): what a notebook calls, from any folder.

Each study returns a result whose ``to_frame()`` is tidy (one row per figure, with mean, low,
high and n for simulated figures). Small runs: these tests check the API's shape; the numbers
are checked against the formulas elsewhere (tests/compare/study, tests/desim).
"""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

import compare
from compare.study.staffing_search import StaffingResult

SIMULATED = {"mean", "low", "high", "n"}


def test_all_names_are_importable_and_listed():
    assert sorted(compare.__all__) == sorted(set(compare.__all__))
    for name in compare.__all__:
        assert getattr(compare, name) is not None, name
    with pytest.raises(AttributeError):
        compare.no_such_name  # noqa: B018


def test_compare_on_the_built_in_demo_needs_no_path():
    c = compare.compare(compare.load_demo(), reps=2, horizon=120, warmup=20, workers=1)
    assert isinstance(c, compare.Comparison)
    frame = c.to_frame()
    assert SIMULATED <= set(frame.columns) and {"kind", "name", "metric"} <= set(frame.columns)
    assert (frame["n"] == 2).all()
    assert c.settings.replications == 2 and c.settings.window == (20.0, 120.0)


def test_station_scale_and_staff_results_are_tidy():
    st = compare.station_check(3, 1.0, 2.0, reps=2, horizon=400, workers=1)
    assert isinstance(st, compare.StationResult)
    assert SIMULATED <= set(st.to_frame().columns)

    s = compare.load_demo()
    sc = compare.scale_study(s, (1, 2), reps=2, horizon=120, warmup=20, workers=1)
    assert isinstance(sc, compare.ScaleResult)
    frame = sc.to_frame()
    assert {"factor", "metric", "fluid"} | SIMULATED <= set(frame.columns)
    assert sorted(set(frame["factor"])) == [1.0, 2.0]
    # one row per factor and figure
    assert not frame.duplicated(["factor", "metric"]).any()

    plan = compare.staff_search(s, fluid_only=True)
    assert isinstance(plan, StaffingResult) and plan.method == "fluid-only"
    assert {"trial", "target"} | SIMULATED <= set(plan.to_frame().columns)


def test_the_api_runs_from_outside_the_repository(tmp_path):
    code = (
        "import json, compare\n"
        "c = compare.compare(compare.load_demo(), reps=2, horizon=60, warmup=10, workers=1)\n"
        "print(json.dumps({'rows': len(c.to_frame()), 'reps': c.settings.replications}))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], cwd=tmp_path, capture_output=True,
                         text=True, timeout=120, check=True)
    doc = json.loads(out.stdout)
    assert doc["reps"] == 2 and doc["rows"] > 0
