"""Gap tables and flags (compare.study.gaps, compare.study.flags, compare.study.comparison).

The fluid columns are deterministic and checked exactly against hand derivations (each shown
beside its assertion) and Whitt's (2006) closed forms for exponential patience (references.md).
The flags are statistical: fixed seeds, and the flags themselves fire only on whole 95 %
intervals, so a lightly loaded station must stay quiet and a near-critical one must fire.
"""

from __future__ import annotations

import json
import math
import pathlib

import pytest

from compare.study.comparison import compare
from compare.formulas.erlang import erlang_a_queue, erlang_c_queue
from compare.study.flags import FLAG_KINDS, downstream_hold, find_flags, queue_trend
from compare.study.gaps import PLACE_TOLERANCE, fluid_place
from fluid import load_scenario, load_scenario_text
from fluid.analysis import throughput

ROOT = pathlib.Path(__file__).resolve().parents[3]
DEMO = ROOT / "compare" / "demo" / "utility-line.yaml"
FAST = dict(reps=6, horizon=400, warmup=40, seed=3, workers=2)


def station(rate, staff, hold=1.0, patience=None, target="{within: 0.5, goal: 0.8}",
            abandonment_max=None):
    """One queue and one pool of ``staff`` agents with exponential holds (invented test net)."""
    queue = "{}" if patience is None else f"{{patience: {{dist: exponential, mean: {patience}}}}}"
    targets = f"\ntargets:\n  queue: {target}" if target else ""
    if abandonment_max is not None:
        targets += f"\n  abandonment: {{max: {abandonment_max}}}"
    return load_scenario_text(f"""
name: test station (invented)
time_unit: min
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
{targets}
""", file="<test>")


def row(frame, **match):
    sel = frame
    for k, v in match.items():
        sel = sel[sel[k] == v]
    assert len(sel) == 1, match
    return sel.iloc[0]


# --- fluid columns: exact, by hand ---------------------------------------------------------------


def test_fluid_columns_underloaded_single_pool():
    # Hand: λ = 4, 5 agents, hold 1: capacity 5 > 4, so the fluid rates are answer = close = 4,
    # the queue keeps up (no wait, no abandonment, nothing waiting, everyone within the target),
    # load = busy = 4·1/5 = 0.8, output 4, abandonment 0.
    c = compare(station(4.0, 5, patience=2.0), **FAST)
    g = c.gaps
    assert row(g.transitions, transition="answer").fluid == pytest.approx(4.0, rel=1e-9)
    assert row(g.transitions, transition="close").fluid == pytest.approx(4.0, rel=1e-9)
    fp = g.fluid_places["queue"]
    assert fp.state == "underloaded" and fp.inflow == pytest.approx(4.0, rel=1e-9)
    for metric, value in (("wait", 0.0), ("abandoned", 0.0), ("queue", 0.0),
                          ("served_within", 1.0)):
        assert row(g.places, place="queue", metric=metric).fluid == value
    pool = row(g.pools, pool="agents")
    assert pool.load == pytest.approx(0.8, rel=1e-9)
    assert pool.fluid == pytest.approx(0.8, rel=1e-9)
    assert row(g.totals, metric="output_rate").fluid == pytest.approx(4.0, rel=1e-9)
    assert row(g.totals, metric="abandonment").fluid == 0.0
    # gap columns are simulated mean − fluid, relative to |fluid|
    r = row(g.transitions, transition="answer")
    assert r.gap == pytest.approx(r["mean"] - r.fluid)
    assert r.rel_gap == pytest.approx(r.gap / r.fluid)


