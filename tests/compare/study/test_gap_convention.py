"""One sign convention for every gap (issue 13, item 5): simulated minus fluid, relative to the
fluid value, absolute where the fluid value is near zero."""

from __future__ import annotations

import math

import matplotlib

matplotlib.use("Agg")

import pandas as pd  # noqa: E402
import pytest  # noqa: E402

from compare.present.figures import rates_figure  # noqa: E402
from compare.present.text import _gap_rows  # noqa: E402
from compare.study.gap import GAP_CONVENTION, gap_between, gap_text  # noqa: E402
from desim import Estimate  # noqa: E402


def test_sign_and_relative_scale():
    g = gap_between(10.0, 8.96)
    assert g.kind == "relative"
    assert g.absolute == pytest.approx(-1.04)
    assert g.relative == pytest.approx(-0.104)
    assert gap_text(10.0, 8.96) == "-10.4 %"
    assert "simulated minus fluid" in GAP_CONVENTION


def test_near_zero_fluid_wait_gives_an_absolute_gap():
    # the case: a fluid wait of 0.00036 against a simulated one of 0.1126 read +31169 %
    g = gap_between(0.00036, 0.1126)
    assert g.kind == "absolute" and math.isnan(g.relative)
    assert g.absolute == pytest.approx(0.1126 - 0.00036)
    assert gap_text(0.00036, 0.1126) == "+0.112 (abs.)"
    assert gap_between(0.0, 0.0).kind == "absolute"
    assert gap_between(math.nan, 1.0).kind == "none"


def _figure_margin_texts(fig):
    return [t.get_text() for t in fig.axes[0].texts if t.get_text().endswith("%")]


def test_throughput_figure_and_table_have_the_same_sign():
    # fluid 10, simulated 8.96: the table reads -10.4 %; the figure read +11.6 % before
    est = Estimate(8.96, 8.9, 9.02, 5)
    fig = rates_figure({"answer": 10.0}, {"answer": est}, "min")
    frame = pd.DataFrame([{"transition": "answer", "fluid": 10.0, "mean": 8.96, "low": 8.9,
                           "high": 9.02, "n": 5}])
    table_gap = _gap_rows(frame, "transition")[0][-1]
    assert table_gap == "-10.4 %"
    assert _figure_margin_texts(fig) == [table_gap]


# the phase overlay's sign: tests/compare/study/test_staffing_search.py::test_phase_overlay_and_figure
