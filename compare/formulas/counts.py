"""Counts of arrivals: exact Poisson intervals, the index of dispersion, and the gamma-Poisson
(negative binomial) mixture of a day-level random factor.

* Garwood (1936), "Fiducial limits for the Poisson distribution", Biometrika 28: for n events
  over an exposure T, the rate lies in [chi2(a/2; 2n) / 2T, chi2(1 - a/2; 2n + 2) / 2T]
  (the lower end 0 when n = 0).
* The index of dispersion D = s^2 / mean of counts (sample variance, n - 1 in the divisor):
  1 for Poisson counts; (k - 1) D follows chi2(k - 1) under the Poisson hypothesis for k counts
  (Fisher's dispersion test), so a small upper tail probability says "overdispersed".
* Jongbloed and Koole (2001), "Managing uncertainty in call centres using Poisson mixtures",
  Applied Stochastic Models in Business and Industry 17: a day's arrivals are Poisson with the
  rate G * lambda, G a random factor of mean 1; with G gamma of coefficient of variation c the
  daily total is negative binomial with mean m and variance m + c^2 m^2. Fitted here by maximum
  likelihood (the mean's estimate is the sample mean for any c) with a profile-likelihood
  interval for c; c = 0 is the Poisson limit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["garwood_interval", "dispersion_index", "DayFactor", "gamma_day_factor",
           "negative_binomial_loglik"]


def garwood_interval(counts, exposure, level: float = 0.95) -> tuple[np.ndarray, np.ndarray]:
    """Exact (Garwood) interval of Poisson rates: ``counts`` events over ``exposure`` (same
    shape or scalar; the rate's unit is 1 / exposure's unit)."""
    from scipy import stats

    n = np.asarray(counts, dtype=float)
    exposure = np.asarray(exposure, dtype=float)
    a = 1.0 - level
    low = np.where(n > 0, stats.chi2.ppf(a / 2, 2 * np.maximum(n, 1e-300)) / 2, 0.0)
    high = stats.chi2.ppf(1 - a / 2, 2 * n + 2) / 2
    return low / exposure, high / exposure


def dispersion_index(counts, axis: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """``(D, p)``: the index of dispersion of ``counts`` along ``axis`` (sample variance over
    mean; nan where the mean is 0) and Fisher's upper tail probability P(chi2(k-1) >= (k-1) D)
    of a Poisson sample showing that much dispersion."""
    from scipy import stats

    x = np.asarray(counts, dtype=float)
    k = x.shape[axis]
    if k < 2:
        raise ValueError("the index of dispersion needs at least two counts")
    mean = x.mean(axis=axis)
    var = x.var(axis=axis, ddof=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        d = np.where(mean > 0, var / np.where(mean > 0, mean, 1.0), np.nan)
    p = np.where(np.isfinite(d), stats.chi2.sf((k - 1) * np.nan_to_num(d), k - 1), np.nan)
    return d, p


def negative_binomial_loglik(totals, mean: float, v: float) -> float:
    """Log-likelihood of counts ``totals`` under a Poisson(G m) mixture with G gamma of mean 1
    and variance ``v`` = c^2 (``v`` = 0: plain Poisson)."""
    from scipy import special

    x = np.asarray(totals, dtype=float)
    if mean <= 0:
        return 0.0 if not x.any() else -math.inf
    poisson = float(np.sum(x * math.log(mean) - mean - special.gammaln(x + 1)))
    if v <= 0:
        return poisson
    r = 1.0 / v
    if r > 1e12 * max(1.0, float(x.max(initial=0.0))):  # indistinguishable from Poisson here
        return poisson
    return float(np.sum(special.gammaln(x + r) - special.gammaln(r) - special.gammaln(x + 1)
                        - r * np.log1p(mean / r) + x * (math.log(mean) - math.log(r + mean))))


@dataclass(frozen=True)
class DayFactor:
    """A fitted gamma day factor: ``cv`` (maximum likelihood) with its profile-likelihood
    interval [``low``, ``high``] at ``level``, ``moments_cv`` (method of moments:
    c^2 = (s^2 - m) / m^2, cut at 0), the mean daily total ``mean``, the number of ``days``,
    and the log-likelihood gain over Poisson ``loglik_gain``."""

    cv: float
    low: float
    high: float
    level: float
    moments_cv: float
    mean: float
    days: int
    loglik_gain: float


def gamma_day_factor(totals, level: float = 0.95) -> DayFactor:
    """Fit the gamma day factor of Jongbloed and Koole (2001) to daily totals (at least two
    days): the coefficient of variation c of a mean-1 gamma multiplier of the whole day's
    profile, by maximum likelihood of the negative binomial, with the profile-likelihood
    interval {c : 2 (l_max - l(c)) <= chi2(level; 1)}."""
    from scipy import optimize, stats

    x = np.asarray(totals, dtype=float)
    if x.size < 2:
        raise ValueError("a day factor needs at least two days")
    m = float(x.mean())
    s2 = float(x.var(ddof=1))
    v_mom = max((s2 - m) / m**2, 0.0) if m > 0 else 0.0

    def loglik(v: float) -> float:
        return negative_binomial_loglik(x, m, v)

    l0 = loglik(0.0)
    v_hat, l_hat = 0.0, l0
    top = max(4.0 * v_mom, 1.0 / max(m, 1.0), 1e-6)
    if m > 0:
        while loglik(top) > loglik(top / 2) and top < 1e4:  # the maximum lies beyond: widen
            top *= 4
        res = optimize.minimize_scalar(lambda u: -loglik(u * u), bounds=(0.0, math.sqrt(top)),
                                       method="bounded", options={"xatol": 1e-10})
        if -res.fun > l_hat:
            v_hat, l_hat = float(res.x) ** 2, float(-res.fun)
    cut = l_hat - stats.chi2.ppf(level, 1) / 2
    c_hat = math.sqrt(v_hat)

    def excess(c: float) -> float:
        return loglik(c * c) - cut

    low = 0.0 if excess(0.0) >= 0 else optimize.brentq(excess, 0.0, c_hat, xtol=1e-12)
    hi = max(2 * c_hat, 1e-3)
    while excess(hi) > 0 and hi < 1e3:
        hi *= 2
    high = optimize.brentq(excess, c_hat, hi, xtol=1e-12) if excess(hi) < 0 else math.inf
    return DayFactor(cv=c_hat, low=float(low), high=float(high), level=level,
                     moments_cv=math.sqrt(v_mom), mean=m, days=int(x.size),
                     loglik_gain=l_hat - l0)
