"""The load per pool is read from the fluid's own rates (issue 13, item 6): what overflow and
priorities actually send a pool, consistent with the bottleneck list and the flags."""

from __future__ import annotations

import math

import pytest

from compare.study.flags import _saturation
from compare.study.gaps import fluid_busy
from fluid import load_scenario_text
from fluid.analysis import throughput
from fluid.bench_nets import multi_skill_yaml

from .nets import overflow


def test_overflow_pool_load_is_what_overflow_sends_it():
    # by hand: λ = 2.5 per time unit; the own desk (2 agents, hold 2) takes 2 / 2 = 1 per time
    # unit and is fully busy; the overflow desk takes the other 1.5, holding 1.5 × 2 = 3 of
    # its 4 agents: load 0.75. With every pool unlimited the first choice takes every job, so
    # the offered load of the overflow desk is 0 and that of the own desk 2.5 × 2 / 2 = 2.5.
    s = load_scenario_text(overflow())
    r = throughput(s)
    assert r.load["own_desk"] == pytest.approx(1.0, rel=1e-6)
    assert r.load["overflow_desk"] == pytest.approx(0.75, rel=1e-6)
    assert r.offered_load == pytest.approx({"own_desk": 2.5, "overflow_desk": 0.0})
    assert r.load == pytest.approx(fluid_busy(s, r), rel=1e-12)
    assert r.to_dict()["load"]["overflow_desk"] == pytest.approx(0.75, rel=1e-6)
    assert r.to_dict()["offered_load"]["own_desk"] == pytest.approx(2.5)


@pytest.mark.parametrize("text", [overflow(), multi_skill_yaml(2)],
                         ids=["overflow", "multi_skill_2"])
def test_no_pool_over_capacity_without_being_a_bottleneck(text):
    s = load_scenario_text(text)
    r = throughput(s)
    busy = fluid_busy(s, r)
    for pool, load in r.load.items():
        assert load == pytest.approx(busy[pool], rel=1e-12)
        assert load > 0  # the shared / overflow pool is reached by the fluid
        if load > 1 + 1e-9:
            assert pool in r.bottlenecks
        # the flag text says plainly whether a fully busy pool is a bottleneck
        note = _saturation(pool, load, r)
        if load >= 1 - 1e-9:
            assert ("not a fluid bottleneck" in note) == (pool not in r.bottlenecks)
        else:
            assert note == ""


def test_multi_skill_shared_pool_carries_the_overflow():
    # the old (unlimited) figure gave the shared pool 0 and the class desks 1.07 and 1.2 with
    # "bottlenecks: none"; at the fluid rates the class desks are (nearly) fully busy and the
    # shared pool carries what they cannot take
    s = load_scenario_text(multi_skill_yaml(2))
    r = throughput(s)
    assert r.offered_load["shared"] == 0.0
    assert r.offered_load["desk_1"] == pytest.approx(1.2)
    assert 0 < r.load["shared"] < 1
    assert all(v <= 1 + 1e-9 for v in r.load.values() if math.isfinite(v))


def test_compare_on_the_overflow_net_reports_the_fluid_load_and_says_why_no_bottleneck():
    # the own desk is fully busy in the fluid (load 1) yet every arrival is served (2.5 of 2.5),
    # so it is no bottleneck: the near_critical flag must say so, and the gap table's load of the
    # overflow desk is its fluid busy 0.75, not the unlimited figure 0
    from compare.study.comparison import compare

    s = load_scenario_text(overflow())
    c = compare(s, reps=3, horizon=200, warmup=20, seed=3, workers=1)
    pools = c.gaps.pools.set_index("pool")
    assert pools.loc["overflow_desk", "load"] == pytest.approx(0.75, rel=1e-6)
    assert pools.loc["overflow_desk", "load"] == pytest.approx(pools.loc["overflow_desk",
                                                                          "fluid"], rel=1e-12)
    assert pools.loc["overflow_desk", "offered_load"] == 0.0
    assert c.fluid.bottlenecks == ()
    own = [f for f in c.flags_of("near_critical") if f.where == "own_desk"]
    assert len(own) == 1 and "not a fluid bottleneck" in own[0].message
    doc = c.to_json()
    assert doc["gaps"]["pools"]["overflow_desk"]["load"] == pytest.approx(0.75, rel=1e-6)
    assert doc["gap_convention"].startswith("gaps: simulated minus fluid")
