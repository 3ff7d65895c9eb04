"""The simulation-verified staffing search (compare.study.staffing_search) and its figure
(compare.present.staffing_figure), and the simulated overlay of phase diagrams (compare.present.phase_figure).

References: Erlang C (Erlang 1917; Kleinrock, Queueing Systems I, 1975, M/M/m) and Erlang A
(Garnett, Mandelbaum and Reiman 2002; Mandelbaum and Zeltyn 2005), as computed by
compare.formulas.erlang and compare.formulas.staffing (themselves checked against birth–death chains in
test_erlang.py). The search logic is first checked exactly with those formulas standing in for
the simulation (intervals of zero width); then with the simulation itself on single stations
whose Erlang C service levels clear the goal by a wide margin on both sides of the answer, so
that 95 % intervals a few thousandths wide cannot put the answer elsewhere.
"""

from __future__ import annotations

import json

import matplotlib
import numpy as np
import pytest
from matplotlib.figure import Figure

import desim
from compare.formulas.erlang import erlang_a_queue, erlang_c_queue
from compare.study.phase_overlay import phase_overlay
from compare.present.phase_figure import phase_boundaries, phase_figure, phase_intervals, phase_regions
from compare.present.staffing_figure import staffing_figure
from compare.formulas.staffing import erlang_a_min_servers, erlang_c_min_servers
from compare.study.staffing_search import ABANDONMENT, staff_search, target_estimates
from desim import Estimate
from fluid import load_scenario_text
from fluid.phases import phase_diagram
from fluid.staffing import with_staff
from tests.fluid import nets

matplotlib.use("Agg")


def station(rate: float, hold: float, within: float, goal: float, *, patience: float | None =
            None, max_abandon: float | None = None, staff: int = 1) -> str:
    """One queue, one pool, exponential holds (an M/M/N queue, M/M/N+M with patience)."""
    queue = "{}" if patience is None else f"{{patience: {{dist: exponential, mean: {patience}}}}}"
    abandon = "" if max_abandon is None else f"\n  abandonment: {{max: {max_abandon}}}"
    return f"""
name: single station (invented test net)
time_unit: min
run: {{horizon: 4000, warmup: 200, replications: 20, seed: 17}}
sources:
  calls: {{rate: {rate}, into: queue}}
pools:
  agents: {staff}
places:
  queue: {queue}
  talk: {{hold: {{dist: exponential, mean: {hold}}}}}
transitions:
  answer: {{in: [queue, agents], out: [talk]}}
  close: {{in: [talk], out: [agents]}}
targets:
  queue: {{within: {within}, goal: {goal}}}{abandon}
"""


def exact(value: float) -> Estimate:
    """A formula's value as an interval of zero width."""
    return Estimate(value, value, value, 1)


def erlang_c_evaluator(rate, hold, within):
    def evaluate(staff):
        q = erlang_c_queue(max(staff["agents"], 1), rate, hold)
        sl = q.service_level(within) if q.stable and staff["agents"] > 0 else 0.0
        return {"queue": exact(sl)}
    return evaluate


# --- the search logic, with formulas in place of the simulation ----------------------------------


@pytest.mark.parametrize("rate, hold, within, goal", [
    (1.0, 3.0, 0.5, 0.8),     # R = 3: start ceil(3 + 0.5√3) = 4, answer 5 (add)
    (1.0, 3.0, 0.5, 0.9),     # answer 6 (two adds)
    (2.0, 4.0, 1 / 3, 0.8),   # R = 8: start 10, answer 11
    (0.5, 4.0, 1.0, 0.5),     # R = 2: start 3, Erlang C answer 3 (nothing to add or remove)
    (10.0, 1.0, 0.2, 0.2),    # R = 10: start 12, Erlang C answer 11 (remove)
    (4.0, 2.5, 0.25, 0.8),    # R = 10: start 12, answer 14
])
def test_search_finds_the_erlang_c_minimum(rate, hold, within, goal):
    # Erlang (1917), Kleinrock (1975): smallest N with SL(within) >= goal
    s = load_scenario_text(station(rate, hold, within, goal))
    result = staff_search(s, evaluator=erlang_c_evaluator(rate, hold, within))
    assert result.plan == {"agents": erlang_c_min_servers(rate, hold, within, goal)}
    assert result.meets is True and result.method == "simulation"
    # the plan one agent below was tried and failed (the answer is a minimum, not a guess)
    below = {"agents": result.plan["agents"] - 1}
    assert any(t.staff == below and not t.meets for t in result.tried)


