"""The day factor in the simulator (desim.net.build_net): drawn once per replication from its
own stream ``random_rate:SOURCE``, multiplying the source's rates.

The variance test: with a gamma factor G of mean 1 and cv C, a Poisson count over a window with
expected count Λ is a gamma-Poisson mixture, negative binomial with variance Λ + C²Λ²
(Jongbloed and Koole 2001, "Managing uncertainty in call centres using Poisson mixtures",
Applied Stochastic Models in Business and Industry 17; the moments are taken from
``scipy.stats.nbinom``). The sample variance S² of R independent counts has mean σ² and
variance (μ₄ − σ⁴ (R − 3)/(R − 1)) / R (the standard result for the sample variance, e.g.
Cramér 1946, §27.4), so S² is checked within 2.576 of its standard deviations (99 %, fixed
seed), and the check is asserted narrow enough to fail for a plain Poisson count (variance Λ).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from desim import replicate
from desim.net import build_net
from desim.run import run_replication
from desim.streams import stream_rng
from fluid.loading import with_changes
from fluid.sources import RandomRate

PASS_THROUGH = """
name: counts (invented)
time_unit: min
run: {horizon: 100, warmup: 0, replications: 2, seed: 3}
sources:
  calls: {SOURCE, into: line}
places:
  line: {}
transitions:
  leave: {in: [line], out: []}
"""

STATION = """
name: station (invented)
time_unit: min
run: {horizon: 200, warmup: 20, replications: 6, seed: 9}
sources:
  calls: {rate: 2.0, into: queue, random_rate: {dist: gamma, cv: 0.3}}
  mail: {profile: {step: 100, rates: [0.5, 1.0]}, into: queue, random_rate: {cv: 0.2}}
pools:
  agents: 14
places:
  queue: {patience: {dist: exponential, mean: 3.0}}
  talk: {hold: {dist: lognormal, mean: 4.0, cv: 0.7}}
transitions:
  answer: {in: [queue, agents], out: [talk]}
  close: {in: [talk], out: [agents]}
targets:
  queue: {within: 0.5, goal: 0.8}
"""


def _values(result):
    return {k: v for k, v in result.values().items() if k[2] != "rate_factor"}


def test_cv_zero_and_no_field_give_identical_runs(net):
    plain = net(STATION.replace(", random_rate: {dist: gamma, cv: 0.3}", "")
                .replace(", random_rate: {cv: 0.2}", ""))
    zero = with_changes(net(STATION), {"sources.calls.random_rate.cv": 0,
                                       "sources.mail.random_rate.cv": 0})
    a, b = run_replication(plain, 1), run_replication(zero, 1)
    assert a.values() == b.values()  # bit for bit, and no rate_factor key either
    assert "rate_factor" not in a.sources["calls"]
    ra = replicate(plain, workers=1).to_json()
    rb = replicate(zero, workers=1).to_json()
    assert ra == rb


def test_factor_comes_from_its_own_stream_and_scales_the_arrivals(net):
    s = net(STATION)
    seed, rep = 9, 4
    got = build_net(s, seed, rep)
    for name, cv in (("calls", 0.3), ("mail", 0.2)):
        expect = RandomRate(cv).sample(stream_rng(seed, rep, "random_rate", name))
        assert got.sources[name].rate_factor == expect
    # the arrival stream is the one without the factor: the same exponential gaps, divided by
    # rate × factor instead of rate
    plain = with_changes(s, {"sources.calls.random_rate.cv": 0})
    f = got.sources["calls"].rate_factor
    t_with, t_plain = 0.0, 0.0
    src_with, src_plain = got.sources["calls"], build_net(plain, seed, rep).sources["calls"]
    for _ in range(50):
        t_with, t_plain = src_with.next_time(t_with), src_plain.next_time(t_plain)
        assert t_with * f == pytest.approx(t_plain, rel=1e-12)
    result = run_replication(s, rep, seed=seed)
    assert result.sources["calls"]["rate_factor"] == f


def test_other_streams_unchanged_by_the_factor(net):
    # holds and patience draws do not move when a factor is added: the first hold drawn at the
    # talk place is the same float with and without it
    s = net(STATION)
    plain = with_changes(s, {"sources.calls.random_rate.cv": 0, "sources.mail.random_rate.cv": 0})
    a, b = build_net(s, 9, 2), build_net(plain, 9, 2)
    assert [next(a.places["talk"].hold) for _ in range(20)] == \
        [next(b.places["talk"].hold) for _ in range(20)]
    assert [next(a.places["queue"].patience) for _ in range(20)] == \
        [next(b.places["queue"].patience) for _ in range(20)]


def test_two_staff_levels_draw_the_same_factors(net):
    s = net(STATION)
    small = replicate(with_changes(s, {"pools.agents": 10}), workers=1)
    large = replicate(with_changes(s, {"pools.agents": 16}), workers=1)
    for name in ("calls", "mail"):
        assert np.array_equal(small.raw("source", name, "rate_factor"),
                              large.raw("source", name, "rate_factor"))
        assert np.array_equal(small.raw("source", name, "arrivals"),
                              large.raw("source", name, "arrivals"))
    assert small.sources["calls"]["rate_factor"].n == 6
    assert "rate_factor" in small.to_json()["sources"]["calls"]


def _check_variance(counts: np.ndarray, lam: float, cv: float) -> None:
    k = 1 / cv**2
    nb = stats.nbinom(n=k, p=k / (k + lam))
    mean, var, _, kurt = (float(m) for m in nb.stats(moments="mvsk"))
    assert var == pytest.approx(lam + cv**2 * lam**2, rel=1e-12)
    r = counts.size
    mu4 = (kurt + 3) * var**2
    sd_s2 = math.sqrt((mu4 - var**2 * (r - 3) / (r - 1)) / r)
    z = float(stats.norm.ppf(0.995))
    s2 = float(counts.var(ddof=1))
    assert abs(s2 - var) <= z * sd_s2, (s2, var, sd_s2)
    # narrow enough to fail for the Poisson count alone (variance lam)
    assert var - lam > 2 * z * sd_s2
    half = float(stats.t.ppf(0.995, r - 1)) * counts.std(ddof=1) / math.sqrt(r)
    assert abs(counts.mean() - mean) <= half


def test_daily_arrival_variance_is_the_poisson_mixture_variance(net):
    # rate 1 per min over [0, 100]: Λ = 100; cv 0.2: variance 100 + 0.04 × 100² = 500
    s = net(PASS_THROUGH.replace("SOURCE", "rate: 1.0, random_rate: {dist: gamma, cv: 0.2}"))
    sim = replicate(s, reps=600, workers=1)
    _check_variance(sim.raw("source", "calls", "arrivals"), 100.0, 0.2)


def test_profile_arrival_variance_is_the_poisson_mixture_variance(net):
    # rates 0.5 then 1.5 per min on [0, 50), [50, 100): Λ = 25 + 75 = 100; cv 0.3: 100 + 900
    s = net(PASS_THROUGH.replace(
        "SOURCE", "profile: {step: 50, rates: [0.5, 1.5]}, random_rate: {cv: 0.3}"))
    sim = replicate(s, reps=600, workers=1)
    _check_variance(sim.raw("source", "calls", "arrivals"), 100.0, 0.3)
