"""Exact fluid phase diagrams (fluid.phases) against closed forms derived by hand and against the
throughput LP itself.

Closed forms (references.md, "Throughput LP of a fluid timed Petri net"): a pool of N agents with
mean hold h carries at most N/h jobs per time unit; a pool whose agents are held over several
places per job supports N over the expected total hold per job; a place downstream of a routing
split sees the split share of the upstream rate, capped by its own pool. The rate of a chain of
such stages is the minimum of the inflow and each stage's cap, so every diagram below is a
minimum of affine functions written out beside its test.
"""

from __future__ import annotations

import itertools
import json
import math
import pathlib

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fluid import load_scenario
from fluid.counters import integrate_counters
from fluid.lp import throughput_lp
from fluid.phases import MATCH_TOLERANCE, phase_diagram

from . import nets

EXACT = 1e-9
ROOT = pathlib.Path(__file__).resolve().parents[2]

TANDEM = """
name: three-stage tandem (invented test net)
time_unit: min
sources:
  calls: {rate: 3.0, into: q1}
pools:
  a: 4
  b: 5
  c: 9
places:
  q1: {}
  t1: {hold: 2.0}
  q2: {}
  t2: {hold: 1.5}
  q3: {}
  t3: {hold: 4.0}
transitions:
  s1: {in: [q1, a], out: [t1]}
  e1: {in: [t1], out: [a, q2]}
  s2: {in: [q2, b], out: [t2]}
  e2: {in: [t2], out: [b, q3]}
  s3: {in: [q3, c], out: [t3]}
  e3: {in: [t3], out: [c]}
"""


def _pieces(diagram):
    """{label: (const, coef_a, coef_b)} of a diagram (one piece per label in these nets)."""
    a, b = diagram.axes
    out = {p.label: (p.const, p.coef[a], p.coef[b]) for p in diagram.pieces}
    assert len(out) == len(diagram.pieces)
    return out


def _assert_pieces(diagram, expected):
    got = _pieces(diagram)
    assert set(got) == set(expected)
    for label, values in expected.items():
        assert got[label] == pytest.approx(values, abs=EXACT), label


def _grid(lo_a, hi_a, lo_b, hi_b, n=13):
    # real staff, on and off the integers, plus points far beyond the drawn ranges (the pieces
    # must hold for every non-negative staff)
    pts = [(a, b) for a in np.linspace(lo_a, hi_a, n) for b in np.linspace(lo_b, hi_b, n)]
    return pts + [(0.0, 1e3), (1e3, 0.0), (1e4, 1e4), (37.3, 0.2)]


def test_tandem_first_two_stages():
    # By hand: stage caps a/2 and b/1.5; stage 3 (c = 9, hold 4) caps the flow at 9/4 = 2.25
    # below the inflow 3, so the inflow piece never decides and c's piece is a constant that
    # folds its 9 agents into const (other pools at the scenario's staff):
    # rate = min(a/2, b/1.5, 2.25)
    d = phase_diagram(nets.load(TANDEM), ("a", "b"))
    assert d.method == "lp" and d.exact
    _assert_pieces(d, {"a": (0, 0.5, 0), "b": (0, 0, 1 / 1.5), "c": (2.25, 0, 0)})
    c_piece = next(p for p in d.pieces if p.label == "c")
    assert c_piece.coef_all["c"] == pytest.approx(0.25, abs=EXACT)
    for a, b in _grid(0, 8, 0, 10):
        assert d.rate_at(a, b) == pytest.approx(min(a / 2, b / 1.5, 2.25), abs=EXACT)
    assert d.max_mismatch <= MATCH_TOLERANCE


def test_tandem_first_and_last_stage():
    # By hand: b = 5 gives stage 2 the cap 5/1.5 = 3.33 > λ = 3, so it never limits:
    # rate = min(3, a/2, c/4)
    d = phase_diagram(nets.load(TANDEM), ("a", "c"))
    _assert_pieces(d, {"inflow": (3, 0, 0), "a": (0, 0.5, 0), "c": (0, 0, 0.25)})
    for a, c in _grid(0, 8, 0, 18):
        assert d.rate_at(a, c) == pytest.approx(min(3, a / 2, c / 4), abs=EXACT)


