"""Distributions: moments and CDFs against scipy.stats, draws, parsing and its messages.

Reference: the parametrisations of scipy.stats (its documentation of ``lognorm``, ``gamma``,
``erlang``, ``uniform``, ``weibull_min`` and ``expon``): lognormal with ``s = σ`` and
``scale = exp(μ)``; gamma with shape ``a`` and ``scale``; Weibull with shape ``c`` and
``scale``. Each of our objects is given by its mean and cv (or shape), so the test converts
independently: σ² = log(1 + cv²), μ = log(mean) − σ²/2; gamma shape 1/cv², scale mean·cv²;
Weibull scale = mean / Γ(1 + 1/k).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from fluid.distributions import (
    DISTRIBUTION_NAMES,
    Deterministic,
    Empirical,
    Erlang,
    Exponential,
    Gamma,
    Lognormal,
    Uniform,
    Weibull,
    parse_distribution,
)
from fluid.errors import FieldError

POINTS = (0.0, 0.1, 0.7, 1.0, 2.0, 3.3, 8.0, 40.0)


def _lognorm(mean, cv):
    s2 = math.log1p(cv**2)
    return stats.lognorm(s=math.sqrt(s2), scale=math.exp(math.log(mean) - s2 / 2))


REFERENCE = [
    (Exponential(2.0), stats.expon(scale=2.0)),
    (Lognormal(4.0, 0.8), _lognorm(4.0, 0.8)),
    (Gamma(7.0, 0.6), stats.gamma(a=1 / 0.36, scale=7.0 * 0.36)),
    (Erlang(3.0, 4), stats.erlang(a=4, scale=0.75)),
    (Uniform(1.0, 3.0), stats.uniform(loc=1.0, scale=2.0)),
    (Weibull(2.0, 1.5), stats.weibull_min(c=1.5, scale=2.0 / math.gamma(1 + 1 / 1.5))),
    (Weibull(2.0, 0.5), stats.weibull_min(c=0.5, scale=2.0 / math.gamma(3.0))),
]


@pytest.mark.parametrize("dist, ref", REFERENCE, ids=lambda d: getattr(d, "name", ""))
def test_mean_cv_and_cdf_match_scipy_stats(dist, ref):
    assert dist.mean == pytest.approx(ref.mean(), rel=1e-12)
    assert dist.cv == pytest.approx(ref.std() / ref.mean(), rel=1e-12)
    for x in POINTS:
        assert dist.cdf(x) == pytest.approx(ref.cdf(x), rel=1e-12, abs=1e-15), x


@pytest.mark.parametrize("dist, ref", REFERENCE, ids=lambda d: getattr(d, "name", ""))
def test_sample_mean_within_its_interval(dist, ref):
    # fixed seed; the tolerance is 4 standard errors of the mean of n draws (a two-sided 99.99 %
    # interval from the central limit theorem), with the sd from scipy.stats
    n = 200_000
    x = dist.sample(np.random.default_rng(2024), n)
    assert x.shape == (n,)
    assert abs(x.mean() - ref.mean()) <= 4 * ref.std() / math.sqrt(n)


def test_draws_are_the_numpy_generator_calls():
    # the simulator's numbers depend on these exact calls: pin them draw for draw
    def rng():
        return np.random.default_rng(7)

    shape = 1 / 0.6**2
    lam = math.log1p(0.8**2)
    cases = [
        (Exponential(2.0), rng().exponential(2.0, 5)),
        (Lognormal(4.0, 0.8), rng().lognormal(math.log(4.0) - lam / 2, math.sqrt(lam), 5)),
        (Gamma(7.0, 0.6), rng().gamma(shape, 7.0 / shape, 5)),
        (Erlang(3.0, 4), rng().gamma(4, 3.0 / 4, 5)),
        (Uniform(1.0, 3.0), rng().uniform(1.0, 3.0, 5)),
        (Weibull(2.0, 1.5), Weibull(2.0, 1.5).scale * rng().weibull(1.5, 5)),
        (Empirical((1.0, 2.0, 5.0)), rng().choice(np.array([1.0, 2.0, 5.0]), 5)),
    ]
    for dist, expected in cases:
        assert dist.sample(rng(), 5).tolist() == expected.tolist(), dist


def test_degenerate_cases_are_point_masses():
    for dist in (Deterministic(2.0), Lognormal(2.0, 0.0), Gamma(2.0, 0.0), Uniform(2.0, 2.0)):
        assert dist.mean == 2.0 and dist.cv == 0.0
        assert dist.sample(np.random.default_rng(1), 3).tolist() == [2.0, 2.0, 2.0]
        assert [dist.cdf(x) for x in (1.9, 2.0, 2.1)] == [0.0, 1.0, 1.0]


def test_empirical_moments_and_cdf():
    # values {1, 2, 2, 5}: mean 2.5, population sd sqrt((2.25 + 0.25 + 0.25 + 6.25)/4) = 1.5
    d = Empirical((1.0, 2.0, 2.0, 5.0))
    assert d.mean == 2.5 and d.cv == pytest.approx(1.5 / 2.5, rel=1e-15)
    assert [d.cdf(x) for x in (0.5, 1.0, 2.0, 4.9, 5.0)] == [0.0, 0.25, 0.75, 0.75, 1.0]


def test_parsing_builds_each_distribution():
    cases = [
        (3, Deterministic(3.0)),
        ({"dist": "exponential", "mean": 2}, Exponential(2.0)),
        ({"dist": "lognormal", "mean": 4, "cv": 0.8}, Lognormal(4, 0.8)),
        ({"dist": "gamma", "mean": 7, "cv": 0.6}, Gamma(7, 0.6)),
        ({"dist": "erlang", "mean": 3, "k": 4}, Erlang(3, 4)),
        ({"dist": "uniform", "low": 1, "high": 3}, Uniform(1, 3)),
        ({"dist": "weibull", "mean": 2, "shape": 1.5}, Weibull(2, 1.5)),
        ({"dist": "empirical", "values": [1, 2]}, Empirical((1, 2))),
    ]
    for spec, expected in cases:
        assert parse_distribution(spec, "h") == expected
    assert DISTRIBUTION_NAMES == ("deterministic", "exponential", "lognormal", "gamma", "erlang",
                                  "uniform", "weibull", "empirical")
    for name in DISTRIBUTION_NAMES:
        assert type(parse_distribution({"dist": name, **_VALID[name]}, "h")).name == name


_VALID = {"deterministic": {"value": 1}, "exponential": {"mean": 1},
          "lognormal": {"mean": 1, "cv": 1}, "gamma": {"mean": 1, "cv": 1},
          "erlang": {"mean": 1, "k": 2}, "uniform": {"low": 0, "high": 1},
          "weibull": {"mean": 1, "shape": 2}, "empirical": {"values": [1]}}


@pytest.mark.parametrize("spec, message", [
    (-1, "h: must be a finite number >= 0 (got -1)"),
    ({"dist": "nope"}, "h.dist: must be one of deterministic, exponential, lognormal, gamma, "
                       "erlang, uniform, weibull, empirical (got 'nope')"),
    ({"dist": "exponential", "mean": 0}, "h.mean: must be > 0 (got 0)"),
    ({"dist": "exponential"}, "h.mean: is required"),
    ({"dist": "exponential", "mean": 1, "cv": 1},
     "h.cv: unknown key for a exponential distribution"),
    ({"dist": "gamma", "mean": -7, "cv": 0.6}, "h.mean: must be >= 0 (got -7)"),
    ({"dist": "lognormal", "mean": 4, "cv": True}, "h.cv: must be a finite number (got True)"),
    ({"dist": "erlang", "mean": 0, "k": 0}, "h.k: must be a whole number >= 1 (got 0)"),
    ({"dist": "erlang", "mean": 3}, "h.k: must be a whole number >= 1 (got None)"),
    ({"dist": "uniform", "low": 3, "high": 1}, "h.high: must be >= low (3) (got 1.0)"),
    ({"dist": "uniform", "low": -1, "high": -3}, "h.low: must be >= 0 (got -1)"),
    ({"dist": "weibull", "mean": 2, "shape": 0}, "h.shape: must be > 0 (got 0)"),
    ({"dist": "empirical"}, "h: empirical needs exactly one of 'values' or 'file'"),
    ({"dist": "empirical", "values": [1, -1]}, "h.values[1]: must be >= 0 (got -1)"),
    ({"dist": "empirical", "values": []},
     "h.values: must be a non-empty list of numbers (got [])"),
])
def test_messages_name_the_field(spec, message):
    with pytest.raises(FieldError) as info:
        parse_distribution(spec, "h")
    assert str(info.value.to_scenario_error("f.yaml")) == "f.yaml: " + message


def test_empirical_values_from_a_file(tmp_path):
    (tmp_path / "holds.txt").write_text("1.5 2\n3\n")
    d = parse_distribution({"dist": "empirical", "file": "holds.txt"}, "h", tmp_path)
    assert d == Empirical((1.5, 2.0, 3.0))
    (tmp_path / "bad.txt").write_text("1.5 x\n")
    with pytest.raises(FieldError, match=r"bad.txt: entry 2 is not a number"):
        parse_distribution({"dist": "empirical", "file": "bad.txt"}, "h", tmp_path)
