"""The simulator against the classical single-station formulas (Erlang C, Erlang A, Erlang B).

Every check runs a station written as a scenario (design.md §3) through :func:`desim.replicate`
with a fixed seed and compares a simulated figure with its formula (references.md; computed by
``compare.formulas.erlang``, itself tested against published and recomputed values in tests/compare).

How the tolerance is derived (the same rule in test_reference_priority.py and test_configs.py):
the reference must lie in a two-sided Student t interval for the mean of the per-replication
values (design.md §4.2: one value per independent replication, never a pooled binomial
interval). Several checks share the suite, so the per-check level is Bonferroni-corrected:
the three modules that use this rule make at most ``FAMILY_CHECKS`` = 64 interval checks,
default and slow runs together (at the time of writing 36 here, 8 in test_reference_priority.py
and 8 in test_configs.py, one per place where tokens wait; 3 more in test_wait_percentiles.py,
which uses this rule; 2 more here for the abandoner conventions: 57), and each check uses level
1 − 0.05/64 ≈ 99.92 %, so the chance that any check of the whole family fails by chance alone is
at most 5 % (Bonferroni; raise FAMILY_CHECKS when adding checks beyond it). The interval must
also be narrow, half-width below ``NARROW`` = 10 % of the reference (of min(p, 1 − p) for a
probability p), so that a wrong simulator cannot pass on a wide interval. Run lengths were
chosen to meet that, never the other way round. Residual biases (warm-up from an empty
station, the ratio estimators wait_sum/left over a finite window) are of order 1/(callers per
replication), far inside the intervals.
"""

from __future__ import annotations

import math
import textwrap

import numpy as np
import pytest
from scipy import stats

import desim
from compare.formulas.erlang import erlang_a_queue, erlang_b_loss, erlang_c_queue
from fluid.loading import load_scenario_text

#: Interval checks in the reference family (see the module docstring); per-check level below.
FAMILY_CHECKS = 64
LEVEL = 1 - 0.05 / FAMILY_CHECKS
#: Largest half-width accepted, as a share of the reference (of min(p, 1 − p) for probabilities).
NARROW = 0.10
WORKERS = 2


def interval(values, level: float = LEVEL) -> tuple[float, float]:
    """(mean, half-width) of a Student t interval for the mean of per-replication values."""
    x = np.asarray(values, dtype=float)
    assert x.size >= 2 and np.all(np.isfinite(x)), f"need finite per-replication values: {x}"
    half = stats.t.ppf(0.5 + level / 2, x.size - 1) * x.std(ddof=1) / math.sqrt(x.size)
    return float(x.mean()), float(half)


def agrees(values, reference: float, what: str, source: str, *, probability: bool = False):
    """Assert that ``reference`` lies in the family-corrected interval of ``values`` and that the
    interval is narrow enough to tell (see the module docstring)."""
    mean, half = interval(values)
    scale = min(reference, 1 - reference) if probability else abs(reference)
    assert half < NARROW * scale, (
        f"{what}: interval half-width {half:.4g} is not below {NARROW:.0%} of {scale:.4g}; "
        f"the run is too short to check {source}")
    assert abs(mean - reference) <= half, (
        f"{what}: simulated {mean:.6f} ± {half:.6f} (level {LEVEL:.4%}, n = {len(values)}) "
        f"does not contain {reference:.6f} from {source}")


def station(servers: int, rate: float, hold: str, *, patience: str | None = None,
            within: float | None = None, unit: str = "min", abandoned: str | None = None):
    """One queue served by one pool: Poisson arrivals at ``rate`` per time unit, ``hold`` a
    distribution in YAML, optional ``patience`` (YAML) and service target ``within`` (with the
    abandoner convention ``abandoned``, YAML, when given)."""
    queue = f"{{patience: {patience}}}" if patience is not None else "{}"
    convention = f", abandoned: {abandoned}" if abandoned is not None else ""
    target = (f"targets:\n  queue: {{within: {within}, goal: 0.8{convention}}}\n"
              if within is not None else "")
    text = textwrap.dedent(f"""\
        name: reference station (invented)
        time_unit: {unit}
        run: {{horizon: 100, warmup: 0, replications: 2, seed: 1}}
        sources:
          calls: {{rate: {rate}, into: queue}}
        pools:
          agents: {servers}
        places:
          queue: {queue}
          talk: {{hold: {hold}}}
        transitions:
          answer: {{in: [queue, agents], out: [talk]}}
          close: {{in: [talk], out: [agents]}}
        """) + target
    return load_scenario_text(text, file="<reference station>")


