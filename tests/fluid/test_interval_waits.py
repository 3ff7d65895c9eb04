"""The fluid mean wait by arrival interval (fluid/interval_waits.py), the fluid counterpart of
the simulated per-interval ``wait``: checked against Whitt's (2006) stationary fluid queue and
against Little's law on the fluid's own queue (total time waited = area under the queue, when
everything has left by the end)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from fluid import load_scenario_text
from fluid.counters import COUNTERS, WITH_ABANDONMENT, integrate_counters
from fluid.interval_waits import interval_mean_wait
from fluid.places import queue_average
from fluid.service_level import place_curves

from .test_dynamics import station


def test_stationary_overloaded_queue_waits_as_whitt_says():
    # Whitt (2006), recomputed in shared/references.md: lambda = 110, s = 100, mu = 1, theta =
    # 0.5: the served wait w = ln(1.1)/0.5, and every job leaves after min(P, w), whose mean is
    # the integral of e^(-theta t) over [0, w] = (1 - 1/1.1)/0.5 = 0.181818 (= q/lambda = 20/110,
    # Little's law)
    s = load_scenario_text(station(110.0, 100, "1.0", "{dist: exponential, mean: 2.0}",
                                   horizon=60.0))
    sol = integrate_counters(s, dt=0.01, horizon=60.0, model=WITH_ABANDONMENT)
    assert interval_mean_wait(s, sol, "queue", 40.0, 50.0) == pytest.approx(
        (1 - 1 / 1.1) / 0.5, rel=2e-3)


@pytest.mark.parametrize("patience, model", [
    ("{dist: exponential, mean: 3.0}", WITH_ABANDONMENT),   # cohorts, with abandonment
    ("{dist: weibull, mean: 3.0, shape: 1.5}", WITH_ABANDONMENT),
    (None, COUNTERS),                                       # first in, first out, no patience
])
def test_waits_by_arrival_add_up_to_the_area_under_the_queue(patience, model):
    # a peak that overloads 8 agents for 40 min, then a long quiet end in which all drains: the
    # waits of the fluid arriving in each interval, times its amount, sum to the area under the
    # fluid queue (Little's law, exact for fluid that has all left)
    text = station(None, 8, "{dist: exponential, mean: 4.0}",
                   patience or "{dist: exponential, mean: 3.0}",
                   profile=(20, [1.0, 3.0, 3.0, 0.5, 0.5, 0.5, 0.5, 0.5, 0.5, 0.5]),
                   horizon=200.0)
    if patience is None:
        text = text.replace("queue: {patience: {dist: exponential, mean: 3.0}}", "queue: {}")
    s = load_scenario_text(text)
    sol = integrate_counters(s, dt=0.02, horizon=200.0, model=model)
    assert sol.waiting["queue"][-1] < 1e-9  # (everything has left)
    avail = place_curves(s, sol, "queue")[0] + sol.abandoned.get("queue", 0.0)
    total, step = 0.0, 10.0
    for k in range(20):
        a, b = k * step, (k + 1) * step
        amount = float(np.interp(b, sol.times, avail) - np.interp(a, sol.times, avail))
        w = interval_mean_wait(s, sol, "queue", a, b)
        if amount > 0 and not math.isnan(w):
            total += w * amount
    area = queue_average(sol, "queue", 0.0, 200.0) * 200.0
    assert area > 5.0  # (a real queue, not a rounding)
    assert total == pytest.approx(area, rel=2e-2)