@pytest.mark.parametrize("rate", [5.0, 2.5])
def test_hand_over(rate):
    # By hand (references.md, N over the expected total hold per job): a front agent stays with
    # every call for its own hold 2 and, for the half handed over, for the joint hold 2 with a
    # supervisor (waiting for a supervisor costs nothing where supervisors do not limit):
    # front cap F/(2 + 0.5·2) = F/3; supervisors hold 2 per handed-over call, half of the calls:
    # cap S/(0.5·2) = S. Output (front_close + consult_end) = answered calls:
    # rate = min(λ, F/3, S)
    d = phase_diagram(nets.load(nets.hand_over(10, 4, rate=rate)), ("front_desk", "supervisors"))
    _assert_pieces(d, {"inflow": (rate, 0, 0), "front_desk": (0, 1 / 3, 0),
                       "supervisors": (0, 0, 1.0)})
    for f, s in _grid(0, 20, 0, 8):
        assert d.rate_at(f, s) == pytest.approx(min(rate, f / 3, s), abs=EXACT)
    assert d.label_at(20, 8) == "inflow"
    assert d.label_at(6, 8) == "front_desk"  # 6/3 = 2 below both inflows
    assert d.label_at(20, 1) == "supervisors"


def test_cold_transfer_has_a_piece_limited_by_both_pools():
    # By hand: the front desk (hold 2) answers x = min(4, F/2); 0.75 x close at once, 0.25 x go
    # to billing (hold 5), which carries min(0.25 x, B/5). Output = 0.75 x + min(0.25 x, B/5)
    # = min(x, 0.75 x + B/5), and with x = min(4, F/2):
    # rate = min(4, 3 + B/5, F/2, 0.375 F + 0.2 B)   (the last piece: both pools limit)
    d = phase_diagram(nets.load(nets.cold_transfer()), ("front_desk", "billing_desk"))
    _assert_pieces(d, {"inflow": (4, 0, 0), "billing_desk": (3, 0, 0.2),
                       "front_desk": (0, 0.5, 0), "front_desk+billing_desk": (0, 0.375, 0.2)})
    for f, b in _grid(0, 20, 0, 7):
        expected = min(4, 3 + b / 5, f / 2, 0.375 * f + 0.2 * b)
        assert d.rate_at(f, b) == pytest.approx(expected, abs=EXACT)


def test_cold_transfer_rate_of_one_transition():
    # By hand: billing_close = min(0.25 · min(4, F/2), B/5) = min(1, F/8, B/5)
    d = phase_diagram(nets.load(nets.cold_transfer()), ("front_desk", "billing_desk"),
                      of="billing_close")
    assert d.of == ("billing_close",)
    _assert_pieces(d, {"inflow": (1, 0, 0), "front_desk": (0, 0.125, 0),
                       "billing_desk": (0, 0, 0.2)})
    for f, b in _grid(0, 20, 0, 7):
        assert d.rate_at(f, b) == pytest.approx(min(1, f / 8, b / 5), abs=EXACT)


def test_json_document():
    d = phase_diagram(nets.load(nets.hand_over(10, 4)), ("front_desk", "supervisors"),
                      ranges={"front_desk": (2, 30)})
    doc = json.loads(json.dumps(d.to_json(), allow_nan=False))
    assert {"of", "axes", "pieces", "method", "ranges", "notes"} <= set(doc)
    assert doc["of"] == ["front_close", "consult_end"]  # the transitions that end jobs
    assert doc["axes"] == ["front_desk", "supervisors"]
    assert doc["method"] == "lp"
    assert doc["ranges"]["front_desk"] == [2, 30]
    # default range: 0 to max(2 × staff, 1.25 × offered work) = max(8, 1.25 × 5) = 8
    assert doc["ranges"]["supervisors"] == [0, 8]
    for piece in doc["pieces"]:
        assert set(piece["coef"]) == {"front_desk", "supervisors"}
        assert {"const", "coef", "limiting"} <= set(piece)
    # the JSON alone reproduces the rate: min over pieces of const + Σ coef × staff
    for f, s in [(0, 0), (4.5, 7), (30, 2), (12, 12)]:
        value = min(p["const"] + p["coef"]["front_desk"] * f + p["coef"]["supervisors"] * s
                    for p in doc["pieces"])
        assert value == pytest.approx(min(5, f / 3, s), abs=EXACT)
    frame = d.wide_frame()
    assert list(frame.columns) == ["piece", "const", "coef_front_desk", "coef_supervisors",
                                   "label"]


