"""Holding-time and patience families fitted by maximum likelihood, chosen by AIC.

The families are those of the scenario format (:mod:`fluid.distributions`) that have a
density on (0, inf): exponential {mean}, erlang {mean, k}, gamma {mean, cv}, lognormal
{mean, cv} and weibull {mean, shape}. Each is fitted by maximum likelihood with its location
at 0, on exactly observed times and (for patience) right-censored ones: the log-likelihood is
the sum of log f(x) over observed x plus log S(y) over censored y. The parameters are
estimated on the log scale of the format's own parameters (mean, cv or shape), and their
intervals are Wald intervals on that scale from the observed information (the numerical
Hessian of the log-likelihood at its maximum), so they stay positive. Erlang's k is a whole
number: the two whole numbers around the gamma's 1/cv^2 are tried and the better kept; its
interval is the mean's with k fixed.

The family chosen has the smallest AIC = 2 p - 2 log L (Akaike 1974), p the number of fitted
parameters; on a tie the simpler one in the order above. Each Erlang-k is counted as a
one-parameter family of its own (its mean), k being picked among the two candidates: counted
as a second parameter, an Erlang could never beat the gamma that contains it. Goodness of fit:
on uncensored times the Kolmogorov-Smirnov statistic and its p-value (optimistic: the
parameters were fitted on the same data); with censoring the largest gap between the
Kaplan-Meier curve and the fitted survival function. Times in the scenario's time unit.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np

from ..formulas.survival import SurvivalCurve

__all__ = ["FAMILIES", "FamilyFit", "FamilyChoice", "fit_family", "choose_family"]

#: The families in their order of preference on a tie of AIC (simplest first).
FAMILIES = ("exponential", "erlang", "gamma", "lognormal", "weibull")
#: The format's bounds (fluid.distributions: CV, WEIBULL_SHAPE, PHASES): fits outside are
#: left out, since the scenario could not hold them.
_CV_RANGE = (1e-6, 100.0)
_SHAPE_RANGE = (0.02, 1000.0)
_MAX_PHASES = 10**6


def _frozen(name: str, mean: float, second: float):
    """The scipy.stats distribution of family ``name`` with the format's parameters."""
    from scipy import stats

    if name == "exponential":
        return stats.expon(scale=mean)
    if name in ("gamma", "erlang"):
        shape = second if name == "erlang" else 1.0 / second**2
        return stats.gamma(shape, scale=mean / shape)
    if name == "lognormal":
        s2 = math.log1p(second**2)
        return stats.lognorm(math.sqrt(s2), scale=math.exp(math.log(mean) - s2 / 2))
    if name == "weibull":
        return stats.weibull_min(second, scale=mean / math.gamma(1 + 1 / second))
    raise ValueError(f"unknown family {name}")


def _second_key(name: str) -> str | None:
    return {"gamma": "cv", "lognormal": "cv", "weibull": "shape", "erlang": "k"}.get(name)


@dataclass(frozen=True)
class FamilyFit:
    """One family fitted: ``params`` the format's parameters (``mean`` and ``cv``, ``shape``
    or ``k``), ``intervals`` parameter -> (low, high) at ``level`` (Wald on the log scale, from
    the observed information), ``loglik``, ``aic``, ``n_params``, ``statistic`` (KS statistic,
    or the largest gap to Kaplan-Meier with censoring) and ``p_value`` (KS, uncensored only;
    None otherwise)."""

    family: str
    params: dict
    intervals: dict
    level: float
    loglik: float
    aic: float
    n_params: int
    statistic: float
    statistic_name: str
    p_value: float | None

    def spec(self) -> dict:
        """The distribution as the scenario format writes it (``{dist: ..., ...}``)."""
        return {"dist": self.family, **self.params}

    def distribution(self):
        """The fitted distribution as a frozen ``scipy.stats`` object."""
        key = _second_key(self.family)
        return _frozen(self.family, self.params["mean"], self.params[key] if key else 0.0)

    def to_json(self) -> dict:
        return {"family": self.family, "params": dict(self.params),
                "intervals": {k: list(v) for k, v in self.intervals.items()},
                "level": self.level, "loglik": self.loglik, "aic": self.aic,
                "n_params": self.n_params, self.statistic_name: self.statistic,
                "p_value": self.p_value}