def test_fluid_columns_overloaded_with_patience_follow_whitt():
    # Whitt (2006), exponential patience θ = 1/2 (references.md), with the fluid throughput
    # ρ = 5 agents / hold 1 = 5 as capacity and λ = 6:
    #   P(Ab) = 1 − 5/6 = 1/6; served wait w = ln(6/5)/θ = 2 ln 1.2; queue q = (6 − 5)/θ = 2;
    #   mean wait of all leaving jobs = q/λ = 1/3 (Little); w = 0.3646 <= within 0.5, so the
    #   share served within is 5/6. Pool: offered load 6/5, busy at the fluid rates 5/5 = 1.
    c = compare(station(6.0, 5, patience=2.0), **FAST)
    g = c.gaps
    fp = g.fluid_places["queue"]
    assert fp.state == "overloaded"
    assert (fp.inflow, fp.capacity) == (pytest.approx(6.0), pytest.approx(5.0))
    assert fp.abandoned == pytest.approx(1 / 6, rel=1e-9)
    assert fp.wait_served == pytest.approx(2 * math.log(1.2), rel=1e-9)
    assert fp.queue == pytest.approx(2.0, rel=1e-8)
    assert fp.wait == pytest.approx(1 / 3, rel=1e-8)
    assert fp.served_within == pytest.approx(5 / 6, rel=1e-9)
    assert row(g.transitions, transition="answer").fluid == pytest.approx(5.0, rel=1e-9)
    assert row(g.pools, pool="agents").offered_load == pytest.approx(1.2, rel=1e-9)
    assert row(g.pools, pool="agents").load == pytest.approx(1.0, rel=1e-9)  # fluid rates
    assert row(g.pools, pool="agents").fluid == pytest.approx(1.0, rel=1e-9)
    # overall: abandoning 6·(1/6) = 1 per minute of 6 arriving
    assert row(g.totals, metric="abandonment").fluid == pytest.approx(1 / 6, rel=1e-9)


def test_fluid_place_served_within_is_zero_when_the_fluid_wait_exceeds_the_target():
    # Hand: as above but within 0.3 < w = 2 ln 1.2 = 0.3646: every served particle waits w
    s = station(6.0, 5, patience=2.0, target="{within: 0.3, goal: 0.8}")
    assert fluid_place(s, throughput(s), "queue").served_within == 0.0


def test_unstable_fluid_place_and_strict_json():
    # Hand: λ = 6 > capacity 5 without patience: the fluid queue grows without bound
    c = compare(station(6.0, 5), reps=3, horizon=200, warmup=20, seed=1, workers=2)
    fp = c.gaps.fluid_places["queue"]
    assert fp.state == "unstable" and math.isinf(fp.wait) and math.isinf(fp.queue)
    unstable = c.flags_of("unstable")
    assert [f.where for f in unstable] == ["queue"]
    assert "agents" in unstable[0].message
    doc = c.to_json()
    json.dumps(doc, allow_nan=False)  # nan and inf must have become null
    assert set(doc) >= {"fluid", "simulation", "gaps", "flags"}
    assert doc["gaps"]["places"]["queue"]["wait"]["fluid"] is None
    assert doc["flags"][0].keys() == {"kind", "where", "message"}


def test_tolerance_boundary_is_relative():
    # Hand: a place whose outflow is short of its inflow by less than PLACE_TOLERANCE keeps up;
    # capacity 5 against λ = 5 (exactly critical) is "underloaded" in the fluid sense
    s = station(5.0, 5)
    fp = fluid_place(s, throughput(s), "queue")
    assert fp.state == "underloaded"
    assert PLACE_TOLERANCE < 1e-3


def test_downstream_hold_of_the_demo():
    # Hand, from compare/demo/utility-line.yaml: front_queue -> front_answer -> front_talk (mean
    # 4.0); consult_wait -> consulting (2.0); callback_list -> callback_talk (5.0)
    s = load_scenario(DEMO)
    assert downstream_hold(s, "front_queue") == 4.0
    assert downstream_hold(s, "consult_wait") == 2.0
    assert downstream_hold(s, "callback_list") == 5.0


# --- flags ---------------------------------------------------------------------------------------


def test_flags_quiet_on_a_lightly_loaded_station():
    # λ = 1, 10 agents, hold 3 (load 0.3): Erlang C gives P(W > 0) ~ 1e-3 (compare.formulas.erlang), so
    # nothing waits that matters, nobody abandons, and every target is met
    assert erlang_c_queue(10, 1.0, 3.0).p_wait < 0.002
    s = station(1.0, 10, hold=3.0, patience=3.0, abandonment_max=0.05)
    c = compare(s, reps=8, horizon=1000, warmup=100, seed=5, workers=2)
    assert c.flags == ()


