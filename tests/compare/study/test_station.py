"""Station self-check (compare.study.station): the simulator against the classical formulas.

Textbook cases (values from references.md, recomputed there): Erlang C λ = 1, hold 3, N = 5;
Erlang A λ = 48, μ = 1, θ = 1, N = 50; Erlang B B(10, 5); Cobham c = 1, λ = (0.3, 0.5), μ = 1.
Each is simulated with a fixed seed; a check agrees when the formula lies in the simulated 95 %
interval. Feeding the simulation a wrong arrival rate must make the checks fail.
"""

from __future__ import annotations

import json

import pytest

from compare.study.station import (
    DEGENERATE_TOLERANCE,
    agrees,
    station_check,
    station_scenario,
    station_yaml,
)
from desim import Estimate

RUN = dict(workers=2, seed=1, reps=10)


def test_erlang_c_textbook_case_agrees():
    # references.md, Erlang C recomputed: λ = 1/min, hold 3 min, N = 5: C = 0.236152,
    # Wq = 0.354227 min (= Lq since λ = 1); busy = λh/N = 0.6
    r = station_check(5, 1.0, 3.0, horizon=5000, warmup=200, **RUN)
    assert r.model == "Erlang C"
    assert r.check("p_wait").formula == pytest.approx(0.236152, abs=1e-6)
    assert r.check("mean_wait").formula == pytest.approx(0.354227, abs=1e-6)
    assert r.check("mean_queue").formula == pytest.approx(0.354227, abs=1e-6)
    assert r.check("busy").formula == pytest.approx(0.6)
    assert {c.metric for c in r.checks} == {"p_wait", "mean_wait", "mean_queue",
                                            "service_level", "busy"}
    assert r.all_agree, r.to_frame()
    assert r.within == pytest.approx(0.3)  # default: a tenth of the mean hold
    assert all("Erlang (1917)" in c.source for c in r.checks)


def test_erlang_a_textbook_case_agrees():
    # references.md, Erlang A recomputed: λ = 48, μ = 1, θ = 1, N = 50: P(W>0) = 0.405404,
    # P(Ab) = 0.039418, E[W] = P(Ab)/θ
    r = station_check(50, 48.0, 1.0, patience_mean=1.0, horizon=300, warmup=30, **RUN)
    assert r.model == "Erlang A"
    assert r.check("p_wait").formula == pytest.approx(0.405404, abs=1e-6)
    assert r.check("p_abandon").formula == pytest.approx(0.039418, abs=1e-6)
    assert r.check("mean_wait").formula == pytest.approx(0.039418, abs=1e-6)
    assert r.check("busy").formula == pytest.approx(48 * (1 - 0.039418) / 50, abs=1e-6)
    assert r.all_agree, r.to_frame()
    assert r.informative == ()  # not overloaded: no Whitt rows


def test_erlang_b_is_insensitive_to_the_hold_distribution():
    # references.md: B(10, 5) = 0.018385 (recomputed), for any hold distribution with mean 1;
    # here lognormal with cv 0.5
    r = station_check(10, 5.0, 1.0, patience_mean=0, hold_cv=0.5, horizon=2000, warmup=50, **RUN)
    assert r.model == "Erlang B"
    assert r.check("blocking").formula == pytest.approx(0.018385, abs=1e-6)
    assert r.check("busy").formula == pytest.approx(5 * (1 - 0.018385) / 10, abs=1e-6)
    assert r.all_agree, r.to_frame()
    assert any("loss system" in n for n in r.notes)


def test_cobham_priority_waits_agree():
    # references.md, Cobham (1954) recomputed: c = 1, λ = (0.3, 0.5), μ = 1: W = (1.142857,
    # 5.714286); every class finds the agent busy with probability C = ρ = 0.8 (M/M/1)
    r = station_check(1, 0.8, 1.0, class_rates=(0.3, 0.5), horizon=20000, warmup=500, **RUN)
    assert r.model == "Cobham"
    assert r.check("mean_wait", "queue_1").formula == pytest.approx(1.142857, abs=1e-6)
    assert r.check("mean_wait", "queue_2").formula == pytest.approx(5.714286, abs=1e-6)
    assert r.check("p_wait", "queue_2").formula == pytest.approx(0.8)
    assert r.all_agree, r.to_frame()
    assert any("not judged" in n for n in r.notes)


def test_wrong_simulated_arrival_rate_fails_the_checks():
    # The formulas stay at λ = 1 while the simulation is fed λ = 1.25: busy 0.75 instead of
    # 0.6, and the waits grow (Erlang C at load 3.75 of 5); every check must disagree
    r = station_check(5, 1.0, 3.0, horizon=5000, warmup=200,
                      _simulate_overrides={"sources.calls.rate": 1.25}, **RUN)
    assert not r.all_agree
    assert [c.agrees for c in r.checks] == [False] * len(r.checks)
    assert r.to_json()["simulate_overrides"] == {"sources.calls.rate": 1.25}


def test_non_exponential_hold_without_patience_is_said_in_the_notes():
    # Erlang C is exact only for exponential holds; only busy = λh/c (any hold) is judged
    r = station_check(5, 1.0, 3.0, hold_cv=0.5, horizon=2000, warmup=200, reps=4, workers=2)
    assert r.model == "none"
    assert [c.metric for c in r.checks] == ["busy"]
    assert any("Erlang C" in n and "not judged" in n for n in r.notes)


