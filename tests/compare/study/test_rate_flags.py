"""The rate_uncertainty flag (compare/study/rate_flags.py): a day factor on the rates, not
queueing randomness, makes a target miss. It fires on a station built so that the day of
expected volume meets its goal and the bad days do not, stays quiet where the target holds
with the factor, and costs no second run when no source has a factor."""

from __future__ import annotations

import textwrap

import pytest

import compare.study.rate_flags as rate_flags
from compare.study.comparison import compare
from compare.study.flags import FLAG_KINDS
from fluid.loading import load_scenario_text

STATION = textwrap.dedent("""
    name: day factor check (invented)
    time_unit: min
    run: {horizon: 600, warmup: 60, replications: 150, seed: 5}
    sources:
      calls: {rate: 2.0, into: queue, random_rate: {dist: gamma, cv: 0.4}}
    pools:
      agents: 13
    places:
      queue: {patience: {dist: exponential, mean: 4.0}}
      talk:  {hold: {dist: exponential, mean: 5.0}}
    transitions:
      answer: {in: [queue, agents], out: [talk]}
      close:  {in: [talk], out: [agents]}
    targets:
      queue: {within: 0.5, goal: GOAL}
""")


def station(goal: float, overrides=()):
    return load_scenario_text(STATION.replace("GOAL", str(goal)), file="t.yaml",
                              overrides=overrides)


def test_flag_kind_is_listed():
    assert rate_flags.RATE_FLAG_KIND in FLAG_KINDS


def test_fires_when_only_the_bad_days_miss():
    c = compare(station(0.85), workers=2)
    (pair,) = c.rate.targets
    # with the factor the interval lies below the goal, without it (same seed) it does not
    assert pair.misses_with and not pair.misses_without
    assert pair.with_factor.high < 0.85 <= pair.without_factor.high
    (flag,) = c.flags_of("rate_uncertainty")
    assert flag.where == "queue"
    assert "rate uncertainty, not queueing randomness, makes the target miss" in flag.message
    assert c.rate.without.sources["calls"].get("rate_factor") is None
    doc = c.to_json()["rate_uncertainty"]
    assert doc["sources"] == {"calls": {"dist": "gamma", "cv": 0.4}}
    assert doc["checked"] and doc["targets"][0]["misses_with"]
    assert any("day factor with cv 0.4" in n for n in c.notes)


def test_quiet_when_the_target_holds_with_the_factor():
    c = compare(station(0.5, ["run.replications=20"]), workers=2)
    assert not c.flags_of("rate_uncertainty")
    assert c.rate.targets and not c.rate.targets[0].misses_with
    # the terminal shows the stress test even without a flag: both estimates and the share of
    # the days (replications) whose own service level met the goal, each way
    from compare.present.text import comparison_text

    text = comparison_text(c.scenario, c)
    assert "rate uncertainty (day factor per replication: calls cv 0.4" in text
    (pair,) = c.rate.targets
    section = text[text.index("rate uncertainty (day factor"):]
    row = next(line for line in section.splitlines() if line.startswith("queue "))
    assert f"{100 * pair.days_meeting_with:.3g} %" in row


def test_no_second_run_without_a_factor(monkeypatch):
    calls = []
    monkeypatch.setattr(rate_flags, "replicate", lambda *a, **k: calls.append(1))
    s = station(0.85, ["sources.calls.random_rate.cv=0", "run.replications=3",
                       "run.horizon=100", "run.warmup=10"])
    c = compare(s, workers=1)
    assert calls == [] and c.rate.without is None
    assert c.to_json()["rate_uncertainty"] == {"sources": {}, "checked": False, "targets": []}


def test_no_second_run_without_verdicts(monkeypatch):
    calls = []
    monkeypatch.setattr(rate_flags, "replicate", lambda *a, **k: calls.append(1))
    c = compare(station(0.85, ["run.replications=1", "run.horizon=100", "run.warmup=10"]),
                workers=1)
    assert calls == [] and not c.verdicts
