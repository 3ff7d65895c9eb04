"""Bounded work in desim (the hardening issue): the limits of SimulationSettings (replications,
intervals per run), the arrivals estimate refused before a run, and the engine stopping a run
whose simulated clock no longer advances."""

from __future__ import annotations

import pickle
import textwrap

import pytest

from desim.engine import ClockStopped, Engine
from desim.net import build_net
from desim.run import _events_at_one_instant, run_replication
from desim.settings import (SettingsError, check_workload, expected_arrivals,
                            resolve_settings)
from fluid.loading import load_scenario_text
from fluid.scenario import Limits, RunSettings

RUN = RunSettings(horizon=100.0, warmup=10.0, replications=3, seed=1)


def test_replications_beyond_the_limit_are_refused_unless_raised():
    with pytest.raises(SettingsError) as info:
        resolve_settings(RUN, reps=100_000_000)
    assert info.value.setting == "replications"
    assert info.value.for_flag("fluidgap simulate") == (
        "fluidgap simulate: --reps must be at most 10,000, the limit (raise it with "
        "--max-replications) (got 100000000)")
    raised = resolve_settings(RUN, reps=20_000, limits=Limits(replications=20_000))
    assert raised.replications == 20_000
    assert raised.with_changes(seed=2).limits.replications == 20_000  # variants keep it


def test_intervals_per_run_are_bounded():
    with pytest.raises(SettingsError, match=r"1e-06 cuts the horizon 100 into 1e\+08 intervals"
                                            ".*--max-intervals"):
        resolve_settings(RUN, interval=1e-6)
    assert resolve_settings(RUN, interval=0.01).interval == 0.01  # 10,000 intervals: the limit
    assert resolve_settings(RUN, interval=1e-3, limits=Limits(intervals=10**5)).interval == 1e-3


def test_huge_numbers_are_refused_with_a_short_message():
    for kw in ({"seed": 10**400}, {"workers": 10**6}, {"horizon": 10**400}):
        with pytest.raises(SettingsError) as info:
            resolve_settings(RUN, **kw)
        assert len(str(info.value)) < 120


def test_the_arrivals_estimate_is_checked_before_a_run():
    s = load_scenario_text(STATION)
    settings = resolve_settings(s.run, horizon=1e6)
    # rate 2 per min × 1e6 min × 3 replications × 2 runs per replication = 1.2e7 arrivals
    assert expected_arrivals(s, 1e6) == 2e6
    assert check_workload(2e6, settings, runs=2) == 1.2e7
    with pytest.raises(SettingsError) as info:
        check_workload(2e6, settings.with_changes(limits=Limits(arrivals=1e7)), runs=2)
    assert info.value.setting == "horizon" and "--max-arrivals" in str(info.value)
    assert str(info.value).startswith("horizon 1e+06 with 3 replications would simulate")
    assert "about 1.2e+07 arrivals (2e+06 per run × 2 runs per replication)" in str(info.value)


def test_settings_errors_survive_a_worker_process():
    exc = pickle.loads(pickle.dumps(SettingsError("horizon", "must be > 0 (got -1)")))
    assert (exc.setting, exc.problem) == ("horizon", "must be > 0 (got -1)")
    exc = pickle.loads(pickle.dumps(ClockStopped("x.yaml: the simulated clock stopped")))
    assert str(exc) == "x.yaml: the simulated clock stopped"


def test_one_run_checks_its_settings_without_the_callers_limits():
    s = load_scenario_text(STATION)
    r = run_replication(s, 0, horizon=2.0, warmup=0.0, interval=1e-4)  # 20,000 intervals
    assert r.intervals["interval"].max() == 19_999


STATION = """
name: limits station (invented)
run: {horizon: 100, warmup: 10, replications: 3, seed: 1}
sources:
  calls: {rate: 2.0, into: queue}
pools:
  agents: 3
places:
  queue: {}
  talk: {hold: {dist: exponential, mean: 1.0}}
transitions:
  answer: {in: [queue, agents], out: [talk]}
  close: {in: [talk], out: [agents]}
"""

#: Jobs circle loop_a -> loop_b -> loop_a with holds of 1e-288: allowed by a scenario whose own
#: horizon is 1e-285 (a hold counts as zero below 1e-9 of it), but once the clock passes ~1e-272,
#: now + 1e-288 rounds to now and every hold ends at the same instant.
STUCK = textwrap.dedent("""
    name: stuck clock (invented)
    run: {horizon: 1.0e-285, warmup: 0}
    sources:
      calls: {rate: 1.0, into: loop_a}
    places:
      loop_a: {hold: 1.0e-288}
      loop_b: {hold: 1.0e-288}
    transitions:
      a_to_b: {in: [loop_a], out: [loop_b]}
      b_to_a: {in: [loop_b], out: [loop_a]}
""")


def test_the_engine_stops_a_run_whose_clock_stops(tmp_path):
    s = load_scenario_text(STUCK, file="stuck.yaml")
    engine = Engine(build_net(s, 1, 0), events_at_one_instant=1000)
    engine.start()
    with pytest.raises(ClockStopped) as info:
        engine.run(10.0)
    text = str(info.value)
    assert text.startswith("stuck.yaml: the simulated clock stopped at t=")
    assert "more than 1,000 events at that instant (ends of holds at place loop_" in text
    # the check never stops a run whose events merely come in large same-instant batches
    (tmp_path / "t.txt").write_text("5\n" * 3000)
    s = load_scenario_text(STATION.replace("{rate: 2.0, into: queue}",
                                           "{trace: t.txt, into: queue}"), base_dir=str(tmp_path))
    engine = Engine(build_net(s, 1, 0), events_at_one_instant=1000)
    engine.start()
    with pytest.raises(ClockStopped, match="arrivals of source calls"):
        engine.run(100.0)  # 3000 arrivals at t = 5 with a bound of 1000
    engine = Engine(build_net(s, 1, 0), events_at_one_instant=1000 + 3000 * 4)
    engine.start()
    engine.run(100.0)
    assert engine.completed + engine.inside() == 3000  # all arrived at 5, none refused
    assert _events_at_one_instant(s) == 1_000_000 + 3000 * (len(s.places) + 2)