@pytest.mark.parametrize("rate, hold, patience, within, goal, max_abandon", [
    (4.0, 3.0, 2.0, 0.5, 0.8, 0.03),
    (10.0, 1.0, 5.0, 0.2, 0.7, None),
    (2.0, 5.0, 1.0, 1.0, 0.6, 0.02),
])
def test_search_finds_the_erlang_a_minimum(rate, hold, patience, within, goal, max_abandon):
    # Garnett, Mandelbaum and Reiman (2002): both targets through the Erlang A formulas
    s = load_scenario_text(station(rate, hold, within, goal, patience=patience,
                                   max_abandon=max_abandon))

    def evaluate(staff):
        q = erlang_a_queue(max(staff["agents"], 1), rate, hold, patience)
        out = {"queue": exact(q.service_level(within) if staff["agents"] else 0.0)}
        if max_abandon is not None:
            out[ABANDONMENT] = exact(q.p_abandon if staff["agents"] else 1.0)
        return out

    result = staff_search(s, evaluator=evaluate)
    expected = erlang_a_min_servers(rate, hold, patience, within, goal, max_abandon)
    assert result.plan == {"agents": expected}


TWO_STATIONS = """
name: two independent stations (invented test net)
time_unit: min
sources:
  sales_calls: {rate: 2.0, into: sales_queue}
  care_calls: {rate: 1.0, into: care_queue}
pools:
  sales: 1
  care: 1
places:
  sales_queue: {}
  sales_talk: {hold: {dist: exponential, mean: 4.0}}
  care_queue: {}
  care_talk: {hold: {dist: exponential, mean: 6.0}}
transitions:
  sales_answer: {in: [sales_queue, sales], out: [sales_talk]}
  sales_close: {in: [sales_talk], out: [sales]}
  care_answer: {in: [care_queue, care], out: [care_talk]}
  care_close: {in: [care_talk], out: [care]}
targets:
  sales_queue: {within: 0.5, goal: 0.9}
  care_queue: {within: 1.0, goal: 0.75}
"""


def test_search_staffs_each_pool_for_its_own_target():
    # Two stations that share nothing: the cheapest plan is each one's Erlang C minimum, whatever
    # the costs (the search adds where the worst shortfall falls most per unit cost, then
    # removes what is not needed)
    s = load_scenario_text(TWO_STATIONS)

    def evaluate(staff):
        out = {}
        for pool, place, rate, hold, within in (("sales", "sales_queue", 2.0, 4.0, 0.5),
                                                 ("care", "care_queue", 1.0, 6.0, 1.0)):
            q = erlang_c_queue(max(staff[pool], 1), rate, hold)
            out[place] = exact(q.service_level(within) if q.stable and staff[pool] else 0.0)
        return out

    expected = {"sales": erlang_c_min_servers(2.0, 4.0, 0.5, 0.9),
                "care": erlang_c_min_servers(1.0, 6.0, 1.0, 0.75)}
    for costs in ({}, {"sales": 3.0, "care": 1.0}, {"sales": 1.0, "care": 5.0}):
        result = staff_search(s, costs=costs, evaluator=evaluate)
        assert result.plan == expected, costs
        assert result.plan_cost == pytest.approx(
            sum(result.costs[p] * n for p, n in expected.items()))
    frame = result.plans_table()
    assert {"trial", "step", "sales", "care", "cost", "meets", "sales_queue_mean",
            "care_queue_low"} <= set(frame.columns)
    assert frame["step"].iloc[0] == "start"


def test_the_search_stops_and_says_why():
    s = load_scenario_text(station(1.0, 3.0, 0.5, 0.9))
    # every agent helps a little, but not enough within the budget of plans
    slow = staff_search(s, evaluator=lambda staff: {"queue": exact(0.01 * staff["agents"])},
                        max_steps=5)
    assert slow.meets is False and len(slow.tried) == 5
    assert any("stopped after 5 plans" in n for n in slow.notes)
    # no agent helps at all: the search stops at once rather than adding staff blindly
    stuck = staff_search(s, evaluator=lambda staff: {"queue": exact(0.0)})
    assert stuck.meets is False and len(stuck.tried) == 2
    assert any("no single added agent" in n for n in stuck.notes)


def test_no_targets_and_fluid_only_return_the_fluid_plan():
    s = load_scenario_text(station(2.1, 5.0, 0.5, 0.8).split("targets:")[0])
    result = staff_search(s, reps=2)
    assert result.plan == result.fluid_plan.staff == {"agents": 11}  # R = 10.5
    assert result.method == "fluid (no targets)" and result.tried == ()
    assert any("no targets" in n for n in result.notes)
    only = staff_search(load_scenario_text(station(2.1, 5.0, 0.5, 0.8)), fluid_only=True)
    assert only.method == "fluid-only" and only.meets is None
    doc = json.loads(json.dumps(only.to_json(), allow_nan=False))
    assert {"fluid_plan", "plan", "tried"} <= set(doc)
    assert doc["plan"]["staff"] == {"agents": 11} and doc["tried"] == []


