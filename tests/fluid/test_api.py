"""The public API of ``fluid`` (design.md §5): what ``__init__`` exports, and the tidy tables of
its results, on the test nets whose fluid answers are derived by hand in test_analysis,
test_phases and test_fluid_staffing."""

from __future__ import annotations

import math
import pathlib
import types

import pytest

import fluid
from fluid.analysis import FluidResult
from fluid.phases import PhaseDiagram
from fluid.staffing import FluidPlan

from . import nets

ROOT = pathlib.Path(__file__).resolve().parents[2]
EXACT = 1e-9
#: what fluid/__init__.py exported before the exports became lazy: every one must stay
EARLIER = {"FluidResult", "Scenario", "ScenarioError", "ScenarioWarning", "SolverError",
           "load_scenario", "load_scenario_text", "throughput", "with_changes"}


def test_all_lists_exactly_the_public_names():
    assert EARLIER <= set(fluid.__all__)
    assert {"load_scenario", "throughput", "phase_diagram", "staff", "PhaseDiagram",
            "FluidPlan"} <= set(fluid.__all__)
    assert len(set(fluid.__all__)) == len(fluid.__all__)
    for name in fluid.__all__:
        assert getattr(fluid, name) is not None, name
    namespace: dict = {}
    exec("from fluid import *", namespace)
    assert set(namespace) - {"__builtins__"} == set(fluid.__all__)
    # every public attribute that is not a submodule is listed
    public = {n for n in dir(fluid) if not n.startswith("_")
              and not isinstance(getattr(fluid, n), types.ModuleType)}
    assert public == set(fluid.__all__)
    with pytest.raises(AttributeError, match="no attribute 'nothing'"):
        fluid.nothing  # noqa: B018


def test_the_names_are_the_package_functions():
    from fluid import phases, staffing

    assert fluid.phase_diagram is phases.phase_diagram
    assert fluid.staff is staffing.fluid_plan
    assert fluid.load_scenario is fluid.loading.load_scenario


def test_load_and_throughput_to_frame():
    s = fluid.load_scenario(ROOT / "configs" / "utility-line.yaml")
    assert isinstance(s, fluid.Scenario)
    r = fluid.throughput(s)
    assert isinstance(r, FluidResult)
    frame = r.to_frame()
    assert list(frame.columns) == ["kind", "name", "metric", "value"]
    assert not frame.duplicated(["kind", "name", "metric"]).any()  # one row per figure
    figures = {(k, n, m): v for k, n, m, v in frame.itertuples(index=False)}
    for q, rate in r.rates.items():
        assert figures[("transition", q, "rate")] == rate
    for p, load in r.load.items():
        assert figures[("pool", p, "load")] == load
        assert figures[("pool", p, "bottleneck")] == float(p in r.bottlenecks)
    assert figures[("scenario", s.name, "output_rate")] == r.output_rate


def test_phase_diagram_to_frame_lp():
    # By hand (test_phases): hand-over net, rate = min(5, F/3, S) over the staff F, S
    d = fluid.phase_diagram(nets.load(nets.hand_over(10, 4)), ("front_desk", "supervisors"),
                            ranges={"front_desk": (2, 30)})
    assert isinstance(d, PhaseDiagram) and d.method == "lp"
    frame = d.to_frame()
    assert list(frame.columns) == ["kind", "name", "metric", "value", "label"]
    assert not frame.duplicated(["kind", "name", "metric"]).any()
    pieces = frame[frame.kind == "piece"]
    assert set(pieces.name) == {str(i) for i in range(len(d.pieces))}
    by_label = {}
    for name, rows in pieces.groupby("name"):
        values = dict(zip(rows.metric, rows.value))
        assert set(values) == {"const", "coef_front_desk", "coef_supervisors",
                               "witness_front_desk", "witness_supervisors"}
        by_label[rows.label.iloc[0]] = (values["const"], values["coef_front_desk"],
                                        values["coef_supervisors"])
    expected = {"inflow": (5, 0, 0), "front_desk": (0, 1 / 3, 0), "supervisors": (0, 0, 1)}
    assert set(by_label) == set(expected)
    for label, (c, f, s) in expected.items():
        assert by_label[label] == pytest.approx((c, f, s), abs=EXACT), label
    figures = {(k, n, m): v for k, n, m, v, _ in frame.itertuples(index=False)}
    assert figures[("pool", "front_desk", "range_low")] == 2
    assert figures[("pool", "front_desk", "range_high")] == 30
    assert figures[("pool", "supervisors", "staff")] == 4
    assert figures[("diagram", d.scenario_name, "inflow_rate")] == pytest.approx(5, abs=EXACT)
    assert figures[("diagram", d.scenario_name, "exact")] == 1.0
    assert list(d.wide_frame().columns) == ["piece", "const", "coef_front_desk",
                                            "coef_supervisors", "label"]


def test_phase_diagram_to_frame_counters_grid():
    # By hand (test_phases): overflow net with a priority, total = min(2.5, (own + 4)/2)
    d = fluid.phase_diagram(nets.load(nets.overflow()), ("own_desk",), ranges={"own_desk": (0, 5)})
    assert d.method == "counters-grid"
    frame = d.to_frame()
    assert not frame.duplicated(["kind", "name", "metric"]).any()
    points = frame[frame.kind == "point"]
    assert list(points[points.metric == "rate"].name) == [f"own_desk={n}" for n in range(6)]
    for n in range(6):
        rows = points[points.name == f"own_desk={n}"]
        values = dict(zip(rows.metric, rows.value))
        assert values["staff_own_desk"] == n
        assert values["rate"] == pytest.approx(min(2.5, (n + 4) / 2), rel=1e-6, abs=1e-9)
        assert set(rows.label) == {"own_desk+overflow_desk" if n < 1 else "inflow"}
    assert (frame.kind == "piece").sum() == 0


def test_staff_to_frame():
    # test_fluid_staffing: the hand-over net at 4.2 calls/min needs 13 front agents and 5
    # supervisors (cost 18 at 1 per agent)
    plan = fluid.staff(nets.load(nets.hand_over(10, 4, rate=4.2)))
    assert isinstance(plan, FluidPlan)
    frame = plan.to_frame()
    assert list(frame.columns) == ["kind", "name", "metric", "value"]
    assert not frame.duplicated(["kind", "name", "metric"]).any()
    figures = {(k, n, m): v for k, n, m, v in frame.itertuples(index=False)}
    assert figures[("pool", "front_desk", "staff")] == 13
    assert figures[("pool", "supervisors", "staff")] == 5
    assert figures[("pool", "supervisors", "cost")] == 5
    assert figures[("pool", "front_desk", "scenario_staff")] == 10
    assert figures[("plan", plan.scenario_name, "cost")] == 18
    for q, rate in plan.rates.items():
        assert figures[("transition", q, "rate")] == rate
    assert math.isclose(figures[("pool", "front_desk", "work")], plan.work["front_desk"])
    assert list(plan.wide_frame()["staff"]) == [13, 5]
