"""Maximum-likelihood fits of the format's families, with and without censoring, against
``scipy.stats``' own fitting (``rv_continuous.fit``, on ``CensoredData`` for censored data)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from compare.formulas.survival import kaplan_meier
from compare.study.fit_families import choose_family, fit_family


def _lognormal(rng, mean, cv, n):
    s2 = math.log1p(cv * cv)
    return rng.lognormal(math.log(mean) - s2 / 2, math.sqrt(s2), n)


def test_uncensored_fits_agree_with_scipy():
    rng = np.random.default_rng(1)
    x = rng.gamma(2.5, 1.2, 3000)
    g = fit_family("gamma", x)
    a, _, scale = stats.gamma.fit(x, floc=0)  # scipy's MLE, location fixed at 0
    assert g.params["mean"] == pytest.approx(a * scale, rel=1e-5)
    assert g.params["cv"] == pytest.approx(1 / math.sqrt(a), rel=1e-5)
    ln = fit_family("lognormal", x)
    s, _, sc = stats.lognorm.fit(x, floc=0)
    assert ln.params["mean"] == pytest.approx(sc * math.exp(s * s / 2), rel=1e-5)
    assert ln.params["cv"] == pytest.approx(math.sqrt(math.expm1(s * s)), rel=1e-5)
    e = fit_family("exponential", x)
    assert e.params["mean"] == pytest.approx(x.mean(), rel=1e-7)  # the MLE is the mean
    # the KS statistic is scipy's for the fitted distribution
    ks = stats.kstest(x, stats.gamma(a, scale=scale).cdf)
    assert g.statistic == pytest.approx(ks.statistic, rel=1e-3)


def test_censored_weibull_agrees_with_scipy_censored_fit():
    rng = np.random.default_rng(2)
    patience = 2.0 / math.gamma(1.5) * rng.weibull(2.0, 4000)
    wait = rng.exponential(2.0, 4000)
    obs, cen = patience[patience < wait], wait[patience >= wait]
    w = fit_family("weibull", obs, cen, curve=kaplan_meier(obs, cen))
    k, _, scale = stats.weibull_min.fit(stats.CensoredData(uncensored=obs, right=cen), floc=0)
    assert w.params["shape"] == pytest.approx(k, rel=1e-4)
    assert w.params["mean"] == pytest.approx(scale * math.gamma(1 + 1 / k), rel=1e-4)
    lo, hi = w.intervals["shape"]
    assert lo < 2.0 < hi  # the true shape, fixed seed


def test_aic_chooses_the_true_family_and_erlang_has_whole_phases():
    rng = np.random.default_rng(3)
    choice = choose_family(_lognormal(rng, 4.0, 0.8, 4000))
    assert choice.chosen.family == "lognormal"
    erl = choose_family(rng.gamma(3, 1 / 3, 4000))
    assert erl.chosen.family == "erlang" and erl.chosen.params["k"] == 3
    exp = choose_family(rng.exponential(2.0, 3000))
    assert exp.chosen.family in ("exponential",)
    # AIC = 2 p - 2 log L as written in every fit
    for f in exp.fits:
        assert f.aic == pytest.approx(2 * f.n_params - 2 * f.loglik)


def test_wald_interval_of_the_exponential_mean_by_hand():
    # for the exponential on the log scale the observed information of log(mean) is n, so
    # the interval is mean * exp(+-z / sqrt(n)) (derived by hand)
    x = np.array([0.5, 1.5, 2.0, 3.0, 0.2, 0.8])
    f = fit_family("exponential", x)
    z = stats.norm.ppf(0.975)
    m = x.mean()
    assert f.intervals["mean"] == pytest.approx((m * math.exp(-z / math.sqrt(6)),
                                                 m * math.exp(z / math.sqrt(6))), rel=1e-5)