@st.composite
def chains_with_two_pools(draw):
    stages = []
    for _ in range(draw(st.integers(2, 3))):
        stages.append({
            "staff": draw(st.integers(1, 8)),
            "weight": draw(st.sampled_from([1, 1, 2])),
            "hold": draw(st.integers(1, 8)) / 2,
            "route": {"close": draw(st.integers(1, 10)), "transfer": draw(st.integers(1, 10)),
                      "rework": draw(st.sampled_from([0, 0, 2])),
                      "consult": draw(st.sampled_from([0, 0, 3]))},
            "sup_staff": draw(st.integers(0, 3)),
            "joint_hold": draw(st.integers(1, 6)) / 2,
        })
    return nets.stage_chain(stages, draw(st.integers(1, 12)) / 2)


@settings(max_examples=15, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.too_slow])
@given(chains_with_two_pools())
def test_envelope_equals_the_lp_at_random_staff(text):
    # The reference is the throughput LP solved directly at each point (weights 1 on the
    # transitions that end jobs). Points are drawn far outside the drawn ranges too.
    s = nets.load(text)
    pools = list(s.pools)
    axes = (pools[0], pools[-1])
    d = phase_diagram(s, axes)
    assert d.exact
    weights = {q: float(q in s.ending_transitions) for q in s.transitions}
    weights |= {x: 0.0 for x in s.sources}
    rng = np.random.default_rng(20240601)
    for a, b in rng.uniform(0, 40, size=(12, 2)):
        lp = throughput_lp(s, weights=weights, staff={axes[0]: a, axes[1]: b}).objective
        assert d.rate_at(a, b) == pytest.approx(lp, abs=1e-8 * max(1.0, d.inflow_rate))


def test_counters_grid_with_a_priority_at_the_queue():
    # overflow net: the own desk (hold 2) takes what it can, the overflow desk (hold 2) the
    # rest. By hand: total = min(λ, own/2 + overflow/2), λ = 2.5. Below the inflow one more agent
    # in either desk raises it (both limit); at own + overflow ≥ 5 neither does (inflow).
    s = nets.load(nets.overflow())
    d = phase_diagram(s, ("own_desk", "overflow_desk"),
                      ranges={"own_desk": (0, 6), "overflow_desk": (0, 3)})
    assert d.method == "counters-grid" and not d.pieces and not d.exact
    assert "priorities" in d.notes[0]
    assert len(d.grid) == 7 * 4
    for g in d.grid:
        assert g.rate == pytest.approx(min(2.5, (g.a + g.b) / 2), rel=1e-6, abs=1e-9)
        if g.a + g.b < 5:
            assert g.limiting == ("own_desk", "overflow_desk"), g
        else:
            assert g.label == "inflow", g
    # the grid's rates are the counters' own long-run rates at those staff levels
    sol = integrate_counters(s, staff={"own_desk": 1, "overflow_desk": 2})
    total = sol.rates["own_close"] + sol.rates["overflow_close"]
    assert d.rate_at(1, 2) == pytest.approx(total, rel=1e-12)
    doc = json.loads(json.dumps(d.to_json(), allow_nan=False))
    assert doc["method"] == "counters-grid" and doc["pieces"] == []
    assert len(doc["grid"]) == 28


def test_counters_grid_labels_pools_that_limit_only_together():
    # The demo (a priority at the billing desk forces the counters grid). By hand, with no front
    # agent and no supervisor no call is answered; one front agent alone is soon stuck for good
    # waiting with a call for a supervisor (10 % of the calls), one supervisor alone gets no call:
    # neither raises the long-run output alone, the two together do.
    s = load_scenario(ROOT / "configs" / "utility-line.yaml")
    d = phase_diagram(s, ("front_desk", "supervisors"),
                      ranges={"front_desk": (0, 1), "supervisors": (0, 1)})
    origin = next(g for g in d.grid if g.a == 0 and g.b == 0)
    assert origin.limiting == ("front_desk", "supervisors")
    # only the IVR's own endings (a quarter of 4 per minute) leave the net then
    assert origin.rate == pytest.approx(1.0, rel=1e-9)
    one_each = next(g for g in d.grid if g.a == 1 and g.b == 1)
    assert one_each.rate > 1.0