@dataclass(frozen=True)
class FamilyChoice:
    """Every family fitted (``fits``, in :data:`FAMILIES` order, those that could be fitted),
    the ``chosen`` one (smallest AIC), the number of ``observed`` and ``censored`` times, and
    ``notes`` (families left out and why)."""

    fits: tuple[FamilyFit, ...]
    chosen: FamilyFit
    observed: int
    censored: int
    notes: tuple[str, ...] = field(default=())

    def to_json(self) -> dict:
        return {"chosen": self.chosen.family, "observed": self.observed,
                "censored": self.censored, "fits": [f.to_json() for f in self.fits],
                "notes": list(self.notes)}


def _negloglik(name: str, observed: np.ndarray, censored: np.ndarray):
    """The negative log-likelihood of family ``name`` as a function of (log mean,
    log second parameter) (erlang: of log mean, with k given as the second argument)."""

    def f(theta, k=None):
        mean = math.exp(theta[0])
        second = k if name == "erlang" else (math.exp(theta[1]) if len(theta) > 1 else 0.0)
        try:
            d = _frozen(name, mean, second)
        except (OverflowError, ValueError, ZeroDivisionError):
            return math.inf
        with np.errstate(all="ignore"):
            total = float(np.sum(d.logpdf(observed)))
            if censored.size:
                total += float(np.sum(d.logsf(censored)))
        return -total if math.isfinite(total) else math.inf

    return f


def _hessian(f, x: np.ndarray) -> np.ndarray:
    """Central-difference Hessian of ``f`` at ``x`` (steps 1e-4 on the log scale)."""
    n = x.size
    h = 1e-4
    out = np.empty((n, n))
    for i in range(n):
        for j in range(i, n):
            ei, ej = np.eye(n)[i] * h, np.eye(n)[j] * h
            v = (f(x + ei + ej) - f(x + ei - ej) - f(x - ei + ej) + f(x - ei - ej)) / (4 * h * h)
            out[i, j] = out[j, i] = v
    return out


def _start(name: str, observed: np.ndarray, censored: np.ndarray) -> tuple[float, float]:
    """Starting (mean, second parameter): the maximum-likelihood fit of the family to the
    observed and censored times taken together as if all observed (exact without censoring:
    closed forms for the exponential and lognormal, scipy.stats' own fit with location 0 for
    the gamma and the Weibull); the censored likelihood then moves it."""
    from scipy import stats

    x = np.concatenate([observed, censored[censored > 0]]) if censored.size else observed
    mean = float(np.mean(x))
    if name == "exponential":
        return mean, 0.0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        if name == "lognormal":
            logs = np.log(x)
            s2 = float(np.var(logs))
            return math.exp(float(np.mean(logs)) + s2 / 2), math.sqrt(math.expm1(s2))
        if name == "gamma":
            a, _, scale = stats.gamma.fit(x, floc=0)
            return a * scale, 1 / math.sqrt(a)
        k, _, scale = stats.weibull_min.fit(x, floc=0)
        return scale * math.gamma(1 + 1 / k), k


def _optimise(f, x0: np.ndarray) -> np.ndarray:
    """The minimum of ``f`` from ``x0``: BFGS, and Nelder-Mead first when BFGS alone fails."""
    from scipy import optimize

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        res = optimize.minimize(f, x0, method="BFGS", options={"gtol": 1e-6})
        if res.success and np.isfinite(res.fun):
            return res.x
        nm = optimize.minimize(f, x0, method="Nelder-Mead",
                               options={"xatol": 1e-8, "fatol": 1e-9, "maxiter": 4000})
        res2 = optimize.minimize(f, nm.x, method="BFGS", options={"gtol": 1e-6})
    best = min((res, nm, res2), key=lambda r: r.fun if np.isfinite(r.fun) else math.inf)
    return best.x


def _ks(fit_dist, observed: np.ndarray, censored: np.ndarray,
        curve: SurvivalCurve | None) -> tuple[float, float | None, str]:
    if censored.size == 0:
        from scipy import stats

        res = stats.kstest(observed, fit_dist.cdf)
        return float(res.statistic), float(res.pvalue), "ks_statistic"
    # the Kaplan-Meier curve against the fitted survival, both sides of every step
    t = curve.times
    before = np.concatenate(([1.0], curve.survival[:-1]))
    s = fit_dist.sf(t)
    gap = float(max(np.max(np.abs(curve.survival - s)), np.max(np.abs(before - s))))
    return gap, None, "km_gap"


