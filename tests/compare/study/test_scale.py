"""Scale study (compare.study.scale): scaling the scenario, the exponent fit, and the demo's decay."""

from __future__ import annotations

import json
import math
import pathlib

import numpy as np
import pytest

from compare.study.scale import fit_exponent, scale_scenario, scale_study
from fluid import load_scenario, load_scenario_text
from fluid.analysis import throughput
from fluid.errors import ScenarioError

ROOT = pathlib.Path(__file__).resolve().parents[3]
DEMO = ROOT / "compare" / "demo" / "utility-line.yaml"


def test_scaling_the_demo_doubles_rates_and_staff():
    # Hand: the fluid counter equations are positively homogeneous in (arrival rates, staff), so
    # doubling both doubles every fluid rate and leaves every load unchanged
    s = load_scenario(DEMO)
    s2, notes = scale_scenario(s, 2)
    assert notes == ()
    assert s2.sources["calls"].arrivals.rate == 8.0
    assert {p: s2.pools[p].staff for p in s2.pools} == {"front_desk": 28, "supervisors": 4,
                                                        "billing_desk": 16}
    assert s2.pools["billing_desk"].priority == ("billing_answer", "callback_start")
    f1, f2 = throughput(s), throughput(s2)
    for q, r in f1.rates.items():
        assert f2.rates[q] == pytest.approx(2 * r, rel=1e-6, abs=1e-9)
    for p, load in f1.load.items():
        assert f2.load[p] == pytest.approx(load, rel=1e-9)


def test_staff_rounding_is_reported():
    # Hand: × 1.25: front_desk 14 → 17.5 → 18 (half up), supervisors 2 → 2.5 → 3,
    # billing_desk 8 → 10 (exact, no note)
    s2, notes = scale_scenario(load_scenario(DEMO), 1.25)
    assert s2.pools["front_desk"].staff == 18 and s2.pools["supervisors"].staff == 3
    assert s2.pools["billing_desk"].staff == 10
    assert len(notes) == 2 and "front_desk" in notes[0] and "supervisors" in notes[1]


def test_profiles_and_schedules_are_scaled():
    s = load_scenario(ROOT / "configs" / "day-with-shifts.yaml")
    s3, _ = scale_scenario(s, 3)
    assert s3.sources["calls"].arrivals.rates == pytest.approx(
        [3 * r for r in s.sources["calls"].arrivals.rates])
    staff = s.pools["agents"].schedule.staff
    assert s3.pools["agents"].schedule.staff == tuple(3 * x for x in staff)


def test_trace_source_cannot_be_scaled(tmp_path):
    (tmp_path / "arrivals.csv").write_text("0.5\n1.0\n2.5\n")
    s = load_scenario_text("""
name: traced (invented)
time_unit: min
sources:
  walkins: {trace: arrivals.csv, into: queue}
pools:
  agents: 2
places:
  queue: {}
  talk: {hold: 1.0}
transitions:
  answer: {in: [queue, agents], out: [talk]}
  close: {in: [talk], out: [agents]}
""", file="traced.yaml", base_dir=str(tmp_path))
    with pytest.raises(ScenarioError, match="sources.walkins") as err:
        scale_scenario(s, 2)
    assert "trace" in str(err.value)


def test_fit_exponent_recovers_a_power_law():
    # Hand: gap = 3·k^(−1/2) exactly gives slope −1/2, intercept log 3 and zero residuals
    k = [1, 2, 4, 8, 16]
    fit = fit_exponent(k, [3 * x ** -0.5 for x in k], "g")
    assert fit.exponent == pytest.approx(-0.5, abs=1e-12)
    assert fit.intercept == pytest.approx(math.log(3), abs=1e-12)
    assert fit.stderr == pytest.approx(0.0, abs=1e-12)
    assert fit.points == 5


def test_fit_exponent_standard_error_and_skipped_points():
    # Hand: points (log k, y) = (0, 0), (log 2, 1), (log 4, 0): slope 0 by symmetry about log 2;
    # residuals −1/3, 2/3, −1/3 → s² = (2/3)/1, Sxx = 2 (log 2)², se = sqrt(1/3)/log 2
    fit = fit_exponent([1, 2, 4, 8], [1.0, math.e, 1.0, 0.0], "g")
    assert fit.points == 3
    assert fit.exponent == pytest.approx(0.0, abs=1e-12)
    assert fit.stderr == pytest.approx(math.sqrt(1 / 3) / math.log(2), rel=1e-12)
    assert any("factor 8" in n and "left out" in n for n in fit.notes)
    two = fit_exponent([1, 2], [1.0, 0.5], "g")
    assert two.exponent == pytest.approx(-1.0) and math.isnan(two.stderr)
    none = fit_exponent([1, 2], [0.0, -1.0], "g")
    assert math.isnan(none.exponent) and none.points == 0


