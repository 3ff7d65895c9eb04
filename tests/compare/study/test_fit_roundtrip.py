"""Round trip: simulate a station with a known arrival profile, hold and patience, write its
call records, fit them, and find the truth again within the fitted intervals."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest

from compare.study.call_records import station_records
from compare.study.fit_records import read_records, fit_records
from compare.study.fit_scenario import records_scenario
from fluid.loading import load_scenario_text

TRUE_RATES = [2.0, 4.0, 3.0]  # per min, hourly intervals from 07:00
HOLD = {"dist": "lognormal", "mean": 3.0, "cv": 0.8}
PATIENCE = {"dist": "weibull", "mean": 2.0, "shape": 2.0}
STATION = f"""name: Round-trip station (invented)
time_unit: min
run: {{horizon: 300, warmup: 0, replications: 20, seed: 2024}}
sources:
  calls: {{profile: {{step: 60, rates: [{', '.join(map(str, TRUE_RATES))}, 0]}}, into: queue}}
pools:
  agents: 10
places:
  queue: {{patience: {{dist: weibull, mean: 2.0, shape: 2.0}}}}
  talk: {{hold: {{dist: lognormal, mean: 3.0, cv: 0.8}}}}
transitions:
  answer: {{in: [queue, agents], out: [talk]}}
  close: {{in: [talk], out: [agents]}}
"""
DAYS = 20
#: Intervals checked at once: three rates, two hold and two patience parameters; each at the
#: Bonferroni-corrected level so that all hold together with probability >= 95 %.
CHECKS = len(TRUE_RATES) + 4
LEVEL = 1 - 0.05 / CHECKS


@pytest.fixture(scope="module")
def records_file(tmp_path_factory):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # (the profile ends before the horizon: meant so)
        scenario = load_scenario_text(STATION)
    frame = station_records(scenario, DAYS, first_day="2026-03-02", day_start=420.0)
    path = tmp_path_factory.mktemp("records") / "calls.csv"
    frame.to_csv(path, index=False)
    return path


@pytest.fixture(scope="module")
def fitted(records_file):
    records = read_records(records_file)
    return fit_records(records, 60.0, level=LEVEL)


def test_the_records_look_like_a_call_log(records_file):
    head = records_file.read_text().splitlines()[:2]
    assert head[0] == "arrival,answered,ended,abandoned"
    assert head[1].startswith("2026-03-02T07:")


def test_profile_holds_the_true_rates(fitted):
    p = fitted.profile
    assert p.days == DAYS and p.start == 420.0 and p.step == 60.0
    assert p.counts.size == len(TRUE_RATES)
    for true, lo, hi in zip(TRUE_RATES, p.low, p.high):
        assert lo < true < hi
        assert hi - lo < 0.15 * true  # narrow enough to miss a wrong rate
    assert p.counts.sum() == fitted.calls


def test_hold_family_and_parameters(fitted):
    best = fitted.hold.chosen
    assert best.family == HOLD["dist"]
    for key in ("mean", "cv"):
        lo, hi = best.intervals[key]
        assert lo < HOLD[key] < hi
        assert hi - lo < 0.1 * HOLD[key]
    assert best.p_value > 0.01  # the chosen family is not rejected by KS


def test_patience_family_and_parameters_from_censored_waits(fitted):
    choice = fitted.patience
    best = choice.chosen
    assert best.family == PATIENCE["dist"]
    assert choice.observed == fitted.abandoned and choice.censored == fitted.served
    for key in ("mean", "shape"):
        lo, hi = best.intervals[key]
        assert lo < PATIENCE[key] < hi
        assert hi - lo < 0.25 * PATIENCE[key]
    # the Kaplan-Meier curve holds the true survival at its quartiles (pointwise intervals)
    k = PATIENCE["shape"]
    scale = PATIENCE["mean"] / math.gamma(1 + 1 / k)
    curve = fitted.curve
    for t in (1.0, 2.0, 3.0):
        i = int(np.searchsorted(curve.times, t, side="right")) - 1
        true = math.exp(-((t / scale) ** k))
        assert curve.low[i] < true < curve.high[i]


def test_the_written_scenario_holds_the_fit(fitted):
    text = records_scenario(fitted).text
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        s = load_scenario_text(text)
    hold = s.places["talk"].hold
    assert hold.name == "lognormal"
    assert hold.mean == pytest.approx(fitted.hold.chosen.params["mean"], rel=1e-5)
    assert s.places["queue"].patience.name == "weibull"
    assert s.sources["calls"].arrivals.rates == pytest.approx(list(fitted.profile.rates),
                                                              rel=1e-5)
    # every fitted value says where it came from
    assert "chosen by AIC" in text and "Kaplan-Meier" in text and "Garwood" in text
    assert "# 07:00-08:00:" in text
