"""Figures of ``fluidgap fit``: the arrival profile with its intervals, the QQ plot of the
hold, and the Kaplan-Meier curve of patience against the fitted family.

Built as :class:`matplotlib.figure.Figure` objects (no pyplot), in the Okabe-Ito colours of
:mod:`compare.present.figures`, every colour doubled by a marker or line style. Times in the
scenario's time unit, passed in as a label.
"""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure

from .figures import OKABE_ITO, _new_figure

__all__ = ["profile_figure", "qq_figure", "survival_figure"]

#: Points a QQ plot shows at most (evenly spaced plotting positions).
QQ_POINTS = 400


def profile_figure(starts, step: float, rates, low, high, time_unit: str,
                   title: str = "Arrival profile") -> Figure:
    """Rates per interval as steps, with their intervals as bars (rates per ``time_unit``)."""
    fig = _new_figure(7.0, 3.4)
    ax = fig.subplots()
    starts = np.asarray(starts, dtype=float)
    mids = starts + step / 2
    ax.step(np.append(starts, starts[-1] + step), np.append(rates, rates[-1]), where="post",
            color=OKABE_ITO[5], label="fitted rate")
    ax.errorbar(mids, rates, yerr=[np.asarray(rates) - low, np.asarray(high) - rates],
                fmt="o", ms=3, color=OKABE_ITO[6], label="95 % interval (Poisson)")
    ax.set_xlabel(f"time of day ({time_unit})")
    ax.set_ylabel(f"arrivals per {time_unit}")
    ax.set_title(title)
    ax.legend(loc="best")
    return fig


def qq_figure(times, fit, time_unit: str, title: str = "Hold: QQ plot") -> Figure:
    """Observed quantiles of ``times`` against those of the fitted family ``fit`` (a
    :class:`compare.study.fit_families.FamilyFit`), with the line y = x."""
    x = np.sort(np.asarray(times, dtype=float))
    n = x.size
    probs = (np.arange(1, n + 1) - 0.5) / n
    if n > QQ_POINTS:
        pick = np.unique(np.linspace(0, n - 1, QQ_POINTS).round().astype(int))
        x, probs = x[pick], probs[pick]
    q = fit.distribution().ppf(probs)
    fig = _new_figure(4.6, 4.2)
    ax = fig.subplots()
    ax.plot(q, x, "o", ms=3, color=OKABE_ITO[5], label="observed")
    top = float(max(np.max(q), np.max(x)))
    ax.plot([0, top], [0, top], "--", color=OKABE_ITO[0], lw=1, label="y = x")
    ax.set_xlabel(f"{fit.family} quantile ({time_unit})")
    ax.set_ylabel(f"observed quantile ({time_unit})")
    ax.set_title(title)
    ax.legend(loc="upper left")
    return fig


def survival_figure(curve, fit, time_unit: str,
                    title: str = "Patience: Kaplan-Meier and the fitted family") -> Figure:
    """The Kaplan-Meier survival of patience with its pointwise interval, and the survival
    function of the fitted family ``fit`` (or the curve alone when ``fit`` is None)."""
    fig = _new_figure(6.0, 3.8)
    ax = fig.subplots()
    t = np.concatenate(([0.0], curve.times))
    s = np.concatenate(([1.0], curve.survival))
    ax.step(t, s, where="post", color=OKABE_ITO[5], label="Kaplan-Meier")
    # (no band where the interval is undefined: before the first event and where S = 0)
    lo = np.concatenate(([1.0], np.where(np.isnan(curve.low), curve.survival, curve.low)))
    hi = np.concatenate(([1.0], np.where(np.isnan(curve.high), curve.survival, curve.high)))
    ax.fill_between(t, lo, hi, step="post", color=OKABE_ITO[2], alpha=0.3,
                    label=f"{int(curve.level * 100)} % interval (Greenwood, log-log)")
    if fit is not None:
        grid = np.linspace(0.0, float(curve.times[-1]), 300)
        ax.plot(grid, fit.distribution().sf(grid), "--", color=OKABE_ITO[6],
                label=f"fitted {fit.family}")
    ax.set_xlabel(f"patience ({time_unit})")
    ax.set_ylabel("share still waiting")
    ax.set_ylim(0, 1.02)
    ax.set_title(title)
    ax.legend(loc="upper right")
    return fig
