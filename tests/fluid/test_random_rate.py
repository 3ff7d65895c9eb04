"""The day factor of a source's rates (``random_rate``, fluid.sources.RandomRate): reading it,
its moments and its draws.

References: a gamma factor of mean 1 and cv C has shape k = 1/C² and scale C² (so variance C²);
its moments are checked against ``scipy.stats.gamma``. A Poisson count of mean Λ·G with such a
factor G is negative binomial with variance Λ + C²Λ² (the gamma-Poisson mixture; Jongbloed and
Koole 2001, "Managing uncertainty in call centres using Poisson mixtures", Applied Stochastic
Models in Business and Industry 17), checked against ``scipy.stats.nbinom``.
"""

from __future__ import annotations

import textwrap

import numpy as np
import pytest
from scipy import stats

from fluid import load_scenario_text
from fluid.errors import ScenarioError
from fluid.sources import RandomRate, rate_uncertainty, rate_uncertainty_notes

BASE = textwrap.dedent("""
    name: day factor (invented)
    time_unit: min
    sources:
      calls: {SOURCE, into: queue}
    pools:
      agents: 3
    places:
      queue: {}
      talk: {hold: {dist: exponential, mean: 1.0}}
    transitions:
      answer: {in: [queue, agents], out: [talk]}
      close: {in: [talk], out: [agents]}
""")


def load(source: str, overrides=()):
    return load_scenario_text(BASE.replace("SOURCE", source), file="x.yaml", overrides=overrides)


def test_read_with_rate_and_profile():
    s = load("rate: 2.0, random_rate: {dist: gamma, cv: 0.2}")
    assert s.sources["calls"].random_rate == RandomRate(cv=0.2, dist="gamma")
    assert s.sources["calls"].rate_varies
    p = load("profile: {step: 300, rates: [1, 2]}, random_rate: {cv: 0.1}")  # gamma by default
    assert p.sources["calls"].random_rate == RandomRate(cv=0.1)
    plain = load("rate: 2.0")
    assert plain.sources["calls"].random_rate is None and not plain.sources["calls"].rate_varies


def test_cv_zero_is_no_factor():
    s = load("rate: 2.0, random_rate: {dist: gamma, cv: 0}")
    assert not s.sources["calls"].rate_varies
    assert s.sources["calls"].random_rate.sample(np.random.default_rng(1)) == 1.0
    assert rate_uncertainty(s.sources) == {}


@pytest.mark.parametrize("spec, field, words", [
    ("{dist: lognormal, cv: 0.2}", "sources.calls.random_rate.dist", "only gamma"),
    ("{dist: gamma}", "sources.calls.random_rate.cv", "is required"),
    ("{dist: gamma, cv: -0.1}", "sources.calls.random_rate.cv", "must be >= 0"),
    ("{dist: gamma, cv: 1.5}", "sources.calls.random_rate.cv", "at most 1"),
    ("{dist: gamma, cv: 1e-9}", "sources.calls.random_rate.cv", "0 or at least"),
    ("{dist: gamma, cv: .nan}", "sources.calls.random_rate.cv", "finite number"),
    ("{dist: gamma, cv: 0.2, mean: 2}", "sources.calls.random_rate.mean", "unknown key"),
    ("0.2", "sources.calls.random_rate", "must be a mapping"),
])
def test_bad_random_rate_names_the_field(spec, field, words):
    with pytest.raises(ScenarioError) as err:
        load(f"rate: 2.0, random_rate: {spec}")
    assert f"x.yaml: {field}" in str(err.value) and words in str(err.value)


def test_trace_source_refuses_a_day_factor(tmp_path):
    (tmp_path / "t.txt").write_text("0.5\n1.0\n")
    text = BASE.replace("SOURCE", "trace: t.txt, random_rate: {cv: 0.2}")
    with pytest.raises(ScenarioError, match=r"sources\.calls\.random_rate: a trace source"):
        load_scenario_text(text, file="x.yaml", base_dir=str(tmp_path))


def test_set_gives_a_source_a_day_factor():
    s = load("rate: 2.0", overrides=["sources.calls.random_rate.cv=0.2"])
    assert s.sources["calls"].random_rate == RandomRate(cv=0.2)
    t = load("rate: 2.0, random_rate: {cv: 0.1}", overrides=["sources.calls.random_rate.cv=0.3"])
    assert t.sources["calls"].random_rate.cv == 0.3
    # (the variant keeps the field in its document, so with_changes and run folders see it)
    assert s.to_document()["sources"]["calls"]["random_rate"] == {"dist": "gamma", "cv": 0.2}


def test_fluid_reports_the_spread():
    s = load("rate: 2.0, random_rate: {cv: 0.2}")
    assert rate_uncertainty(s.sources) == {"calls": {"dist": "gamma", "cv": 0.2}}
    assert rate_uncertainty_notes(s.sources) == [
        "arrivals of calls vary by a day factor with cv 0.2 (gamma, mean 1, drawn once per "
        "replication): the fluid model uses the mean"]


@pytest.mark.parametrize("cv", [0.05, 0.2, 1.0])
def test_factor_moments_match_scipy_gamma(cv):
    k = 1 / cv**2
    ref = stats.gamma(a=k, scale=1 / k)  # mean 1, variance cv²
    assert RandomRate(cv).mean == 1.0
    assert ref.mean() == pytest.approx(1.0, rel=1e-12)
    assert ref.std() == pytest.approx(cv, rel=1e-12)


def test_factor_draws_are_numpy_gamma_calls():
    # pinned to the Generator call: one gamma(1/cv², cv²) draw per call
    a, b = np.random.default_rng(7), np.random.default_rng(7)
    f = RandomRate(0.25)
    draws = [f.sample(a) for _ in range(5)]
    assert draws == [float(b.gamma(16.0, 1 / 16.0)) for _ in range(5)]


def test_factor_sample_mean_within_its_interval():
    rng = np.random.default_rng(2024)
    f = RandomRate(0.3)
    x = np.array([f.sample(rng) for _ in range(4000)])
    half = stats.t.ppf(0.995, x.size - 1) * x.std(ddof=1) / np.sqrt(x.size)
    assert abs(x.mean() - 1.0) < half


@pytest.mark.parametrize("lam, cv", [(100.0, 0.2), (7.5, 0.5)])
def test_count_variance_is_the_negative_binomial_one(lam, cv):
    # gamma(k, 1/k) mixture of Poisson(lam G): negative binomial with n = k, p = k / (k + lam)
    k = 1 / cv**2
    nb = stats.nbinom(n=k, p=k / (k + lam))
    assert nb.mean() == pytest.approx(lam, rel=1e-12)
    assert RandomRate(cv).variance_of_count(lam) == pytest.approx(nb.var(), rel=1e-12)