def simulate(scenario, *, reps: int, horizon: float, warmup: float, seed: int,
             record_waits: bool = True):
    return desim.replicate(scenario, reps=reps, horizon=horizon, warmup=warmup, seed=seed,
                           workers=WORKERS, record_waits=record_waits)


def share_waiting(result, place: str = "queue") -> np.ndarray:
    """Per replication: share of the callers that left ``place`` in the window who were not
    taken at once (taken after a positive wait, or abandoned), from the recorded waits."""
    out = []
    for run in result.runs:
        taken, gone = run.waits[place]["taken"], run.waits[place]["abandoned"]
        out.append((np.count_nonzero(taken > 0) + gone.size) / (taken.size + gone.size))
    return np.array(out)


def raw(result, metric: str, place: str = "queue") -> np.ndarray:
    return result.raw("place", place, metric)


def erlang_c_checks(servers, rate, mean_hold, within, *, reps, horizon, warmup, seed, unit="min"):
    """Simulate an M/M/c station with a target ``within`` and check P(W > 0), the mean wait,
    the mean queue and the service level against Erlang C (4 interval checks)."""
    ref = erlang_c_queue(servers, rate, mean_hold)
    sim = simulate(station(servers, rate, f"{{dist: exponential, mean: {mean_hold}}}",
                           within=within, unit=unit),
                   reps=reps, horizon=horizon, warmup=warmup, seed=seed)
    source = "Erlang C (Erlang 1917; Kleinrock 1975, M/M/m), references.md"
    agrees(share_waiting(sim), ref.p_wait, "P(W > 0)", source, probability=True)
    agrees(raw(sim, "wait"), ref.mean_wait, "mean wait", source)
    agrees(raw(sim, "queue"), ref.mean_queue, "mean queue", source)
    agrees(raw(sim, "served_within"), ref.service_level(within), f"service level within {within}",
           source, probability=True)
    return sim, ref


# ------------------------------------------------------------------------------------ Erlang C

def test_erlang_c_worked_example_two_servers():
    # Hillier and Lieberman, emergency-room example (from memory; references.md): λ = 2 per h,
    # μ = 3 per h, s = 2: Wq = 1/24 h, Lq = 1/12, P(Wq > 0.5 h) = (1/6)e^{−2} = 0.022556, so
    # P(W > 0) = Wq·(sμ − λ) = 1/6 and the service level within 0.5 h is 1 − 0.022556.
    ref = erlang_c_queue(2, 2.0, 1 / 3)
    assert ref.mean_wait == pytest.approx(1 / 24, rel=1e-12)  # worked example (from memory)
    assert ref.mean_queue == pytest.approx(1 / 12, rel=1e-12)  # worked example (from memory)
    assert ref.wait_exceeds(0.5) == pytest.approx(math.exp(-2) / 6, rel=1e-12)  # (from memory)
    erlang_c_checks(2, 2.0, 1 / 3, 0.5, reps=20, horizon=20_000, warmup=20, seed=101, unit="h")


def test_erlang_c_five_agents_both_ways_of_reading_p_wait():
    # references.md, recomputed: λ = 1 per min, mean hold 3 min, N = 5: C = 0.236152,
    # Wq = 0.354227 min.
    ref = erlang_c_queue(5, 1.0, 3.0)
    assert ref.p_wait == pytest.approx(0.236152, abs=1e-6)  # references.md (recomputed)
    assert ref.mean_wait == pytest.approx(0.354227, abs=1e-6)  # references.md (recomputed)
    sim, _ = erlang_c_checks(5, 1.0, 3.0, 1.0, reps=20, horizon=20_000, warmup=300, seed=102)
    # P(W > 0) read the other way desim offers it: a service target with within 0 counts the
    # callers taken at once, so 1 − served_within = P(W > 0). Same seed, so the same sample path
    # (a target draws no random numbers: common random numbers, design.md §4.2) ...
    zero = simulate(station(5, 1.0, "{dist: exponential, mean: 3.0}", within=0.0),
                    reps=20, horizon=20_000, warmup=300, seed=102, record_waits=False)
    assert np.array_equal(raw(zero, "wait"), raw(sim, "wait"))  # exact: same draws
    agrees(1 - raw(zero, "served_within"), ref.p_wait, "P(W > 0) = 1 − served within 0",
           "Erlang C (Erlang 1917), references.md (recomputed C = 0.236152)", probability=True)


