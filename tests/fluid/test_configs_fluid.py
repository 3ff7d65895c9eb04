"""Fluid answers on the shipped configs, derived by hand from design.md §4.1.

The demo has a priority at the billing desk, so the LP does not apply and the counters answer;
below capacity every rate is inflow-driven, which gives closed forms by hand.
"""

from __future__ import annotations

import pathlib

import pytest

from fluid import load_scenario, throughput

ROOT = pathlib.Path(__file__).resolve().parents[2]


def test_demo_rates_and_loads_by_hand():
    r = throughput(load_scenario(ROOT / "configs" / "utility-line.yaml"))
    assert r.method == "counters"
    lam = 4.0
    to_agent = 0.75 * lam  # ivr route 0.75
    expected = {
        "ivr_done": 0.25 * lam, "ivr_to_agent": to_agent, "front_answer": to_agent,
        "front_close": 0.6 * to_agent, "front_transfer": 0.2 * to_agent,
        "front_callback": 0.1 * to_agent, "front_consult": 0.1 * to_agent,
        "consult_start": 0.1 * to_agent, "consult_end": 0.1 * to_agent,
        "wrap_close": 0.1 * to_agent, "billing_answer": 0.2 * to_agent,
        "billing_close": 0.2 * to_agent, "callback_start": 0.1 * to_agent,
        "callback_close": 0.1 * to_agent,
    }
    for t, rate in expected.items():
        assert r.rates[t] == pytest.approx(rate, rel=1e-6), t
    assert tuple(r.bottlenecks) == ()
    # agent-time per call offered to each pool (hold means of the places the agent sits in):
    # front desk: talk 4 + 0.1 x (consult 2 + wrap 2); supervisors: 0.1 x 2;
    # billing: 0.2 x 7 (transfers) + 0.1 x 5 (callbacks)
    assert r.load["front_desk"] == pytest.approx(to_agent * (4.0 + 0.1 * 4.0) / 14, rel=1e-6)
    assert r.load["supervisors"] == pytest.approx(to_agent * 0.1 * 2.0 / 2, rel=1e-6)
    assert r.load["billing_desk"] == pytest.approx(to_agent * (0.2 * 7 + 0.1 * 5) / 8, rel=1e-6)


def test_demo_with_too_few_front_agents_is_capped_by_the_front_desk():
    # 10 agents serve at most 10 / 4.4 calls per min (hold per call, as above) < 3 offered
    r = throughput(load_scenario(ROOT / "configs" / "utility-line.yaml",
                                 overrides=["pools.front_desk=10"]))
    assert r.rates["front_answer"] == pytest.approx(10 / 4.4, rel=1e-3)
    assert tuple(r.bottlenecks) == ("front_desk",)


def test_single_station_lp_agrees_with_counters():
    r = throughput(load_scenario(ROOT / "configs" / "single-station.yaml"), cross_check=True)
    assert r.method == "lp"
    assert r.rates["answer"] == pytest.approx(2.0)  # below capacity 12 / 5 = 2.4
    assert r.cross_check is not None and r.cross_check < 1e-6