# --- the search with the simulation --------------------------------------------------------------


def _simulated_search(rate, hold, within, goal):
    s = load_scenario_text(station(rate, hold, within, goal))
    return s, staff_search(s, reps=20, horizon=4000, warmup=200, seed=17, workers=2)


@pytest.mark.parametrize("rate, hold, within, goal", [
    # Erlang C: N = 4 gives SL 0.603, N = 5 gives 0.857 (goal 0.7; margins 0.10 and 0.16)
    (1.5, 2.0, 0.5, 0.7),
    # N = 5: 0.831, N = 6: 0.940 (goal 0.9; margins 0.07 and 0.04)
    (1.0, 3.0, 0.5, 0.9),
])
def test_simulated_search_finds_the_erlang_c_minimum(rate, hold, within, goal):
    s, result = _simulated_search(rate, hold, within, goal)
    n = erlang_c_min_servers(rate, hold, within, goal)
    assert result.plan == {"agents": n}
    assert result.meets is True
    final = result.plan_trial.estimates["queue"]
    # the simulated service level agrees with Erlang C within three half-widths of its interval
    assert abs(final.mean - erlang_c_queue(n, rate, hold).service_level(within)) <= \
        3 * final.half_width
    # common random numbers: every plan uses the run's seed, so re-running the plan reproduces
    # its estimate exactly
    again = desim.replicate(with_staff(s, result.plan), reps=20, horizon=4000, warmup=200,
                            seed=17, workers=1)
    assert target_estimates(s, again)["queue"] == final
    doc = json.loads(json.dumps(result.to_json(), allow_nan=False))
    assert doc["plan"]["staff"] == {"agents": n} and doc["plan"]["meets"] is True
    assert doc["plan"]["estimates"]["queue"]["n"] == 20
    assert [t["staff"]["agents"] for t in doc["tried"]][0] == result.start["agents"]


@pytest.mark.slow
def test_simulated_search_third_station():
    # N = 3: 0.654, N = 4: 0.895 (goal 0.85; margins 0.20 and 0.045)
    _, result = _simulated_search(0.5, 4.0, 1.0, 0.85)
    assert result.plan == {"agents": erlang_c_min_servers(0.5, 4.0, 1.0, 0.85)}


# --- phase overlay and figure (compare.present.phase_figure) -----------------------------------------------


HAND_OVER = """
name: hand-over with a target (invented test net)
time_unit: min
run: {horizon: 1500, warmup: 150, replications: 10, seed: 5}
sources:
  calls: {rate: 5.0, into: front_queue}
pools:
  front_desk: 16
  supervisors: 6
places:
  front_queue: {}
  front_talk: {hold: {dist: exponential, mean: 2.0}, route: {front_close: 0.5, front_consult: 0.5}}
  consult_wait: {}
  consulting: {hold: {dist: exponential, mean: 2.0}}
transitions:
  front_answer: {in: [front_queue, front_desk], out: [front_talk]}
  front_close: {in: [front_talk], out: [front_desk]}
  front_consult: {in: [front_talk], out: [consult_wait]}
  consult_start: {in: [consult_wait, supervisors], out: [consulting]}
  consult_end: {in: [consulting], out: [supervisors, front_desk]}
targets:
  front_queue: {within: 1.0, goal: 0.8}
"""


def test_phase_overlay_and_figure():
    s = load_scenario_text(HAND_OVER)
    d = phase_diagram(s, ("front_desk", "supervisors"),
                      ranges={"front_desk": (9, 21), "supervisors": (2, 8)})
    table = phase_overlay(s, d, reps=6, horizon=1500, warmup=150, seed=5, workers=2,
                          max_points=4)
    # the grid is thinned to its corners
    assert sorted(zip(table["a"], table["b"])) == [(9, 2), (9, 8), (21, 2), (21, 8)]
    for row in table.itertuples():
        # by hand (test_phases): rate = min(λ, F/3, S) with λ = 5
        assert row.fluid_rate == pytest.approx(min(5.0, row.a / 3, row.b), abs=1e-9)
        # issue 13 item 5: the same sign as the gap tables, simulated minus fluid over |fluid|
        assert row.gap == pytest.approx((row.sim_mean - row.fluid_rate) / row.fluid_rate)
        assert row.optimistic == (row.fluid_rate > row.sim_high)
        assert row.n == 6
        assert row.front_queue_sl_goal == 0.8
        # issue 13 item 1: the overlay says what its service level measures
        assert row.front_queue_sl_convention.endswith("abandoners counted against")
    # at (21, 8) nobody limits (21/3 = 7 and 8 per minute both above λ = 5): the simulated
    # output interval holds the inflow, and the fluid queue is empty (fluid service level 1)
    roomy = table[(table.a == 21) & (table.b == 8)].iloc[0]
    assert roomy.sim_low <= 5.0 <= roomy.sim_high
    assert roomy.front_queue_sl_fluid == 1.0
    # at (9, 8) the front desk caps the fluid at 3 per minute: the queue grows without bound,
    # so the fluid service level is 0
    capped = table[(table.a == 9) & (table.b == 8)].iloc[0]
    assert capped.front_queue_sl_fluid == 0.0 and not capped.targets_met
    fig = phase_figure(d, overlay=table)
    assert isinstance(fig, Figure) and len(fig.axes) == 2
    assert len(phase_figure(d).axes) == 1