def test_erlang_c_ten_agents():
    # A larger station, N = 10, λ = 7 per min, mean hold 1 min (load 0.7), target 0.25 min.
    erlang_c_checks(10, 7.0, 1.0, 0.25, reps=20, horizon=8_000, warmup=100, seed=103)


@pytest.mark.slow
def test_erlang_c_fifty_agents_heavy_load():
    # The benchmark station: N = 50, λ = 45 per min, mean hold 1 min (load 0.9), target 0.1 min.
    erlang_c_checks(50, 45.0, 1.0, 0.1, reps=20, horizon=8_000, warmup=200, seed=104)


# ------------------------------------------------------------------------------------ Erlang A

def erlang_a_checks(servers, rate, mean_hold, mean_patience, within, *, reps, horizon, warmup,
                    seed):
    """Simulate an M/M/c+M station and check P(W > 0), P(Ab), the mean wait (all callers, until
    served or abandoned), the mean queue and the service level with abandonment against Erlang A
    (5 interval checks)."""
    ref = erlang_a_queue(servers, rate, mean_hold, mean_patience)
    sim = simulate(station(servers, rate, f"{{dist: exponential, mean: {mean_hold}}}",
                           patience=f"{{dist: exponential, mean: {mean_patience}}}",
                           within=within),
                   reps=reps, horizon=horizon, warmup=warmup, seed=seed)
    source = ("Erlang A (Palm; Garnett, Mandelbaum and Reiman 2002; Mandelbaum and Zeltyn 2005), "
              "references.md")
    agrees(share_waiting(sim), ref.p_wait, "P(W > 0)", source, probability=True)
    agrees(raw(sim, "abandoned"), ref.p_abandon, "P(Ab)", source, probability=True)
    agrees(raw(sim, "wait"), ref.mean_wait, "mean wait, served or abandoned", source)
    agrees(raw(sim, "queue"), ref.mean_queue, "mean queue", source)
    agrees(raw(sim, "served_within"), ref.service_level(within),
           f"P(served and W <= {within})",
           "service level with abandonment, references.md (derived, checked against the "
           "birth-death chain)", probability=True)
    return sim, ref


def test_erlang_a_fifty_agents():
    # references.md, recomputed: λ = 48, μ = 1, θ = 1, N = 50: P(W>0) = 0.405404,
    # P(Ab) = 0.039418.
    ref = erlang_a_queue(50, 48.0, 1.0, 1.0)
    assert ref.p_wait == pytest.approx(0.405404, abs=1e-6)  # references.md (recomputed)
    assert ref.p_abandon == pytest.approx(0.039418, abs=1e-6)  # references.md (recomputed)
    erlang_a_checks(50, 48.0, 1.0, 1.0, 0.1, reps=20, horizon=800, warmup=20, seed=201)


def test_erlang_a_overloaded():
    # Offered load 12 erlangs on 10 agents (ρ = 1.2), mean patience 2 min: a steady state exists
    # only thanks to abandonment.
    erlang_a_checks(10, 12.0, 1.0, 2.0, 0.5, reps=20, horizon=1_500, warmup=50, seed=202)


def test_erlang_a_service_level_conventions():
    # The overloaded station above (N = 10, λ = 12, μ = 1, mean patience 2 min, t = 0.5 min),
    # simulated with common random numbers under two abandoner conventions, each with a closed
    # form (Erlang A: Palm; Garnett, Mandelbaum and Reiman 2002; Mandelbaum and Zeltyn 2005):
    # abandoners counted against, P(served and W <= t); abandoners excluded, the share of the
    # served callers answered within t, P(served and W <= t | served) = P(served and W <= t) /
    # (1 − P(Ab)) (conditional probability; derived here, not a published figure). 2 checks.
    ref = erlang_a_queue(10, 12.0, 1.0, 2.0)
    source = ("Erlang A (Palm; Garnett, Mandelbaum and Reiman 2002; Mandelbaum and Zeltyn 2005), "
              "references.md")
    runs = {}
    for convention in ("against", "excluded"):
        s = station(10, 12.0, "{dist: exponential, mean: 1.0}",
                    patience="{dist: exponential, mean: 2.0}", within=0.5, abandoned=convention)
        assert s.targets.service["queue"].abandoned == convention
        runs[convention] = simulate(s, reps=20, horizon=1_500, warmup=50, seed=202,
                                    record_waits=False)
    against = ref.service_level(0.5)
    agrees(raw(runs["against"], "served_within"), against, "P(served and W <= 0.5)", source,
           probability=True)
    agrees(raw(runs["excluded"], "served_within"), against / (1 - ref.p_abandon),
           "P(served and W <= 0.5 | served)", source + ", conditioned on being served",
           probability=True)
    # the same runs (common random numbers): every other figure is identical
    assert np.array_equal(raw(runs["against"], "wait"), raw(runs["excluded"], "wait"))