def test_refuses_bad_input():
    s = nets.load(nets.hand_over(10, 4))
    with pytest.raises(ValueError, match="two different pools"):
        phase_diagram(s, ("front_desk", "front_desk"))
    with pytest.raises(ValueError, match="not a pool"):
        phase_diagram(s, ("front_desk", "front_queue"))
    with pytest.raises(ValueError, match="not a transition"):
        phase_diagram(s, ("front_desk", "supervisors"), of="nothing")
    with pytest.raises(ValueError, match="low < high"):
        phase_diagram(s, ("front_desk", "supervisors"), ranges={"front_desk": (5, 5)})
    with pytest.raises(ValueError, match="not an axis"):
        phase_diagram(s, ("front_desk", "supervisors"), ranges={"calls": (0, 5)})


def test_witness_points_lie_in_their_cells():
    d = phase_diagram(nets.load(TANDEM), ("a", "c"))
    for i, p in enumerate(d.pieces):
        assert d.piece_at(*p.witness) == i
        others = [q for j, q in enumerate(d.pieces) if j != i]
        assert all(float(q.value(*p.witness)) > float(p.value(*p.witness)) for q in others)


def test_every_piece_is_an_upper_bound_everywhere():
    # LP duality: each piece bounds the rate from above at every staff, not only in its cell
    d = phase_diagram(nets.load(nets.cold_transfer()), ("front_desk", "billing_desk"))
    for f, b in itertools.product(np.linspace(0, 30, 16), np.linspace(0, 12, 13)):
        rate = d.rate_at(f, b)
        assert all(float(p.value(f, b)) >= rate - EXACT for p in d.pieces)
        assert math.isfinite(rate)


# --- one axis ------------------------------------------------------------------------------------


@pytest.mark.parametrize("rate, hold, staff", [(2.0, 5.0, 12), (3.0, 2.0, 4), (0.5, 8.0, 1)])
def test_one_axis_single_pool_is_min_of_inflow_and_capacity(rate, hold, staff):
    # By hand (references.md, "Throughput LP", closed form for a single pool): N agents each
    # holding a job for the mean hold h finish at most N/h jobs per time unit (Little's law:
    # busy agents = rate × h ≤ N), and no more than the λ that arrive can end, so
    # rate = min(λ, N/h): two pieces, "inflow" (const λ, coef 0) and "agents" (const 0, coef
    # 1/h), meeting at N = λh. Exact for every real N ≥ 0, not only the drawn range.
    d = phase_diagram(nets.load(nets.single_pool(rate, staff, hold)), ("agents",))
    assert d.method == "lp" and d.exact and d.axes == ("agents",)
    got = {p.label: (p.const, p.coef["agents"]) for p in d.pieces}
    assert set(got) == {"inflow", "agents"}
    assert got["inflow"] == pytest.approx((rate, 0.0), abs=EXACT)
    assert got["agents"] == pytest.approx((0.0, 1 / hold), abs=EXACT)
    lo, hi = d.box()
    for n in [*np.linspace(lo, hi, 41), rate * hold, 0.37, 1e3, 1e5]:
        assert d.rate_at(n) == pytest.approx(min(rate, n / hold), abs=EXACT)
        if abs(n - rate * hold) > 1e-9:  # at the kink both pieces tie
            assert d.label_at(n) == ("agents" if n < rate * hold else "inflow")
    # vectorised evaluation agrees with the scalar one
    ns = np.linspace(0, 3 * rate * hold, 7)
    assert d.rate_at(ns) == pytest.approx(np.minimum(rate, ns / hold), abs=EXACT)
    for p in d.pieces:
        assert d.piece_at(*p.witness) == d.pieces.index(p)


def test_one_axis_labels_a_pool_off_the_axis():
    # TANDEM with a = 4 (hold 2: cap 4/2 = 2), c = 9 (cap 9/4 = 2.25), λ = 3, b on the axis
    # (hold 1.5): rate = min(3, 2, b/1.5, 2.25) = min(2, b/1.5). The flat piece is held by pool a
    # (off the axis, named because one more agent there raises the rate), not by the inflow.
    d = phase_diagram(nets.load(TANDEM), ["b"])
    got = {p.label: (p.const, p.coef["b"]) for p in d.pieces}
    assert got.keys() == {"a", "b"}
    assert got["a"] == pytest.approx((2.0, 0.0), abs=EXACT)
    assert got["b"] == pytest.approx((0.0, 1 / 1.5), abs=EXACT)
    for b in [0, 1, 2.5, 3, 3.5, 10, 1e4]:
        assert d.rate_at(b) == pytest.approx(min(2.0, b / 1.5), abs=EXACT)


