"""Wait percentiles and the average speed of answer (ASA) per waiting place (issue 13, item 3).

Statistical checks: an M/M/c station against Erlang C's waiting-time distribution. For a caller
of an M/M/c queue P(W > t) = C·e^{−(cμ − λ)t} (t >= 0), C the Erlang C probability of waiting
(Kleinrock 1975, Queueing Systems vol. 1, M/M/m; references.md "Erlang C"), so the p-quantile of
the wait of all callers is q_p = max(0, ln(C / (1 − p)) / (cμ − λ)). With no abandonment every
caller is served, so the ASA is E[W] = C / (cμ − λ). The tolerance is the rule of
test_reference_erlang.py (a two-sided Student t interval over the per-replication values at the
family's Bonferroni level, and narrow: half-width below 10 % of the reference); these 3 checks
are part of that family (FAMILY_CHECKS there). Exact checks: the figures equal numpy's
percentile and mean of the waits the run recorded.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import desim
from compare.formulas.erlang import erlang_c_queue
from desim.run import DEFAULT_PERCENTILES, run_replication

from .test_reference_erlang import agrees, station

SOURCE = "Erlang C waiting-time distribution (Kleinrock 1975, M/M/m), references.md"


def erlang_c_quantile(ref, p: float) -> float:
    """q_p = max(0, ln(C / (1 − p)) / (cμ − λ)): the p-quantile of an M/M/c caller's wait."""
    drain = ref.servers / ref.mean_hold - ref.arrival_rate
    return max(0.0, math.log(ref.p_wait / (1 - p)) / drain)


def test_quantile_formula_inverts_the_tail():
    # the quantile is where Erlang C's tail P(W > t) (compare.formulas.erlang) equals 1 − p
    ref = erlang_c_queue(5, 4 / 3, 3.0)
    for p in (0.8, 0.95):
        assert ref.wait_exceeds(erlang_c_quantile(ref, p)) == pytest.approx(1 - p, rel=1e-12)
    assert erlang_c_quantile(ref, 0.1) == 0.0  # below the atom at 0 (1 − p > C)


def test_percentiles_and_asa_of_an_m_m_c_station_match_erlang_c():
    # 5 agents, λ = 4/3 per min, mean hold 3 min: C = 0.5541, cμ − λ = 1/3 per min,
    # q_0.80 = 3.057 min, q_0.95 = 7.216 min, E[W] = 1.662 min
    ref = erlang_c_queue(5, 4 / 3, 3.0)
    sim = desim.replicate(station(5, 4 / 3, "{dist: exponential, mean: 3}"), reps=20,
                          horizon=40_000, warmup=100, seed=7, workers=2)
    for p in (0.80, 0.95):
        agrees(sim.raw("place", "queue", f"wait_p{p * 100:g}"), erlang_c_quantile(ref, p),
               f"wait percentile {p:.0%}", SOURCE)
    agrees(sim.raw("place", "queue", "asa"), ref.mean_wait, "average speed of answer", SOURCE)
    est = sim.places["queue"]["wait_p95"]
    assert est.n == 20 and 0 <= est.low <= est.mean <= est.high


def _abandoning_station():
    return station(2, 1.0, "{dist: exponential, mean: 1.8}", patience="{dist: exponential, mean: 2}")


def test_figures_are_the_recorded_waits_percentiles_and_the_served_mean():
    # exact: per run, numpy's percentiles of every wait that left in the window (served and
    # abandoning together, the jobs `wait` averages over) and the mean of the served waits
    run = run_replication(_abandoning_station(), 0, horizon=2000, warmup=50, seed=3,
                          record_waits=True)
    w = run.waits["queue"]
    every = np.concatenate([w["taken"], w["abandoned"]])
    assert w["abandoned"].size > 0  # (the check must see both kinds)
    m = run.places["queue"]
    assert every.size == m["left"]
    assert every.mean() == pytest.approx(m["wait"], rel=1e-12)
    for q, v in zip(DEFAULT_PERCENTILES, np.percentile(every, DEFAULT_PERCENTILES)):
        assert m[f"wait_p{q:g}"] == v
    assert m["asa"] == pytest.approx(w["taken"].mean(), rel=1e-12)
    assert m["asa"] != pytest.approx(m["wait"])  # abandoners are left out of the ASA
    assert "asa" not in run.places["talk"]  # only waiting places


def test_other_percentiles_and_a_bad_one():
    s = _abandoning_station()
    sim = desim.replicate(s, reps=2, horizon=300, warmup=10, seed=1, workers=1,
                          percentiles=[99, 12.5])
    assert [m for m in sim.places["queue"] if m.startswith("wait_p")] == ["wait_p99", "wait_p12.5"]
    doc = sim.to_json()
    assert list(doc["wait_distribution"]["queue"]["wait_percentiles"]) == ["99", "12.5"]
    assert doc["wait_distribution"]["queue"]["wait_percentiles"]["99"]["n"] == 2
    assert set(doc["wait_distribution"]["queue"]["asa"]) == {"mean", "low", "high", "n"}
    assert "talk" not in doc["wait_distribution"]  # only waiting places
    assert "asa" not in doc["places"]["queue"]  # design.md §5's place keys stay as they were
    with pytest.raises(desim.SettingsError, match="percentiles"):
        desim.replicate(s, reps=2, horizon=300, warmup=10, seed=1, workers=1, percentiles=[101])


def test_percentiles_change_no_other_figure():
    s = _abandoning_station()
    a = run_replication(s, 0, horizon=500, warmup=10, seed=5)
    b = run_replication(s, 0, horizon=500, warmup=10, seed=5, percentiles=(10,))
    # (every percentile figure: of all jobs, of the served, of the abandoners)
    strip = lambda places: {p: {k: v for k, v in m.items()
                                if not k.startswith(("wait_p", "served_wait_p",
                                                     "abandoned_wait_p"))}
                            for p, m in places.items()}
    assert strip(a.places) == strip(b.places)
    assert a.sources == b.sources and a.transitions == b.transitions