def fit_family(name: str, observed, censored=(), *, level: float = 0.95,
               curve: SurvivalCurve | None = None,
               gamma: FamilyFit | None = None) -> FamilyFit | None:
    """Fit family ``name`` (one of :data:`FAMILIES`) to ``observed`` times (> 0) and
    right-``censored`` ones (>= 0) by maximum likelihood; None when the fit leaves the
    format's bounds or fails. ``curve``: the Kaplan-Meier curve of the same data (needed with
    censoring, for the goodness-of-fit gap); ``gamma``: the gamma fit of the same data, which
    the Erlang starts from (fitted here when None)."""
    from scipy import stats

    x = np.asarray(observed, dtype=float)
    c = np.asarray(censored, dtype=float)
    f = _negloglik(name, x, c)
    z = stats.norm.ppf(0.5 + level / 2)
    if name == "exponential":
        mean0 = _start(name, x, c)[0]
        theta = (np.array([math.log(mean0)]) if c.size == 0  # the MLE is the mean
                 else _optimise(lambda t: f(t), np.array([math.log(mean0)])))
        params = {"mean": math.exp(theta[0])}
        nll = f(theta)
    elif name == "erlang":
        g = gamma if gamma is not None else fit_family("gamma", x, c, level=level,
                                                        curve=curve)
        if g is None:
            return None
        guess = 1.0 / g.params["cv"] ** 2
        best = None
        for k in sorted({max(1, math.floor(guess)), max(1, math.ceil(guess))}):
            if k > _MAX_PHASES:
                continue
            th = (np.array([math.log(float(np.mean(x)))]) if c.size == 0  # MLE: the mean
                  else _optimise(lambda t, k=k: f(t, k), np.array([math.log(g.params["mean"])])))
            v = f(th, k)
            if best is None or v < best[0]:
                best = (v, k, th)
        if best is None or best[1] == 1:  # erlang with one phase is the exponential
            return None
        nll, k, theta = best
        params = {"mean": math.exp(theta[0]), "k": int(k)}
        f = (lambda t, k=k, g_=f: g_(t, k))
    else:
        mean0, second0 = _start(name, x, c)
        # (without censoring the start is already the MLE: BFGS only polishes it)
        theta = _optimise(f, np.array([math.log(mean0), math.log(second0)]))
        key = _second_key(name)
        params = {"mean": math.exp(theta[0]), key: math.exp(theta[1])}
        low, high = _CV_RANGE if key == "cv" else _SHAPE_RANGE
        if not low <= params[key] <= high:
            return None
        nll = f(theta)
    if not math.isfinite(nll):
        return None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        info = _hessian(f, np.asarray(theta, dtype=float))
        try:
            cov = np.linalg.inv(info)
        except np.linalg.LinAlgError:
            cov = np.full_like(info, np.nan)
    keys = ["mean"] + ([_second_key(name)] if name not in ("exponential", "erlang") else [])
    intervals = {}
    for i, key in enumerate(keys):
        se = math.sqrt(cov[i, i]) if cov[i, i] > 0 else math.nan
        intervals[key] = (math.exp(theta[i] - z * se), math.exp(theta[i] + z * se))
    n_params = 1 if name in ("exponential", "erlang") else 2
    fit = FamilyFit(family=name, params=params, intervals=intervals, level=level,
                    loglik=-nll, aic=2 * n_params + 2 * nll, n_params=n_params,
                    statistic=math.nan, statistic_name="", p_value=None)
    stat, p, stat_name = _ks(fit.distribution(), x, c, curve)
    return FamilyFit(**{**fit.__dict__, "statistic": stat, "statistic_name": stat_name,
                        "p_value": p})


def choose_family(observed, censored=(), *, level: float = 0.95,
                  families=FAMILIES, curve: SurvivalCurve | None = None) -> FamilyChoice:
    """Fit every family of ``families`` and choose by AIC (see the module docstring); at
    least two observed times are needed."""
    x = np.asarray(observed, dtype=float)
    c = np.asarray(censored, dtype=float)
    if x.size < 2:
        raise ValueError("a family fit needs at least two observed times")
    fits, notes = [], []
    gamma = None
    order = {name: i for i, name in enumerate(FAMILIES)}
    # the gamma before the Erlang, which starts from it
    for name in sorted(families, key=lambda n: (n == "erlang", order[n])):
        fit = fit_family(name, x, c, level=level, curve=curve, gamma=gamma)
        if name == "gamma":
            gamma = fit
        if fit is None:
            notes.append(f"{name}: not fitted (its estimate leaves the format's bounds, or "
                         "it repeats the exponential)" if name != "exponential"
                         else "exponential: not fitted")
        else:
            fits.append(fit)
    if not fits:
        raise ValueError("no family could be fitted")
    fits.sort(key=lambda f: order[f.family])
    chosen = min(fits, key=lambda f: (round(f.aic, 9), order[f.family]))
    return FamilyChoice(fits=tuple(fits), chosen=chosen, observed=int(x.size),
                        censored=int(c.size), notes=tuple(notes))
