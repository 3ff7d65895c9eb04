"""The fluid dynamics with abandonment (fluid.flat_net.WITH_ABANDONMENT) and the compiled step
loop, against published fluid models and closed forms, and against the pre-kernel integration.

Sources: Whitt (2006), "Fluid models for multiserver queues with abandonments", Operations
Research 54(1) (stationary values); Mandelbaum, Massey and Reiman (1998), "Strong
approximations for Markovian service networks", Queueing Systems 30 (the fluid ODE of one pool
with exponential holds and patience); Eick, Massey and Whitt (1993), "The physics of the
M_t/G/infinity queue", Operations Research 41(4) (the M_t/M/infinity mean). The grid is the
counters' time step; the discretisation errors quoted are those of the schemes in
fluid/kernel.py (midpoint rule: O(dt^2) for stationary queues and mean holds, O(dt) for a
trajectory whose inflow jumps) and each tolerance says which it covers.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from fluid import load_scenario, load_scenario_text
from fluid.analysis import throughput
from fluid.counters import COUNTERS, WITH_ABANDONMENT, choose_step, integrate_counters

from . import nets
from .reference_counters import reference_counters

CONFIGS = __import__("pathlib").Path(__file__).resolve().parents[2] / "configs"


def station(rate, staff, hold, patience, *, profile=None, horizon=200.0, abandon_to=False):
    """One queue and one pool (invented test net). ``hold`` and ``patience``: YAML."""
    src = (f"{{profile: {{step: {profile[0]}, rates: {list(profile[1])}}}, into: queue}}"
           if profile else f"{{rate: {rate}, into: queue}}")
    queue = f"{{patience: {patience}{', abandon_to: redial' if abandon_to else ''}}}"
    extra_places = "  redial: {hold: 2.0}\n" if abandon_to else ""
    extra_trans = "  back: {in: [redial], out: [queue]}\n" if abandon_to else ""
    return f"""
name: impatient station (invented test net)
time_unit: min
run: {{horizon: {horizon}, warmup: 0}}
sources:
  calls: {src}
pools:
  agents: {staff}
