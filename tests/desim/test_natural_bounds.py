"""Intervals never leave a figure's natural bounds (issue 13, item 4), and a window's shares count
the same jobs on both sides (issue 13, item 9)."""

from __future__ import annotations

import math

import pytest
from scipy import stats

from desim import Estimate, replicate
from desim.estimate import NON_NEGATIVE, SHARE


def _raw_t(values):
    """The plain Student t interval (mean ± t(0.975, n-1)·s/√n), from scipy.stats."""
    n = len(values)
    mean = sum(values) / n
    sd = math.sqrt(sum((v - mean) ** 2 for v in values) / (n - 1))
    half = stats.t.ppf(0.975, n - 1) * sd / math.sqrt(n)
    return mean - half, mean + half


def test_a_near_zero_count_stays_at_or_above_zero():
    # 2 abandonments in 15 replications: mean 2/15 = 0.1333 (the 0.1333 [-0.08, 0.35]);
    # the raw t interval reaches below 0, the estimate's stops at 0.
    values = [0.0] * 13 + [1.0, 1.0]
    low, high = _raw_t(values)
    assert low < 0
    e = Estimate.from_values(values, bounds=NON_NEGATIVE)
    assert e.mean == pytest.approx(2 / 15)
    assert e.low == 0.0 and e.high == pytest.approx(high)
    assert e.method == "student t, cut at the natural bound 0"
    assert set(e.to_json()) == {"mean", "low", "high", "n"}  # (pinned by design.md §5)


def test_a_near_one_service_level_stays_at_or_below_one():
    # a service level near 1 (the 0.9972 [0.9914, 1.003])
    values = [1.0, 1.0, 0.99, 1.0, 0.996]
    low, high = _raw_t(values)
    assert high > 1
    e = Estimate.from_values(values, bounds=SHARE)
    assert e.high == 1.0 and e.low == pytest.approx(low)
    assert e.method == "student t, cut at the natural bounds [0, 1]"


def test_a_near_zero_share_and_a_rounding_busy_fraction():
    values = [0.0, 0.0, 0.0, 0.01]
    assert _raw_t(values)[0] < 0
    e = Estimate.from_values(values, bounds=SHARE)
    assert e.low == 0.0 and 0.0 <= e.mean <= e.high <= 1.0
    # a busy fraction that leaves [0, 1] only by rounding (the busy -4e-16)
    busy = Estimate.from_values([-4e-16, -4e-16, -4e-16], bounds=SHARE)
    assert (busy.mean, busy.low, busy.high) == (0.0, 0.0, 0.0)


def test_without_bounds_the_interval_is_the_plain_t_interval():
    values = [0.0] * 13 + [1.0, 1.0]
    e = Estimate.from_values(values)
    assert (e.low, e.high) == pytest.approx(_raw_t(values))
    assert e.method == "student t"


UNSTAFFED = """
name: unstaffed pool (invented)
time_unit: min
run: {horizon: 200, warmup: 50, replications: 5, seed: 3}
sources:
  calls: {rate: 2.0, into: queue}
pools:
  agents: 0
places:
  queue: {patience: {dist: exponential, mean: 10.0}}
  talk: {hold: {dist: exponential, mean: 1.0}}
transitions:
  answer: {in: [queue, agents], out: [talk]}
  close: {in: [talk], out: [agents]}
targets:
  queue: {within: 0.5, goal: 0.8}
"""


def test_a_pool_with_no_staff_abandons_exactly_everyone(net):
    # Nobody is ever served, so every job that became available in the window and left it left
    # by abandoning: the share is exactly 1 in every replication. (Before, the jobs that became
    # available before the warm-up and abandoned after it were counted above a denominator of
    # the jobs that became available in the window: shares of 1.016, interval past 1.)
    result = replicate(net(UNSTAFFED), workers=1)
    for r in result.runs:
        assert r.places["queue"]["abandoned"] == 1.0
        assert r.places["queue"]["served_within"] == 0.0
    ab = result.places["queue"]["abandoned"]
    assert (ab.mean, ab.low, ab.high, ab.n) == (1.0, 1.0, 1.0, 5)
    assert ab.method == "student t, cut at the natural bounds [0, 1]"
    methods = result.to_json()["interval_methods"]
    assert methods["places"]["abandoned"] == ab.method
    assert methods["places"]["wait"] == "student t, cut at the natural bound 0"


def test_every_simulated_interval_stays_within_its_bounds(net):
    result = replicate(net(UNSTAFFED), workers=1, reps=3)
    for kind, table in (("places", result.places), ("sources", result.sources),
                        ("transitions", result.transitions)):
        for name, metrics in table.items():
            for metric, e in metrics.items():
                if e.n >= 2:
                    assert e.low >= 0.0, (kind, name, metric)
                    if "[0, 1]" in e.method:
                        assert e.high <= 1.0, (kind, name, metric)
