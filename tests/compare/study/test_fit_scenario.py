"""The fitted scenario's text: YAML that loads, with a comment on every fitted value, the
day factor as ``random_rate``, and an existing scenario's fields filled."""

from __future__ import annotations

import pathlib
import warnings

import numpy as np
import pytest
import yaml

from compare.study.fit_counts import DailyCounts, fit_counts
from compare.study.fit_scenario import counts_scenario, fill_scenario
from compare.study.yaml_notes import to_yaml
from fluid.loading import load_scenario, load_scenario_text

ROOT = pathlib.Path(__file__).resolve().parents[3]


def _quiet_load(text):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return load_scenario_text(text)


def test_yaml_with_comments_reads_back_as_the_document():
    doc = {"name": "Fitted: a # b", "n": 3, "x": 0.1, "flag": True, "none": None,
           "yes": "yes", "list": [1.5, 2.0],
           "deep": {"a": {"b": [1, {"c": 2}]}, "empty": {}}}
    text = to_yaml(doc, header=["top"], above={("deep", "a"): ["above a"]},
                   after={("list", 0): "first", ("deep", "empty"): "nothing"})
    assert yaml.safe_load(text) == doc
    assert text.startswith("# top\n")
    assert "  # above a\n  a:" in text and "- 1.5  # first" in text


def _counts_fit(shape=25.0):
    rng = np.random.default_rng(5)
    g = rng.gamma(shape, 1 / shape, 40)  # cv 1/sqrt(shape): 0.2 by default
    counts = rng.poisson(np.outer(g, [30.0, 60.0, 45.0]))
    data = DailyCounts(file="counts.csv", counts=counts.astype(float),
                       days=[str(i) for i in range(40)], intervals=["a", "b", "c"],
                       starts=None, layout="wide")
    return fit_counts(data, 15.0)


def test_counts_scenario_loads_and_marks_its_placeholders():
    fit = _counts_fit()
    text = counts_scenario(fit, time_unit="min", stamped=False).text
    s = _quiet_load(text)
    assert s.sources["calls"].arrivals.rates == pytest.approx(tuple(fit.rates), rel=1e-5)
    assert text.count("PLACEHOLDER") == 2
    assert "Jongbloed and Koole" in text
    cv = float(f"{fit.factor.cv:.6g}")
    assert s.sources["calls"].random_rate is not None
    assert s.sources["calls"].random_rate.cv == pytest.approx(cv, rel=1e-5)


def test_a_day_factor_beyond_the_formats_bound_is_said_not_set():
    # gamma shape 0.25: cv 2, above the largest cv random_rate takes (1)
    fit = _counts_fit(shape=0.25)
    assert fit.factor.cv > 1
    text = counts_scenario(fit, time_unit="min", stamped=False).text
    s = _quiet_load(text)
    assert s.sources["calls"].random_rate is None
    assert "above the format's largest cv 1; not set" in text


def test_fill_an_existing_scenario_with_counts_keeps_the_rest():
    fit = _counts_fit()
    original = load_scenario(ROOT / "configs" / "single-station.yaml")
    filled = fill_scenario(original, counts_fit=fit, time_unit="min")
    s = _quiet_load(filled.text)
    assert s.sources["calls"].arrivals.rates == pytest.approx(tuple(fit.rates), rel=1e-5)
    assert s.places == original.places and s.pools == original.pools
    assert s.targets == original.targets


def test_fill_refuses_names_it_does_not_have():
    from fluid.errors import ScenarioError

    fit = _counts_fit()
    original = load_scenario(ROOT / "configs" / "utility-line.yaml")
    with pytest.raises(ScenarioError, match="--queue"):
        fill_scenario(original, counts_fit=fit, queue="nowhere", time_unit="min")
    with pytest.raises(ScenarioError, match="--source"):  # no source feeds front_queue
        fill_scenario(original, counts_fit=fit, queue="front_queue", time_unit="min")
    with pytest.raises(ScenarioError, match="time_unit"):
        fill_scenario(original, counts_fit=fit, source="calls", time_unit="s")
