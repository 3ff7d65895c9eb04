"""The counter equations of design.md §4.1 integrated on a grid, against values derived by hand.

With holds that are multiples of the grid step the discrete recursion relates values at grid
points only, so the grid values are exact solutions of the continuous counter equations there and
are checked to floating-point accuracy.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from fluid import load_scenario_text
from fluid.counters import choose_step, integrate_counters

from . import nets

EXACT = 1e-9


def at(sol, t: float) -> int:
    """Grid index of time t."""
    i = int(round(t / sol.dt))
    assert abs(i * sol.dt - t) < 1e-9, f"{t} is not a grid point of step {sol.dt}"
    return i


def test_single_pool_overloaded_sawtooth():
    # By hand, λ = 3, N = 5, h = 2: z_a(t) = min(3t, 5 + z_a(t − 2)).
    # t ≤ 5/3: 3t; then flat at 5 until t = 2; z_a(2.5) = min(7.5, 5 + z_a(0.5)) = 6.5;
    # z_a(2k) = 5k, so z_a(600) = 1500 and the long-run rate is N/h = 2.5.
    sol = integrate_counters(nets.load(nets.single_pool(3.0, 5, 2.0)), dt=0.25, horizon=600)
    z = sol.counters["answer"]
    for t, value in [(1.0, 3.0), (1.5, 4.5), (1.75, 5.0), (2.0, 5.0), (2.5, 6.5), (4.0, 10.0),
                     (600.0, 1500.0)]:
        assert z[at(sol, t)] == pytest.approx(value, abs=EXACT), t
    # close lags answer by the hold: z_c(t) = z_a(t − 2)
    assert sol.counters["close"][at(sol, 10.0)] == pytest.approx(z[at(sol, 8.0)], abs=EXACT)
    # idle agents: 5 − 3 at t = 1, none at t = 1.75; queue at t = 600: 1800 − 1500 = 300
    assert sol.markings["agents"][at(sol, 1.0)] == pytest.approx(2.0, abs=EXACT)
    assert sol.markings["agents"][at(sol, 1.75)] == pytest.approx(0.0, abs=EXACT)
    assert sol.waiting["queue"][at(sol, 600.0)] == pytest.approx(300.0, abs=EXACT)
    assert sol.rates["answer"] == pytest.approx(2.5, abs=EXACT)
    assert sol.period == pytest.approx(2.0)  # agents come back in bursts every hold time
    assert sol.rounding == 0.0


def test_two_class_priority_desk():
    # By hand (desk of 6, high hold 2, low hold 3, high served first):
    # - λ = (1, 3): high takes 1 per min, using 1 × 2 = 2 agents; the other 4 agents serve the
    #   low class at 4/3 per min < 3, so its queue grows at 3 − 4/3 = 5/3 per min;
    # - λ = (4, 3): high alone would need 8 agents: it gets 6/2 = 3 per min, low gets 0;
    # - λ = (1, 1): 1 × 2 + 1 × 3 = 5 ≤ 6 agents: both classes served in full.
    cases = [((1.0, 3.0), (1.0, 4 / 3)), ((4.0, 3.0), (3.0, 0.0)), ((1.0, 1.0), (1.0, 1.0))]
    for (high, low), (rho_high, rho_low) in cases:
        sol = integrate_counters(nets.load(nets.priority_desk(high, low)))
        assert sol.rates["high_answer"] == pytest.approx(rho_high, abs=EXACT), (high, low)
        assert sol.rates["low_answer"] == pytest.approx(rho_low, abs=EXACT), (high, low)
        assert sol.rates["low_close"] == pytest.approx(rho_low, abs=EXACT), (high, low)
    sol = integrate_counters(nets.load(nets.priority_desk(1.0, 3.0)))
    q = sol.waiting["low_queue"]
    i, j = at(sol, sol.horizon - 300), at(sol, sol.horizon)
    assert (q[j] - q[i]) / 300 == pytest.approx(3.0 - 4 / 3, abs=1e-6)


def test_priority_at_a_queue_overflows_to_the_second_desk():
    # By hand: the own desk carries 2/2 = 1 per min; the overflow desk takes the other 1.5
    # (its capacity 4/2 = 2 is not reached).
    sol = integrate_counters(nets.load(nets.overflow(2.5)))
    assert sol.rates["own_answer"] == pytest.approx(1.0, abs=EXACT)
    assert sol.rates["overflow_answer"] == pytest.approx(1.5, abs=EXACT)


def test_staff_cut_takes_effect_as_agents_finish():
    # By hand: before t = 50, 6 agents, capacity 3 > λ = 2.5, so z_a = 2.5 t and 5 agents busy.
    # At t = 50 the staff drops to 2: the arrival at t = 50 finds no agent, z_a(50) = z_a(50 − dt)
    # and the idle count is 2 + z_a(48) − z_a(50) = 2 + 120 − (125 − 2.5 dt) = −3 + 2.5 dt
    # (three agents still owed). Answers resume once 2 + z_a(t − 2) ≥ z_a(50), i.e. after
    # t = 51.075; afterwards 2 agents carry 2/2 = 1 per min.
    sol = integrate_counters(nets.load(nets.staff_cut()), dt=0.125, horizon=300)
    z = sol.counters["answer"]
    assert z[at(sol, 40.0)] == pytest.approx(100.0, abs=EXACT)
    assert z[at(sol, 50.0)] == pytest.approx(125.0 - 2.5 * sol.dt, abs=EXACT)
    assert sol.markings["agents"][at(sol, 50.0)] == pytest.approx(-3 + 2.5 * sol.dt, abs=EXACT)
    assert z[at(sol, 51.0)] == z[at(sol, 50.0)]
    assert z[at(sol, 51.25)] > z[at(sol, 51.0)]
    assert np.all(np.diff(z) >= 0)  # counters never decrease
    assert sol.rates["answer"] == pytest.approx(1.0, abs=EXACT)


def test_profile_and_trace_sources(tmp_path):
    # Profile 1 per min on [0, 20), then 3 per min: z_s(10) = 10, z_s(20) = 20, z_s(30) = 50.
    # With 4 agents of hold 2 (capacity 2) the answers run at 2 per min once saturated.
    sol = integrate_counters(nets.load(nets.profile_peak()))
    zs = sol.source_counters["calls"]
    for t, value in [(10.0, 10.0), (20.0, 20.0), (30.0, 50.0)]:
        assert zs[at(sol, t)] == pytest.approx(value, abs=EXACT)
    assert sol.rates_between(100, 200)["answer"] == pytest.approx(2.0, abs=EXACT)
    # A trace counts recorded arrivals: times 0.5, 1, 1, 3.25 → 3 by t = 1 and t = 3, 4 by t = 4
    (tmp_path / "arrivals.txt").write_text("0.5\n1.0\n1.0\n3.25\n")
    text = nets.single_pool(1.0, 2, 1.0).replace("{rate: 1.0, into: queue}",
                                                 "{trace: arrivals.txt, into: queue}")
    s = load_scenario_text(text, base_dir=str(tmp_path))
    sol = integrate_counters(s, dt=0.25, horizon=10)
    zs = sol.source_counters["calls"]
    assert [zs[at(sol, t)] for t in (0.25, 1.0, 3.0, 4.0)] == [0.0, 3.0, 3.0, 4.0]
    # two agents, hold 1: all four are answered on arrival; the last at t = 3.25
    assert sol.counters["answer"][at(sol, 4.0)] == 4.0


def test_same_time_cycle_through_pools():
    # answer needs a desk agent that transfer_in returns at the same instant, and transfer_in
    # needs the relay token answer produces: the greatest solution serves every call at once.
    sol = integrate_counters(nets.load(nets.SAME_TIME_CYCLE))
    assert sol.unconverged_steps == 0
    np.testing.assert_allclose(sol.counters["answer"], sol.source_counters["calls"], atol=EXACT)
    np.testing.assert_allclose(
        sol.counters["transfer_in"], sol.source_counters["calls"], atol=EXACT
    )
    assert sol.rates["close"] == pytest.approx(1.5, abs=EXACT)


@pytest.mark.parametrize(
    "text",
    [nets.cold_transfer(), nets.hand_over(10, 2), nets.priority_desk(1.0, 3.0), nets.staff_cut(),
     nets.profile_peak(), nets.overflow()],
)
def test_jobs_are_conserved(text):
    # style.md §11: arrivals = completions + jobs still inside, at every grid time (every
    # transition moves one job from one place to at most one place)
    s = nets.load(text)
    sol = integrate_counters(s)
    arrivals = sum(sol.source_counters.values())
    ended = sum(sol.counters[q] for q in s.ending_transitions)
    inside = sum(sol.markings[p] for p in s.places)
    np.testing.assert_allclose(arrivals, ended + inside, atol=1e-9 * max(1.0, arrivals[-1]))
    for q, z in sol.counters.items():
        assert np.all(np.diff(z) >= -1e-12), q


def test_step_divides_the_holds():
    # gcd(0.75, 2) = 0.25; 600 / 0.25 = 2400 points ≥ 2000 already
    text = nets.cold_transfer().replace("hold: 2.0", "hold: 0.75")
    s = nets.load(text.replace("mean: 5.0", "mean: 2.0"))
    assert choose_step(s, 600.0) == pytest.approx(0.25)
    # hold 2 alone: 600/2 = 300 points, divided by 8 (the smallest 2^a 5^b giving ≥ 2000)
    assert choose_step(nets.load(nets.single_pool(3.0, 5, 2.0)), 600.0) == pytest.approx(0.25)


def test_rounding_is_reported_for_holds_the_grid_cannot_divide():
    # holds π and e have no common divisor: some rounding is unavoidable and is reported
    text = nets.cold_transfer().replace("hold: 2.0", f"hold: {math.pi!r}")
    s = nets.load(text.replace("mean: 5.0", f"mean: {math.e!r}"))
    sol = integrate_counters(s, horizon=600)
    worst = max(abs(max(1, round(h / sol.dt)) * sol.dt - h) / h for h in (math.pi, math.e))
    assert sol.rounding == pytest.approx(worst, rel=1e-12)
    assert 0 < sol.rounding < 1e-2
    # an irrational hold alone is divided exactly (dt = π/m)
    sol = integrate_counters(nets.load(nets.single_pool(3.0, 5, math.pi)), horizon=600)
    assert sol.rounding < 1e-12
    assert sol.rates["answer"] == pytest.approx(5 / math.pi, rel=1e-9)


def test_rates_between_window():
    sol = integrate_counters(nets.load(nets.single_pool(2.0, 5, 2.0)), dt=0.5, horizon=100)
    both = sol.rates_between(10, 90)
    assert both["answer"] == pytest.approx(2.0, abs=EXACT)
    assert both["calls"] == pytest.approx(2.0, abs=EXACT)
    with pytest.raises(ValueError):
        sol.rates_between(50, 50)