def test_excluded_within_between_its_limits():
    # Exact identities, per replication, on the same station (continuous patience, so no
    # caller abandons after a wait of exactly 0): excluded_within 0 leaves no abandoner out,
    # the "against" figure; a threshold beyond every wait leaves all out, the "excluded" one;
    # one in between lies between the two.
    values = {}
    for key, convention in (("against", "against"), ("excluded", "excluded"),
                            ("zero", "{excluded_within: 0}"), ("all", "{excluded_within: 1e9}"),
                            ("half", "{excluded_within: 0.5}")):
        s = station(10, 12.0, "{dist: exponential, mean: 1.0}",
                    patience="{dist: exponential, mean: 2.0}", within=0.5, abandoned=convention)
        values[key] = raw(desim.replicate(s, reps=3, horizon=200, warmup=10, seed=5, workers=1),
                          "served_within")
    assert np.array_equal(values["zero"], values["against"])
    assert np.array_equal(values["all"], values["excluded"])
    assert np.all(values["against"] < values["half"]) and np.all(values["half"] < values["excluded"])


@pytest.mark.slow
def test_erlang_a_critically_loaded_hundred_agents():
    # λ = Nμ = 100 per min, θ = 1: the quality-and-efficiency-driven regime.
    erlang_a_checks(100, 100.0, 1.0, 1.0, 0.05, reps=20, horizon=1_000, warmup=30, seed=203)


# ------------------------------------------------------------------- Erlang B (insensitivity)

def erlang_b_checks(servers, rate, mean_hold, *, reps, horizon, warmup, seed):
    """A loss station: patience 0 (a caller not taken at once is lost, design.md §3) and
    lognormal holds of cv 1.5. The lost share equals Erlang B, which is insensitive to the
    holding-time distribution beyond its mean (2 interval checks)."""
    blocked = erlang_b_loss(servers, rate, mean_hold)
    sim = simulate(station(servers, rate, f"{{dist: lognormal, mean: {mean_hold}, cv: 1.5}}",
                           patience="0"),
                   reps=reps, horizon=horizon, warmup=warmup, seed=seed, record_waits=False)
    # exact: with patience 0 nobody waits (the engine takes or drops a caller at its instant)
    assert np.all(raw(sim, "wait") == 0.0)
    source = "Erlang B (Erlang 1917), insensitive to the hold distribution, references.md"
    agrees(raw(sim, "abandoned"), blocked, "blocked share (lost at the queue)", source,
           probability=True)
    # carried load: busy agents = λ(1 − B)·h / N (Little's law on the agents; common practice)
    agrees(sim.raw("pool", "agents", "busy"), rate * mean_hold * (1 - blocked) / servers,
           "agent occupancy", "carried load of Erlang B (Little's law), common practice",
           probability=True)
    return sim, blocked


def test_erlang_b_lognormal_holds():
    # references.md, recomputed: B(10, 5) = 0.018385 (offered load 5 erlangs: λ = 1, hold 5 min).
    assert erlang_b_loss(10, 1.0, 5.0) == pytest.approx(0.018385, abs=1e-6)  # recomputed
    erlang_b_checks(10, 1.0, 5.0, reps=20, horizon=20_000, warmup=50, seed=301)


@pytest.mark.slow
def test_erlang_b_lognormal_holds_fifty_agents():
    # references.md: 50 trunks carry 37.90 E at 1 % blocking (classical table, from memory,
    # recomputed).
    assert erlang_b_loss(50, 37.90, 1.0) == pytest.approx(0.01, abs=2e-5)  # table (from memory)
    erlang_b_checks(50, 37.90, 1.0, reps=20, horizon=3_000, warmup=20, seed=302)