def test_regions_tile_the_drawn_box_and_boundaries_are_ties():
    # cold transfer net (tests/fluid/nets.py): four pieces, see tests/fluid/test_phases.py
    d = phase_diagram(nets.load(nets.cold_transfer()), ("front_desk", "billing_desk"))
    a0, a1, b0, b1 = d.box()
    regions = phase_regions(d)
    total = 0.0
    for i, poly in regions:
        x, y = poly[:, 0], poly[:, 1]
        total += 0.5 * abs(np.dot(x, np.roll(y, -1)) - np.dot(y, np.roll(x, -1)))
        centre = poly.mean(axis=0)
        assert d.piece_at(*centre) == i
    assert total == pytest.approx((a1 - a0) * (b1 - b0), rel=1e-9)
    bounds = phase_boundaries(d)
    assert len(bounds) >= 4
    for i, j, seg in bounds:
        for pt in seg:  # both pieces equal the rate along their boundary
            for k in (i, j):
                assert float(d.pieces[k].value(*pt)) == pytest.approx(d.rate_at(*pt), abs=1e-9)


def test_one_axis_overlay_intervals_and_figure():
    # one pool: by hand (references.md, single pool) the fluid rate is min(λ, N/h) = min(1.5, N/2)
    # with one piece change at N = λh = 3
    s = load_scenario_text(station(1.5, 2.0, 0.5, 0.7, staff=5))
    d = phase_diagram(s, ("agents",), ranges={"agents": (1, 7)})
    (i0, lo0, hi0), (i1, lo1, hi1) = phase_intervals(d)
    assert (d.pieces[i0].label, d.pieces[i1].label) == ("agents", "inflow")
    assert (lo0, hi0, lo1, hi1) == pytest.approx((1, 3, 3, 7), abs=1e-12)
    table = phase_overlay(s, d, reps=4, horizon=400, warmup=40, seed=3, workers=1,
                          max_points=4)
    # 1..7 thinned to every other staff level, keeping both ends
    assert list(table["a"]) == [1, 3, 5, 7] and "b" not in table.columns
    for row in table.itertuples():
        assert row.fluid_rate == pytest.approx(min(1.5, row.a / 2), abs=1e-9)
        assert row.optimistic == (row.fluid_rate > row.sim_high)
        assert row.n == 4
    fig = phase_figure(d, overlay=table)
    assert isinstance(fig, Figure) and len(fig.axes) == 2  # rate, and the target's service level
    assert len(phase_figure(d).axes) == 1
    # out of LPs before any test point: not proven exact, but its pieces are still drawn
    rough = phase_diagram(s, ("agents",), max_solves=1)
    assert not rough.exact and rough.to_json()["max_mismatch"] is None
    assert len(phase_figure(rough).axes) == 1


def test_staffing_figure_panels():
    # formulas in place of the simulation (as in test_search_finds_the_erlang_c_minimum): one
    # panel per target and one of the staff per pool; the fluid plan alone is one panel of bars
    s = load_scenario_text(station(1.0, 3.0, 0.5, 0.9))
    result = staff_search(s, evaluator=erlang_c_evaluator(1.0, 3.0, 0.5))
    fig = staffing_figure(result)
    assert isinstance(fig, Figure) and len(fig.axes) == 2
    assert "final plan agents 6" in fig.get_suptitle()  # Erlang C answer of that case
    only = staff_search(s, fluid_only=True)
    fig = staffing_figure(only)
    assert len(fig.axes) == 1
    heights = sorted(p.get_height() for p in fig.axes[0].patches)
    assert heights == [1, 3]  # the scenario's 1 agent and the fluid plan ceil(R) = ceil(3) = 3
