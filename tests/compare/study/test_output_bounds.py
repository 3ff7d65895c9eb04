"""The total output rate is a rate (>= 0): its interval is cut at 0 (issue 13, item 4)."""

from __future__ import annotations

import pytest


def test_the_total_output_rate_interval_never_goes_below_zero():
    # a rate is >= 0: four replications with rates 0, 0, 0, 0.3 give a plain t interval of
    # 0.075 +- 3.18 * 0.15 / 2, whose low end (-0.164) the estimate must cut at 0
    from compare.study.gaps import simulated_output
    from fluid import load_scenario_text

    s = load_scenario_text(
        "sources: {calls: {rate: 1, into: q}}\npools: {a: 1}\nplaces: {q: {}, t: {hold: 1}}\n"
        "transitions: {go: {in: [q, a], out: [t]}, done: {in: [t], out: [a]}}\n")

    class Raw:
        def raw(self, kind, name, metric):
            assert (kind, name, metric) == ("transition", "done", "rate")
            return [0.0, 0.0, 0.0, 0.3]

    est = simulated_output(s, Raw())
    assert est.mean == pytest.approx(0.075)
    assert est.low == 0.0 and est.high > 0.3