places:
  queue: {queue}
  talk: {{hold: {hold}}}
{extra_places}transitions:
  answer: {{in: [queue, agents], out: [talk]}}
  close: {{in: [talk], out: [agents]}}
{extra_trans}"""


# --- the compiled loop is the old integration -----------------------------------------------------


CASES = [nets.single_pool(3.0, 5, 2.0), nets.cold_transfer(), nets.hand_over(10, 2),
         nets.priority_desk(1.0, 3.0), nets.staff_cut(), nets.profile_peak(), nets.overflow(),
         nets.SAME_TIME_CYCLE, nets.two_agents()]


@pytest.mark.parametrize("text", CASES)
def test_counters_equal_the_pre_kernel_integration_bit_for_bit(text):
    # the pre-kernel pure-Python step loop is kept verbatim in tests/fluid/reference_counters.py
    s = nets.load(text)
    dt = choose_step(s, s.run.horizon)
    sol = integrate_counters(s, dt=dt, horizon=s.run.horizon)
    ref = reference_counters(s, dt, s.run.horizon)
    for q in s.transitions:
        assert np.array_equal(sol.counters[q], ref[q]), q


@pytest.mark.parametrize("name", ["utility-line", "day-with-shifts", "priority-desk",
                                  "single-station"])
def test_configs_equal_the_pre_kernel_integration_bit_for_bit(name):
    s = load_scenario(CONFIGS / f"{name}.yaml")
    dt = choose_step(s, s.run.horizon)
    sol = integrate_counters(s, dt=dt, horizon=s.run.horizon)
    ref = reference_counters(s, dt, s.run.horizon)
    assert all(np.array_equal(sol.counters[q], ref[q]) for q in s.transitions)


def test_compiled_and_plain_python_loops_agree():
    from fluid import kernel
    from fluid.counters import _source_counter, _staff_on_grid
    from fluid.flat_net import build

    if not kernel.COMPILED:
        pytest.skip("numba is not installed: only the plain loop exists")
    s = load_scenario_text(station(3.0, 2, "{dist: gamma, mean: 1.0, cv: 0.5}",
                                   "{dist: exponential, mean: 1.0}", horizon=20.0))
    dt = 0.05
    t = dt * np.arange(int(20 / dt) + 1)
    src = {n: _source_counter(s, n, t) for n in s.sources}
    lev = {p: _staff_on_grid(s, p, t, None, None) for p in s.pools}
    a = build(s, dt, t, sources=src, levels=lev, model=WITH_ABANDONMENT)
    b = a.with_levels({})
    a.run()
    arr = b.arrays
    kernel._run(b.n, b.pad, b.Z, arr["base"], arr["order"], arr["grp_row"], arr["grp_spec"],
                arr["spec_base"], arr["spec_scale"], arr["spec_term"], arr["term_row"],
                arr["term_coef"], arr["term_off"], b.cyclic, arr["job_order"], arr["job_spec"],
                arr["lin_row"], arr["lin_spec"], arr["hold_row"], arr["hold_in"],
                arr["hold_kind"], arr["hold_rate"], arr["hold_first"], arr["hold_ptr"],
                arr["hold_cdf"], arr["ab_row"], arr["ab_avail"], arr["ab_out_ptr"],
                arr["ab_out_row"], arr["ab_out_coef"], arr["ab_ptr"], arr["ab_surv"],
                arr["coh_amt"], arr["coh_step"], arr["coh_head"], arr["coh_len"],
                arr["hol_age"])
    assert np.array_equal(a.Z, b.Z)  # no fast-math: the same IEEE operations in the same order


# --- Whitt (2006): the stationary overloaded place ---------------------------------------------------


@pytest.mark.parametrize("model", [COUNTERS, WITH_ABANDONMENT])
def test_an_underloaded_place_holds_no_fluid_queue(model):
    # design.md 4.1: below capacity the fluid wait is zero (and so is its queue), as the
    # stationary figures of the LP path say; the grid serves a step's arrivals at its end, which
    # must not read as half a step of inflow waiting (it read lambda dt / 2 = 0.0125 here)
    s = load_scenario_text(station(2.5, 20, "{dist: exponential, mean: 4.0}",
                                   "{dist: exponential, mean: 3.0}", horizon=100.0))
    sol = integrate_counters(s, dt=0.01, horizon=100.0, model=model)
    assert np.max(np.abs(sol.waiting["queue"])) < 1e-9
    assert sol.counters["answer"][-1] == pytest.approx(2.5 * 100.0, rel=1e-3)


@pytest.mark.parametrize("hold", ["1.0", "{dist: exponential, mean: 1.0}"])
def test_whitt_stationary_values_with_exponential_patience(hold):
    # Whitt (2006), recomputed in shared/references.md: lambda = 110, s = 100, mu = 1,
    # theta = 0.5: P(Ab) = 1/11, w = ln(1.1)/0.5 = 0.19062, q = (lambda - s mu)/theta = 20.
    # The dynamics run to their stationary regime; the stationary queue of the age-structured
    # scheme is exact to O((theta dt)^2) (midpoint rule), here below 1e-4 relative, and so is
    # the mean of an exponential hold (served rate s mu to 1e-4 at mu dt = 0.01).
    s = load_scenario_text(station(110.0, 100, hold, "{dist: exponential, mean: 2.0}",
                                   horizon=60.0))
    sol = integrate_counters(s, dt=0.01, horizon=60.0, model=WITH_ABANDONMENT)
    tail = slice(-1000, None)
    served = (sol.counters["answer"][-1] - sol.counters["answer"][-1001]) / 10.0
    lost = (sol.abandoned["queue"][-1] - sol.abandoned["queue"][-1001]) / 10.0
    assert served == pytest.approx(100.0, rel=1e-4)
    assert lost / 110.0 == pytest.approx(1 / 11, rel=1e-3)
    assert np.mean(sol.waiting["queue"][tail]) == pytest.approx(20.0, rel=1e-3)
    # the served jobs' wait, read at the head of the queue: to the grid step (the boundary
    # cohort is a whole step)
    assert np.nanmean(sol.head_wait["queue"][tail]) == pytest.approx(math.log(1.1) / 0.5,
                                                                     abs=0.01)


def test_whitt_stationary_values_with_uniform_patience():
    # Whitt (2006) with a non-exponential patience, uniform on [0, 2] (F^c(x) = 1 - x/2):
    # F^c(w) = s mu / lambda = 10/11 gives w = 2/11; q = lambda (w - w^2/4) = 19.0909...
    w = 2 / 11
    q = 110 * (w - w * w / 4)
    s = load_scenario_text(station(110.0, 100, "1.0", "{dist: uniform, low: 0, high: 2}",
                                   horizon=40.0))
    sol = integrate_counters(s, dt=0.005, horizon=40.0, model=WITH_ABANDONMENT)
    lost = (sol.abandoned["queue"][-1] - sol.abandoned["queue"][-2001]) / 10.0
    assert lost / 110.0 == pytest.approx(1 / 11, rel=1e-6)
    # uniform patience has a kink at 0 (F^c'(0) != 0): the midpoint rule holds O(dt^2) per
    # cohort, and the boundary cohort is served in part; 1e-3 covers both at dt = 0.005
    assert np.mean(sol.waiting["queue"][-2000:]) == pytest.approx(q, rel=1e-3)


def test_fluid_result_reports_the_stationary_place_as_whitt_does():
    # The fluid answer of a constant net without priorities: the LP's rates and Whitt's (2006)
    # stationary place (exact formulas, scipy root finding and quadrature).
    s = load_scenario_text(station(110.0, 100, "1.0", "{dist: exponential, mean: 2.0}"))
    r = throughput(s)
    fp = r.places["queue"]
    assert r.method == "lp" and fp.state == "overloaded"
    assert fp.abandoned == pytest.approx(1 / 11, rel=1e-12)
    assert fp.queue == pytest.approx(20.0, rel=1e-9)
    assert fp.wait_served == pytest.approx(math.log(1.1) / 0.5, rel=1e-9)
    # the same through the dynamics (method "counters", dt = 0.01): the two fluid answers agree
    # to the scheme's O((theta dt)^2) and the deterministic hold's bursts (within 1e-3)
    d = throughput(s, method="counters", dt=0.01)
    assert "abandonment" in d.model
    assert d.places["queue"].abandoned == pytest.approx(1 / 11, rel=1e-3)
    assert d.places["queue"].queue == pytest.approx(20.0, rel=1e-3)
    assert d.places["queue"].wait_served == pytest.approx(math.log(1.1) / 0.5, abs=0.01)


# --- Mandelbaum, Massey and Reiman (1998): one pool, exponential holds and patience -------------------


def _mmr_solution(lam_pieces, step, s, mu, theta, t_end):
    """Accurate solution of x' = lambda(t) - mu min(x, s) - theta (x - s)^+ (x(0) = 0), one
    solve_ivp per piece of the profile (the right side is piecewise smooth)."""
    x0, out_t, out_x = 0.0, [], []
    for i, lam in enumerate(lam_pieces):
        a, b = i * step, min((i + 1) * step, t_end)

        def rhs(_t, x, lam=lam):
            return [lam - mu * min(x[0], s) - theta * max(x[0] - s, 0.0)]

        res = solve_ivp(rhs, (a, b), [x0], rtol=1e-11, atol=1e-11, dense_output=True,
                        max_step=0.05)
        x0 = float(res.y[0, -1])
        out_t.append(res)
    return out_t


def test_one_pool_follows_the_markovian_fluid_ode():
    # lambda(t) = 8, 14, 6 per min on [0, 10), [10, 20), [20, 30); s = 10, mu = 1, theta = 0.5.
    # The fluid content x (waiting + in service) of the dynamics is a first-order scheme in dt
    # for this ODE (the inflow jumps): the error at dt halves when dt halves, and at dt = 0.01
    # it is below 1 % of the peak content.
    pieces, step = (8.0, 14.0, 6.0), 10.0
    exact = _mmr_solution(pieces, step, 10, 1.0, 0.5, 30.0)

    def error(dt):
        s = load_scenario_text(station(None, 10, "{dist: exponential, mean: 1.0}",
                                       "{dist: exponential, mean: 2.0}", profile=(step, pieces),
                                       horizon=30.0))
        sol = integrate_counters(s, dt=dt, horizon=30.0, model=WITH_ABANDONMENT)
        x = sol.waiting["queue"] + (10 - sol.markings["agents"])
        ref = np.array([exact[min(int(t // step), 2)].sol(t)[0] for t in sol.times])
        return float(np.max(np.abs(x - ref))), float(np.max(ref))

    e1, peak = error(0.01)
    e2, _ = error(0.005)
    assert e1 < 0.01 * peak
    assert 1.6 < e1 / e2 < 2.4  # first order, as the scheme says


def test_unlimited_staff_hold_content_is_the_mt_m_infinity_mean():
    # Eick, Massey and Whitt (1993): with unlimited staff and exponential holds (mu = 0.5) the
    # content in service solves m' = lambda(t) - mu m: on each piece m(t) = lambda/mu +
    # (m(t0) - lambda/mu) e^{-mu (t - t0)}. The jumps fall on grid points and the holds are
    # released at the step midpoints: second order in dt.
    pieces, step, mu = (4.0, 10.0, 2.0), 8.0, 0.5

    def closed(t):
        m, t0 = 0.0, 0.0
        for i, lam in enumerate(pieces):
            end = (i + 1) * step
            if t <= end or i == len(pieces) - 1:
                return lam / mu + (m - lam / mu) * math.exp(-mu * (t - t0))
            m = lam / mu + (m - lam / mu) * math.exp(-mu * (end - t0))
            t0 = end
        return m

    def error(dt):
        s = load_scenario_text(station(None, 100000, "{dist: exponential, mean: 2.0}",
                                       "{dist: exponential, mean: 2.0}", profile=(step, pieces),
                                       horizon=24.0))
        sol = integrate_counters(s, dt=dt, horizon=24.0, model=WITH_ABANDONMENT)
        m = 100000 - sol.markings["agents"]
        ref = np.array([closed(t) for t in sol.times])
        return float(np.max(np.abs(m - ref)))

    e1, e2 = error(0.01), error(0.005)
    assert e1 < 1e-3  # jobs, against a peak of about 20
    assert 3.2 < e1 / e2 < 4.8


def test_abandonment_is_conserved_and_redials_come_back():
    # style.md §11 on the fluid: arrivals = ended + inside, where abandoning and leaving ends a
    # job and abandoning to a redial place keeps it inside
    for redial in (False, True):
        s = load_scenario_text(station(6.0, 4, "{dist: gamma, mean: 1.0, cv: 0.5}",
                                       "{dist: exponential, mean: 1.5}", abandon_to=redial))
        sol = integrate_counters(s, model=WITH_ABANDONMENT)
        arrivals = sum(sol.source_counters.values())
        ended = sol.counters["close"] + (0.0 if redial else sol.abandoned["queue"])
        inside = sum(sol.markings[p] for p in s.places)
        np.testing.assert_allclose(arrivals, ended + inside, atol=1e-9 * arrivals[-1])
        assert sol.abandoned["queue"][-1] > 0


def test_without_patience_both_models_have_the_same_long_run_rates():
    # the hold distribution changes the course, not the long-run rates (they are the LP's)
    s = nets.load(nets.cold_transfer())
    a = integrate_counters(s, model=COUNTERS)
    b = integrate_counters(s, model=WITH_ABANDONMENT)
    for q in s.transitions:
        assert b.rates[q] == pytest.approx(a.rates[q], rel=1e-6), q


def test_a_hold_longer_than_the_grid_costs_no_memory():
    # a hold of 1e7 min on a 100-min day: nothing finishes on the grid; the delay is capped at
    # the grid's length (the terms read zeros either way), so the equations stay small
    text = station(None, 3, "1.0e+7", "{dist: exponential, mean: 2.0}", profile=(50.0, (1.0, 2.0)),
                   horizon=100.0)
    s = load_scenario_text(text)
    sol = integrate_counters(s, dt=0.1, horizon=100.0)
    assert sol.counters["close"][-1] == 0.0
    assert sol.counters["answer"][-1] == pytest.approx(3.0)  # three agents, never back
    assert sol.flat.pad <= len(sol.times) + 1
