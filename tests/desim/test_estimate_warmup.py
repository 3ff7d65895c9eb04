"""Estimates (Student t intervals) and MSER-5 warm-up detection."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from desim import Estimate, mser5, replicate


def test_estimate_student_t_interval():
    # values 1, 2, 3: mean 2, sample sd 1, half-width t(0.975, 2)·1/√3; the quantile is
    # scipy.stats.t.ppf(0.975, 2) = 4.302652729911275 (also 4.303 in printed t tables).
    e = Estimate.from_values([1.0, 2.0, 3.0])
    half = stats.t.ppf(0.975, 2) / math.sqrt(3)
    assert stats.t.ppf(0.975, 2) == pytest.approx(4.302652729911275)
    assert (e.mean, e.n) == (2.0, 3)
    assert e.low == pytest.approx(2 - half) and e.high == pytest.approx(2 + half)
    assert e.to_json() == {"mean": 2.0, "low": e.low, "high": e.high, "n": 3}


def test_estimate_with_one_or_no_value():
    one = Estimate.from_values([4.0, math.nan])  # nan = nothing measured in that replication
    assert one.mean == 4.0 and one.n == 1 and math.isnan(one.low) and math.isnan(one.high)
    assert one.to_json() == {"mean": 4.0, "low": None, "high": None, "n": 1}
    none = Estimate.from_values([])
    assert none.n == 0 and math.isnan(none.mean)


def test_mser5_finds_a_hand_computed_truncation():
    # Batch means Z = 9, 1, -1, 1, -1, 1, -1, 1, -1, 1 (each repeated 5 times as raw data, k=10).
    # MSER(0): mean 1, SSE 64 + 4·4 = 80 -> 80/100 = 0.8
    # MSER(1): mean 1/9, SSE 9 - 9/81 = 80/9 -> 80/729 = 0.1097
    # MSER(2): mean 0, SSE 8 -> 8/64 = 0.125
    # MSER(3): mean 1/7, SSE 7 - 1/7 = 48/7 -> 48/343 = 0.1399
    # MSER(4): mean 0, SSE 6 -> 6/36 = 0.1667
    # so d* = 1 and the first 5 raw observations are deleted.
    z = [9, 1, -1, 1, -1, 1, -1, 1, -1, 1]
    r = mser5(np.repeat(z, 5), min_tail=2)
    assert r.truncation == 5 and r.batches == 10 and not r.late_minimum
    np.testing.assert_allclose(r.statistic[:5], [0.8, 80 / 729, 0.125, 48 / 343, 1 / 6])


def test_mser5_flags_a_trend_as_run_longer():
    # Z_j = j: over the last m batches SSE = m(m²-1)/12, so MSER = (m²-1)/(12m) falls as d grows:
    # the minimum is at the largest d searched, in the second half -> run longer.
    r = mser5(np.repeat(np.arange(40.0), 5))
    assert r.late_minimum
    m = 40 - np.arange(len(r.statistic))
    np.testing.assert_allclose(r.statistic, (m**2 - 1) / (12 * m))


def test_mser5_on_a_constant_series_truncates_nothing():
    # every MSER(d) is 0; ties go to the smallest d
    r = mser5(np.full(100, 3.0))
    assert r.truncation == 0 and not r.late_minimum


def test_run_longer_warning_for_a_growing_queue(net):
    # Inflow 1.2 into capacity 1, no patience: the queue grows linearly all run long.
    s = net("""
        name: slowly overloaded (invented)
        run: {horizon: 2000, warmup: 100, replications: 3, seed: 2}
        sources:
          calls: {rate: 1.2, into: queue}
        pools:
          agent: 1
        places:
          queue: {}
          talk: {hold: {dist: exponential, mean: 1.0}}
        transitions:
          answer: {in: [queue, agent], out: [talk]}
          close: {in: [talk], out: [agent]}
    """)
    res = replicate(s, workers=1)
    assert res.warmup_suggestion.ensemble_late
    assert any("run longer" in w for w in res.warnings)
