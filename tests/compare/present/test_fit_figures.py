"""The figures of ``fluidgap fit`` draw the data they are given (exact, read back from the
artists)."""

from __future__ import annotations

import numpy as np
import pytest
from matplotlib.figure import Figure

from compare.formulas.survival import kaplan_meier
from compare.present.fit_figure import QQ_POINTS, profile_figure, qq_figure, survival_figure
from compare.study.fit_families import fit_family


def test_qq_figure_plots_sorted_times_against_fitted_quantiles():
    rng = np.random.default_rng(4)
    x = rng.exponential(2.0, 50)
    fit = fit_family("exponential", x)
    fig = qq_figure(x, fit, "min")
    assert isinstance(fig, Figure)
    line = fig.axes[0].lines[0]
    probs = (np.arange(1, 51) - 0.5) / 50
    assert line.get_ydata() == pytest.approx(np.sort(x))
    assert line.get_xdata() == pytest.approx(-fit.params["mean"] * np.log1p(-probs))
    big = qq_figure(rng.exponential(2.0, 5000), fit, "min")
    assert len(big.axes[0].lines[0].get_xdata()) <= QQ_POINTS


def test_survival_figure_draws_the_kaplan_meier_steps():
    curve = kaplan_meier([1, 3, 3, 6], [2, 4, 7])
    fig = survival_figure(curve, None, "min")
    steps = fig.axes[0].lines[0]
    assert list(steps.get_xdata()) == [0.0, *curve.times]
    assert list(steps.get_ydata()) == pytest.approx([1.0, *curve.survival])


def test_profile_figure_has_one_bar_per_interval():
    fig = profile_figure([0.0, 30.0, 60.0], 30.0, [1.0, 2.0, 1.5], [0.8, 1.7, 1.2],
                         [1.2, 2.3, 1.8], "min")
    assert fig.axes[0].get_ylabel() == "arrivals per min"
    assert len(fig.axes[0].containers[0].lines[0].get_xdata()) == 3
