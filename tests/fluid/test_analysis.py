"""fluid.throughput: method choice, bottlenecks, loads and the JSON contract of design.md §5,
against values derived by hand on the test nets."""

from __future__ import annotations

import json
import math
import pathlib
import warnings

import pytest

from fluid import load_scenario
from fluid.analysis import throughput
from fluid.offered import offered_rates, pool_loads

from . import nets
from .test_lp import EXITLESS

EXACT = 1e-9
CONFIGS = sorted((pathlib.Path(__file__).resolve().parents[2] / "configs").glob("*.yaml"))


@pytest.mark.parametrize("rate, bottlenecks", [(3.0, ("agents",)), (2.0, ()), (2.5, ())])
def test_single_pool(rate, bottlenecks):
    # By hand: load = λh/N = 2λ/5; the pool limits only when λ > N/h = 2.5 (at λ = 2.5 one more
    # agent does not raise the output)
    r = throughput(nets.load(nets.single_pool(rate, 5, 2.0)), cross_check=True)
    assert r.method == "lp"
    assert r.rates["answer"] == pytest.approx(min(rate, 2.5), abs=EXACT)
    assert r.output_rate == pytest.approx(min(rate, 2.5), abs=EXACT)
    assert r.offered_load["agents"] == pytest.approx(rate * 2.0 / 5, abs=EXACT)
    assert r.bottlenecks == bottlenecks
    assert r.phase == ("agents" if bottlenecks else "inflow")
    assert r.cross_check is not None and r.cross_check < 1e-9
    assert r.rounding == 0.0


def test_the_counter_cross_check_runs_only_when_asked():
    s = nets.load(nets.single_pool(3.0, 5, 2.0))
    r = throughput(s)
    assert r.method == "lp" and r.counters is None
    assert (r.cross_check, r.rounding, r.dt, r.horizon) == (None, None, None, None)
    asked = throughput(s, cross_check=True)
    assert asked.counters is not None and asked.cross_check < 1e-9
    assert asked.rates == r.rates and asked.bottlenecks == r.bottlenecks


def test_cold_transfer_bottleneck_and_loads():
    # By hand: output = front_close 3 + billing_close 0.6 = 3.6; billing limits (one more agent:
    # 4/5 = 0.8 > 0.6), the front does not. Loads at the inflow-driven rates: front 4 × 2 / 10 =
    # 0.8; billing is offered 1 per min × 5 min / 3 agents = 5/3.
    r = throughput(nets.load(nets.cold_transfer()))
    assert r.output_rate == pytest.approx(3.6, abs=EXACT)
    assert r.bottlenecks == ("billing_desk",)
    assert r.offered_load["front_desk"] == pytest.approx(0.8, abs=EXACT)
    assert r.offered_load["billing_desk"] == pytest.approx(5 / 3, abs=EXACT)
    assert r.offered_rates["billing_answer"] == pytest.approx(1.0, abs=EXACT)


@pytest.mark.parametrize(
    "supervisors, bottleneck, sup_load",
    [
        # front limits at 10/3 < 4; supervisors are offered 5 × 0.5 × 2 = 5 agent-min per min
        (4, "front_desk", 5 / 4),
        # supervisors limit at 2 < 10/3
        (2, "supervisors", 5 / 2),
    ],
)
def test_hand_over_regimes(supervisors, bottleneck, sup_load):
    # Front load: 5 per min × (2 + 0.5 × 2) min / 10 agents = 1.5 in both regimes (the wait for a
    # supervisor is zero at inflow-driven rates)
    r = throughput(nets.load(nets.hand_over(10, supervisors)))
    assert r.bottlenecks == (bottleneck,)
    assert r.offered_load["front_desk"] == pytest.approx(1.5, abs=EXACT)
    assert r.offered_load["supervisors"] == pytest.approx(sup_load, abs=EXACT)


def test_two_agents_load():
    # By hand: 2 agents × 2 min × 2 jobs per min / 5 agents = 1.6
    r = throughput(nets.load(nets.two_agents()))
    assert r.offered_load["crew"] == pytest.approx(1.6, abs=EXACT)
    assert r.bottlenecks == ("crew",)


