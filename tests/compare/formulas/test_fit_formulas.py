"""The formulas ``fluidgap fit`` rests on: Kaplan-Meier, Garwood intervals, the index of
dispersion and the gamma-Poisson day factor, each against a hand computation or SciPy."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from compare.formulas.counts import (dispersion_index, gamma_day_factor, garwood_interval,
                                     negative_binomial_loglik)
from compare.formulas.survival import kaplan_meier


def test_kaplan_meier_by_hand():
    # Kaplan and Meier (1958), the product-limit estimator, computed by hand:
    # events at 1, 3, 3, 6; censored at 2, 4, 7 (n = 7).
    #   t = 1: at risk 7, 1 event        S = 6/7
    #   t = 2: censored (at risk drops to 5)
    #   t = 3: at risk 5, 2 events       S = 6/7 * 3/5 = 18/35
    #   t = 4: censored (at risk drops to 2)
    #   t = 6: at risk 2, 1 event        S = 18/35 * 1/2 = 9/35
    #   t = 7: censored, S stays 9/35
    curve = kaplan_meier([1, 3, 3, 6], [2, 4, 7])
    t = [0.5, 1, 1.5, 2, 2.9, 3, 5, 6, 7, 100]
    expected = [1, 6 / 7, 6 / 7, 6 / 7, 6 / 7, 18 / 35, 18 / 35, 9 / 35, 9 / 35, 9 / 35]
    assert curve.at(t) == pytest.approx(expected, abs=1e-15)
    assert (curve.events, curve.censored) == (4, 3)
    # Greenwood (1926): var log S(3) = 1/(7*6) + 2/(5*3); the log(-log) interval
    # (Kalbfleisch and Prentice 1980) is S^exp(+-z sigma / log S), sigma = sqrt(that sum)
    s3 = 18 / 35
    sigma = math.sqrt(1 / (7 * 6) + 2 / (5 * 3))
    z = stats.norm.ppf(0.975)
    lo, hi = s3 ** math.exp(-z * sigma / math.log(s3)), s3 ** math.exp(z * sigma / math.log(s3))
    i = int(np.searchsorted(curve.times, 3.0))
    assert curve.low[i] == pytest.approx(lo, rel=1e-12)
    assert curve.high[i] == pytest.approx(hi, rel=1e-12)


def test_kaplan_meier_without_censoring_is_the_empirical_survival():
    x = [0.5, 1.0, 1.0, 2.0, 4.0]
    curve = kaplan_meier(x)
    assert curve.at([0.5, 1.0, 2.0, 4.0]) == pytest.approx([0.8, 0.4, 0.2, 0.0])


def test_garwood_interval_against_the_poisson_tails():
    # Garwood (1936): low solves P(X >= n | low) = a/2, high solves P(X <= n | high) = a/2;
    # the tails are scipy.stats.poisson's
    for n in (1, 5, 40):
        low, high = garwood_interval(n, 2.0)
        assert stats.poisson.sf(n - 1, low * 2.0) == pytest.approx(0.025, rel=1e-9)
        assert stats.poisson.cdf(n, high * 2.0) == pytest.approx(0.025, rel=1e-9)
    low, high = garwood_interval(0, 1.0)
    assert low == 0.0 and high == pytest.approx(-math.log(0.025), rel=1e-12)


def test_dispersion_index_by_hand():
    d, p = dispersion_index([2, 4, 6])  # mean 4, sample variance 4
    assert float(d) == pytest.approx(1.0)
    assert float(p) == pytest.approx(stats.chi2.sf(2.0, 2))  # = exp(-1)
    assert float(p) == pytest.approx(math.exp(-1))


def test_negative_binomial_loglik_against_scipy():
    x = np.array([3, 10, 7, 0, 22])
    m, v = 8.0, 0.3
    r = 1 / v
    ref = stats.nbinom.logpmf(x, r, r / (r + m)).sum()  # scipy's negative binomial
    assert negative_binomial_loglik(x, m, v) == pytest.approx(ref, rel=1e-12)
    assert negative_binomial_loglik(x, m, 0.0) == pytest.approx(stats.poisson.logpmf(x, m).sum())


def test_gamma_day_factor_recovers_a_known_cv():
    # Jongbloed and Koole (2001): totals Poisson(G m), G gamma of mean 1 and cv c.
    rng = np.random.default_rng(20240601)
    c, m, days = 0.2, 800.0, 300
    g = rng.gamma(1 / c**2, c**2, days)
    totals = rng.poisson(g * m)
    f = gamma_day_factor(totals)
    assert f.low < c < f.high
    assert f.high - f.low < 0.1  # narrow enough to fail for a wrong c
    # at the maximum the profile likelihood is flat: a check of the optimiser
    eps = 1e-4
    ll = lambda cv: negative_binomial_loglik(totals, totals.mean(), cv * cv)
    assert ll(f.cv) >= max(ll(f.cv - eps), ll(f.cv + eps))
    # the ends of the interval lie chi2(0.95; 1)/2 below the maximum
    cut = ll(f.cv) - stats.chi2.ppf(0.95, 1) / 2
    assert ll(f.low) == pytest.approx(cut, abs=1e-6)
    assert ll(f.high) == pytest.approx(cut, abs=1e-6)


def test_gamma_day_factor_of_poisson_days_includes_zero():
    rng = np.random.default_rng(7)
    f = gamma_day_factor(rng.poisson(500.0, 200))
    assert f.low == 0.0 and f.high < 0.05
