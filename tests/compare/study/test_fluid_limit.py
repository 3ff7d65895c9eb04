"""The fluid model with abandonment is the limit of the simulation on a day that varies in time:
as arrival rates and staff grow together by k, the simulated per-interval means, per unit of
volume, approach the fluid trajectory (the fluid limit of many-server queues with abandonment:
Mandelbaum, Massey and Reiman 1998; Liu and Whitt 2012). Fluctuations are of order sqrt(k)
against a volume of order k, so the relative gap should fall like k^(-1/2); the test asks for a
fitted decay exponent significantly below 0 (its 95 % interval below 0) and reports it.

Invented test scenario; slow (about a minute on 2 cores).
"""

from __future__ import annotations

import math

import pytest

from compare.study.comparison import compare
from compare.study.scale import fit_exponent, scale_scenario
from fluid import load_scenario_text

PEAK = """
name: morning peak with impatient callers (invented test scenario)
time_unit: min
run: {horizon: 180, warmup: 0, replications: 8, seed: 3}
sources:
  calls: {profile: {step: 30, rates: [2.0, 4.0, 6.0, 5.0, 3.0, 2.0]}, into: queue}
pools:
  agents: 8
places:
  queue: {patience: {dist: exponential, mean: 3.0}}
  talk: {hold: {dist: exponential, mean: 2.0}}
transitions:
  answer: {in: [queue, agents], out: [talk]}
  close: {in: [talk], out: [agents]}
"""


def _relative_gap(table, metric: str, name: str) -> float:
    rows = table[(table["metric"] == metric) & (table["name"] == name)]
    return float((rows["mean"] - rows["fluid"]).abs().sum() / rows["fluid"].abs().sum())


@pytest.mark.slow
def test_per_interval_gap_to_the_fluid_with_abandonment_shrinks_with_scale():
    base = load_scenario_text(PEAK)
    factors = (1, 4, 16, 64)
    queue_gaps, lost_gaps = [], []
    for k in factors:
        scaled, _ = scale_scenario(base, k)
        c = compare(scaled, reps=8, workers=2)
        assert "abandonment" in c.fluid.model
        queue_gaps.append(_relative_gap(c.transient, "queue", "queue"))
        lost_gaps.append(_relative_gap(c.transient, "abandoned", ""))
    for metric, gaps in (("queue", queue_gaps), ("abandoned", lost_gaps)):
        fit = fit_exponent(factors, gaps, metric)
        report = (f"{metric}: relative per-interval gaps {[round(g, 4) for g in gaps]}, fitted "
                  f"exponent {fit.exponent:.3f} [{fit.exponent - 1.96 * fit.stderr:.3f}, "
                  f"{fit.exponent + 1.96 * fit.stderr:.3f}]")
        print(report)
        assert math.isfinite(fit.stderr), report
        assert fit.exponent + 1.96 * fit.stderr < 0, report
        assert gaps[-1] < gaps[0], report