def test_priority_desk_uses_the_counters():
    # By hand: high 1, low 4/3 (see test_counters); offered work 1 × 2 + 3 × 3 = 11 agent-min per
    # min over 6 agents; one more agent raises the low class: the desk limits.
    r = throughput(nets.load(nets.priority_desk(1.0, 3.0)))
    assert r.method == "counters"
    assert r.rates["high_answer"] == pytest.approx(1.0, abs=EXACT)
    assert r.rates["low_answer"] == pytest.approx(4 / 3, abs=EXACT)
    assert r.bottlenecks == ("desk",)
    assert r.offered_load["desk"] == pytest.approx(11 / 6, abs=EXACT)
    assert r.cross_check is None
    assert "abandonment" in r.model  # the fluid model used is named, and it abandons
    with pytest.raises(ValueError, match="priority"):
        throughput(nets.load(nets.priority_desk(1.0, 3.0)), method="lp")


def test_time_varying_nets_report_window_means():
    # Profile 1/min for 20 min then 3/min, 4 agents of hold 2, horizon 200 (warmup 0):
    # answered by t = 200: 20 + 2 × 180 = 380 (the first 20 are answered on arrival, then the
    # agents run at capacity 2), so the window rate is 380/200 = 1.9. Mean arrival rate
    # (20 + 540)/200 = 2.8, load 2.8 × 2 / 4 = 1.4.
    r = throughput(nets.load(nets.profile_peak()))
    assert r.method == "counters"
    assert r.window == (0.0, 200.0)
    assert r.rates["answer"] == pytest.approx(1.9, abs=EXACT)
    assert r.source_rates["calls"] == pytest.approx(2.8, abs=EXACT)
    assert r.offered_load["agents"] == pytest.approx(1.4, abs=EXACT)
    assert r.bottlenecks == ("agents",)
    # Schedule 6 then 2 agents (step 50, horizon 300): mean staff (300 + 500)/300 = 8/3,
    # load 2.5 × 2 / (8/3) = 1.875
    cut = throughput(nets.load(nets.staff_cut()))
    assert cut.staff["agents"] == pytest.approx(8 / 3, abs=EXACT)
    assert cut.offered_load["agents"] == pytest.approx(1.875, abs=EXACT)
    assert cut.bottlenecks == ("agents",)


def test_no_staff_and_no_invariant_give_null_loads():
    # billing has no staff: it is offered work (load inf, JSON null) and one agent would raise
    # the output
    r = throughput(nets.load(nets.cold_transfer(0)))
    assert r.rates["billing_answer"] == 0.0
    assert math.isinf(r.load["billing_desk"])
    assert r.bottlenecks == ("billing_desk",)
    doc = json.loads(r.to_json())  # strict JSON (no Infinity token)
    assert doc["load"]["billing_desk"] is None
    with pytest.warns(Warning):
        leaky = nets.load(nets.LEAKY)
    assert math.isnan(throughput(leaky).load["agents"])


def test_json_contract():
    r = throughput(nets.load(nets.cold_transfer()))
    doc = json.loads(r.to_json())
    # design.md §5: fluid --json keys
    assert doc["method"] == "lp"
    assert doc["throughput"]["billing_close"] == pytest.approx(0.6)
    assert doc["bottlenecks"] == ["billing_desk"]
    assert set(doc["load"]) == {"front_desk", "billing_desk"}
    assert doc["scenario"] == "cold transfer (invented test net)"
    assert doc["time_unit"] == "min"


def test_to_frame_is_tidy():
    frame = throughput(nets.load(nets.cold_transfer())).to_frame()
    assert list(frame.columns) == ["kind", "name", "metric", "value"]
    row = frame[(frame.kind == "pool") & (frame.name == "billing_desk") & (frame.metric == "offered_load")]
    assert row.value.item() == pytest.approx(5 / 3)
    assert set(frame.kind) == {"transition", "source", "pool", "scenario"}


def test_nets_whose_jobs_cannot_end_use_the_counters():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        s = nets.load(EXITLESS)
    r = throughput(s)
    assert r.method == "counters"
    assert r.rates["answer"] == pytest.approx(2.5, abs=EXACT)
    # jobs circulate forever at inflow-driven rates: unbounded offered work
    rates, inflow = offered_rates(s)
    assert math.isinf(inflow["queue"]) and math.isinf(rates["answer"])
    assert math.isinf(pool_loads(s)[0]["agents"])


@pytest.mark.parametrize("path", CONFIGS, ids=[p.stem for p in CONFIGS])
def test_every_config_gives_an_answer(path):
    r = throughput(load_scenario(path), cross_check=True)
    assert r.method in ("lp", "counters")
    assert all(math.isfinite(v) and v >= 0 for v in r.rates.values())
    doc = json.loads(r.to_json())
    assert {"throughput", "bottlenecks", "load", "method"} <= set(doc)
    if r.cross_check is not None and r.rounding == 0.0:
        # holds on the grid: LP and counters agree (see test_lp)
        assert r.cross_check < 1e-6