def test_scale_study_gap_shrinks_on_the_demo():
    # With volume and staff scaled together the fluid model becomes exact (the fluid limit), so
    # the demo's throughput shortfall and abandonment gap must shrink: fitted exponent
    # significantly below 0 (exponent + 1.96·stderr < 0). Same seed for every factor (CRN).
    s = load_scenario(DEMO)
    r = scale_study(s, (1, 2, 4, 8, 16), reps=6, horizon=600, warmup=60, seed=7, workers=2)
    t = r.table
    assert list(t["factor"]) == [1, 2, 4, 8, 16]
    assert np.allclose(t["fluid_output"], 4.0 * t["factor"])
    for metric in ("throughput_shortfall", "abandonment_gap"):
        fit = r.fits[metric]
        assert fit.points == 5, fit.notes
        assert fit.exponent + 1.96 * fit.stderr < 0, r.fits_frame()
    doc = r.to_json()
    json.dumps(doc, allow_nan=False)
    assert set(doc["fits"]) == {"throughput_shortfall", "abandonment_gap", "max_transition_gap"}
    assert len(doc["table"]) == 5


def test_square_root_staffing_by_hand():
    # Hand: one station, λ = 1/min, hold 4 min: offered work R = 4 agents; N = 6 gives
    # β = (6 − 4)/√4 = 1. At k = 4: R_4 = 16, N_4 = 16 + 1·√16 = 20 (exact, no rounding note);
    # at k = 2: R_2 = 8, N_2 = 8 + √8 = 10.83 → 11 (rounded, noted); k = 1 is the scenario.
    from compare.study.station import station_scenario

    s = station_scenario(6, 1.0, 4.0)
    s4, notes4 = scale_scenario(s, 4, "sqrt")
    assert s4.pools["agents"].staff == 20 and notes4 == ()
    assert s4.sources[next(iter(s4.sources))].arrivals.rate == 4.0
    s2, notes2 = scale_scenario(s, 2, "sqrt")
    assert s2.pools["agents"].staff == 11 and "rounded" in notes2[0]
    s1, _ = scale_scenario(s, 1, "sqrt")
    assert s1.pools["agents"].staff == 6
    with pytest.raises(ValueError, match="staffing"):
        scale_scenario(s, 2, "cubic")


def _sqrt_station_study(**kw):
    from compare.study.station import station_scenario

    # invented station: λ = 8/min, hold 1 min, mean patience 1 min, 10 agents (R = 8, β = 0.71)
    s = station_scenario(10, 8.0, 1.0, patience_mean=1.0)
    return scale_study(s, (1, 2, 4, 8, 16), reps=10, horizon=400, warmup=40, seed=3, workers=2,
                       staffing="sqrt", **kw)


def test_bootstrap_interval_is_reproducible_and_covers_the_square_root_exponent():
    # Square-root (QED) staffing: relative gaps of order k^-1/2 (Halfin and Whitt 1981; with
    # abandonment Garnett, Mandelbaum and Reiman 2002), so each exponent's bootstrap interval
    # (fixed seed) must cover -1/2; the interval also contains its own point estimate, and the
    # same study gives the same interval.
    r = _sqrt_station_study()
    again = _sqrt_station_study()
    assert r.prediction["exponent"] == -0.5 and r.prediction["relation"] == "about"
    for m, f in r.fits.items():
        assert f.resamples >= 100
        assert f.low <= f.exponent <= f.high, (m, f)
        assert f.low <= -0.5 <= f.high, (m, f)
        g = again.fits[m]
        assert (g.low, g.high, g.resamples) == (f.low, f.high, f.resamples)
    doc = json.loads(json.dumps(r.to_json()))
    assert doc["staffing"] == "sqrt"
    assert doc["fits"]["abandonment_gap"]["bootstrap_low"] == pytest.approx(
        r.fits["abandonment_gap"].low)


def test_prediction_follows_the_regime_and_the_text_never_assumes_it():
    from compare.present.text import scale_text
    from compare.study.scale import predicted_exponent

    assert predicted_exponent("linear", 0.9)["relation"] == "below"
    assert predicted_exponent("linear", 1.2)["relation"] == "at most"
    assert "Whitt 2006" in predicted_exponent("linear", 1.2)["statement"]
    assert predicted_exponent("sqrt", 0.9)["exponent"] == -0.5
    r = scale_study(load_scenario(DEMO), (1, 2, 4), reps=3, seed=7, workers=2)
    text = scale_text(r)
    assert "about -1/2 expected" not in text
    assert "staffing: linear" in text and "bootstrap 95 % interval" in text
    assert r.prediction["relation"] == "below"  # the demo's loads are all below 1