def test_one_axis_cold_transfer():
    # From test_cold_transfer_has_a_piece_limited_by_both_pools with the front desk at its 10
    # agents: min(4, 3 + B/5, 10/2, 0.375·10 + 0.2 B) = min(4, 3 + B/5)
    d = phase_diagram(nets.load(nets.cold_transfer()), ("billing_desk",))
    got = {p.label: (p.const, p.coef["billing_desk"]) for p in d.pieces}
    assert got == {"inflow": pytest.approx((4.0, 0.0), abs=EXACT),
                   "billing_desk": pytest.approx((3.0, 0.2), abs=EXACT)}
    for b in np.linspace(0, 12, 25):
        assert d.rate_at(b) == pytest.approx(min(4.0, 3 + b / 5), abs=EXACT)


def test_one_axis_json_document():
    # same shape as with two axes: {"of", "axes": [pool], "pieces": [{"const", "coef": {pool: x},
    # "limiting": [...]}], ...}; the JSON alone gives the rate min(λ, N/h) = min(2, N/5)
    d = phase_diagram(nets.load(nets.single_pool(2.0, 12, 5.0)), "agents",
                      ranges={"agents": (4, 20)})
    doc = json.loads(json.dumps(d.to_json(), allow_nan=False))
    assert {"of", "axes", "pieces", "method", "ranges", "notes", "staff"} <= set(doc)
    assert doc["axes"] == ["agents"] and doc["of"] == ["close"] and doc["method"] == "lp"
    assert doc["ranges"] == {"agents": [4, 20]}
    for piece in doc["pieces"]:
        assert {"const", "coef", "limiting", "label"} <= set(piece)
        assert set(piece["coef"]) == {"agents"} and len(piece["witness"]) == 1
    assert sorted(p["label"] for p in doc["pieces"]) == ["agents", "inflow"]
    assert next(p for p in doc["pieces"] if p["label"] == "inflow")["limiting"] == []
    for n in [0, 3, 9.5, 10, 17, 400]:
        value = min(p["const"] + p["coef"]["agents"] * n for p in doc["pieces"])
        assert value == pytest.approx(min(2.0, n / 5), abs=EXACT)
    assert list(d.wide_frame().columns) == ["piece", "const", "coef_agents", "label"]


def test_one_axis_counters_grid():
    # overflow net (priority at the queue, so the counters grid): by hand as in
    # test_counters_grid_with_a_priority_at_the_queue, with the overflow desk at its 4 agents:
    # total = min(2.5, (own + 4)/2). At own = 0 the rate 2 is below λ and one more agent in
    # either desk raises it (both limit); from own = 1 on the inflow limits.
    s = nets.load(nets.overflow())
    d = phase_diagram(s, ("own_desk",), ranges={"own_desk": (0, 5)})
    assert d.method == "counters-grid" and not d.pieces
    assert [g.a for g in d.grid] == [0, 1, 2, 3, 4, 5] and all(g.b is None for g in d.grid)
    for g in d.grid:
        assert g.rate == pytest.approx(min(2.5, (g.a + 4) / 2), rel=1e-6, abs=1e-9)
        assert g.label == ("own_desk+overflow_desk" if g.a < 1 else "inflow"), g
    # linear interpolation between grid points, exact on them
    assert d.rate_at(0.5) == pytest.approx((d.grid[0].rate + d.grid[1].rate) / 2, rel=1e-12)
    doc = json.loads(json.dumps(d.to_json(), allow_nan=False))
    assert doc["axes"] == ["own_desk"] and doc["pieces"] == []
    assert all("b" not in g for g in doc["grid"]) and len(doc["grid"]) == 6
    assert list(d.wide_frame().columns) == ["own_desk", "rate", "label"]


def test_refuses_three_axes():
    s = nets.load(nets.cold_transfer())
    with pytest.raises(ValueError, match="one pool or two different pools"):
        phase_diagram(s, ("front_desk", "billing_desk", "front_desk"))
    with pytest.raises(ValueError, match="one pool or two different pools"):
        phase_diagram(s, ())
    d = phase_diagram(s, ("billing_desk",))
    with pytest.raises(TypeError, match="1 axis pool"):
        d.rate_at(1.0, 2.0)