def test_flags_fire_on_a_near_critical_station():
    # λ = 4.8, 5 agents, hold 1 (load 0.96, no patience). Erlang C (references.md): mean wait
    # C/(5 − 4.8) ≈ 4.4 min, far above the target's 0.5 min the fluid model calls zero; service
    # level 1 − C·e^{−0.2·0.5} ≈ 0.2 < goal 0.8
    ec = erlang_c_queue(5, 4.8, 1.0)
    assert ec.mean_wait > 4 and ec.service_level(0.5) < 0.3
    c = compare(station(4.8, 5), reps=10, horizon=2000, warmup=200, seed=7, workers=2)
    kinds = {(f.kind, f.where) for f in c.flags}
    assert ("near_critical", "agents") in kinds
    assert ("hidden_congestion", "queue") in kinds
    assert ("target_missed", "queue") in kinds
    assert {f.kind for f in c.flags} <= set(FLAG_KINDS)
    for f in c.flags:
        assert "fluidgap staff" in f.message or "agents" in f.message


def test_flags_for_abandonment_and_optimistic_throughput():
    # λ = 5.5, 5 agents, hold 1, patience mean 1. Whitt's fluid P(Ab) = 1 − 5/5.5 = 0.0909; the
    # exact Erlang A value (Garnett, Mandelbaum and Reiman 2002) is higher, and the served rate
    # 5.5·(1 − P(Ab)) lies well below the fluid rate 5 that ignores patience
    ea = erlang_a_queue(5, 5.5, 1.0, 1.0)
    assert ea.p_abandon > 1 - 5 / 5.5 + 0.03
    assert 5.5 * (1 - ea.p_abandon) < 5 * 0.97
    s = station(5.5, 5, patience=1.0, abandonment_max=0.05)
    c = compare(s, reps=10, horizon=1000, warmup=100, seed=11, workers=2)
    kinds = {(f.kind, f.where) for f in c.flags}
    assert ("abandonment_underestimated", "queue") in kinds
    assert ("throughput_optimistic", "answer") in kinds
    assert ("target_missed", "queue") in kinds  # overall abandonment above 5 %
    # the flags are a pure function of the results: recomputing gives the same
    assert find_flags(c.scenario, c.fluid, c.simulation, c.gaps) == c.flags


def test_queue_trend_sees_a_growing_queue():
    # λ = 6 > 5 agents × 1/hold, no patience: the queue grows about 1 job per minute
    c = compare(station(6.0, 5), reps=4, horizon=400, warmup=40, seed=2, workers=2)
    slope, growth, level = queue_trend(c.simulation)
    assert slope.low > 0 and growth > level * 0.5


def test_demo_front_desk_is_near_critical():
    # Hand, from the demo's YAML: 4 calls/min × 0.75 reach front_queue = 3 per min; each holds a
    # front agent for talk 4.0 + 0.1 × (consult 2.0 + wrap 2.0) = 4.4 min (the consult wait is
    # zero in the fluid), so the fluid load is 3 × 4.4 / 14 = 0.942857: near critical
    c = compare(load_scenario(DEMO), reps=4, horizon=300, warmup=30, seed=7, workers=2)
    assert row(c.gaps.pools, pool="front_desk").load == pytest.approx(13.2 / 14, rel=1e-9)
    assert ("near_critical", "front_desk") in {(f.kind, f.where) for f in c.flags}
    assert not any(f.where in ("supervisors", "billing_desk") for f in c.flags_of("near_critical"))
    frame = c.to_frame()
    assert set(frame["kind"]) == {"transition", "place", "pool", "total"}
    assert list(frame.columns) == ["kind", "name", "metric", "fluid", "mean", "low", "high", "n",
                                   "gap", "rel_gap"]