def test_unstable_station_judges_nothing_and_says_so():
    r = station_check(2, 1.0, 3.0, horizon=200, warmup=20, reps=2, workers=1)
    assert r.checks == () and r.model == "none"
    assert any("no steady state" in n for n in r.notes)


def test_overload_with_patience_lists_whitt_for_information():
    # λ = 6, N = 5, hold 1, patience mean 1: Whitt's fluid P(Ab) = 1 − 5/6 (references.md),
    # informative only; the Erlang A checks are judged as usual
    r = station_check(5, 6.0, 1.0, patience_mean=1.0, horizon=1000, warmup=100, **RUN)
    info = {c.metric: c for c in r.informative}
    assert info["p_abandon"].formula == pytest.approx(1 / 6)
    assert info["p_abandon"].source.startswith("Whitt (2006)")
    assert r.model == "Erlang A" and r.all_agree, r.to_frame()
    doc = r.to_json()
    json.dumps(doc, allow_nan=False)
    assert doc["checks"][0].keys() >= {"metric", "formula", "simulation", "agrees", "source"}
    assert doc["servers"] == 5 and doc["arrival_rate"] == 6.0
    frame = r.to_frame()
    assert frame["judged"].sum() == len(r.checks)


def test_agreement_rule_for_degenerate_intervals():
    # Documented rule: a zero-width interval agrees when the formula is within
    # DEGENERATE_TOLERANCE · max(1, |formula|); fewer than two replications never agree
    zero = Estimate(0.0, 0.0, 0.0, 10)
    assert agrees(0.0, zero)
    assert agrees(DEGENERATE_TOLERANCE / 2, zero)
    assert not agrees(2 * DEGENERATE_TOLERANCE, zero)
    assert not agrees(0.5, Estimate(0.5, float("nan"), float("nan"), 1))
    assert agrees(0.5, Estimate(0.5, 0.4, 0.6, 5)) and not agrees(0.7, Estimate(0.5, 0.4, 0.6, 5))


def test_station_scenario_shapes():
    s = station_scenario(3, 1.0, 2.0, class_rates=(0.4, 0.6), patience_mean=2.0)
    assert list(s.sources) == ["calls_1", "calls_2"]
    assert s.pools["agents"].priority == ("answer_1", "answer_2")
    assert s.places["queue_2"].patience.mean == 2.0
    assert s.targets.service["queue_1"].within == pytest.approx(0.2)
    loss = station_scenario(3, 1.0, 2.0, patience_mean=0, hold_cv=0.0)
    assert loss.places["queue"].patience.mean == 0.0
    assert loss.places["talk"].hold.cv == 0.0
    assert "gamma" in station_yaml(3, 1.0, 2.0, hold_cv=0.5, hold_dist="gamma")
    with pytest.raises(ValueError, match="sum to"):
        station_check(3, 2.0, 1.0, class_rates=(0.4, 0.6))


def test_each_check_is_judged_at_bonferroni_level():
    # Bonferroni: m checks each at 1 - 0.05/m fail together with chance <= 0.05 when the
    # formulas are right; the interval is Student's t over the per-replication values
    # (half-width t_{1 - 0.025/m, n-1} s / sqrt(n), quantile from scipy.stats.t.ppf)
    import numpy as np
    from scipy import stats

    from compare.study.station import FAMILY_WISE_LEVEL, check_level

    assert FAMILY_WISE_LEVEL == 0.95
    assert check_level(5) == pytest.approx(0.99)
    assert check_level(1) == pytest.approx(0.95)
    r = station_check(5, 1.0, 3.0, horizon=2000, warmup=200, **RUN)
    m = len(r.checks)
    assert m == 5 and r.level == pytest.approx(1 - 0.05 / m)
    values = r.simulation.raw("place", "queue", "wait")
    n = len(values)
    half = stats.t.ppf(1 - 0.025 / m, n - 1) * np.std(values, ddof=1) / np.sqrt(n)
    est = r.check("mean_wait").simulation
    assert est.mean == pytest.approx(np.mean(values))
    assert est.high - est.mean == pytest.approx(half)
    doc = r.to_json()
    assert doc["level"] == pytest.approx(0.99) and doc["family_wise_level"] == 0.95
    from compare.present.text import station_text

    assert "Bonferroni over the 5 checks" in station_text(r)


@pytest.mark.slow
def test_false_failure_rate_of_a_correct_simulator_is_at_most_five_percent():
    # A correct simulator (Erlang C, λ = 1, hold 3, N = 5) over 40 independent base seeds: the
    # number of runs with any failing check is Binomial(40, p) with p <= 0.05 when the
    # family-wise level holds. Reject p <= 0.05 only if the count exceeds the 99 % quantile of
    # Binomial(40, 0.05) (a one-sided binomial test at 1 %; scipy.stats.binom.ppf).
    from scipy import stats

    failing = sum(not station_check(5, 1.0, 3.0, horizon=2000, warmup=200, reps=5, seed=s,
                                    workers=2).all_agree for s in range(1, 41))
    assert failing <= stats.binom.ppf(0.99, 40, 0.05), failing
