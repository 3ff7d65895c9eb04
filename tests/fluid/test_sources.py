"""Arrival processes (fluid.sources): exact values by hand, and the simulator's draws pinned.

The counts, rates and integrals below are derived by hand in the comments (the expected count of
a Poisson process of rate λ(t) over [0, t] is ∫₀ᵗ λ(s) ds: Ross, *Introduction to Probability
Models*, ch. 5, the nonhomogeneous Poisson process). Every value is a dyadic fraction, so the
checks are exact equalities.

The draws: the arrival times were recorded from the code before the arrival processes became
objects of their own (commit 49b9e15, ``desim.net.SourceState.next_time`` of a net built by
``build_net``), for two (seed, replication, block) settings; the numbers must not change.
"""

from __future__ import annotations

import math
import pickle

import numpy as np
import pytest

from desim.net import build_net
from desim.streams import stream_rng
from fluid import load_scenario_text
from fluid.errors import FieldError
from fluid.scenario import Source
from fluid.sources import PoissonArrivals, ProfileArrivals, TraceArrivals

POISSON = PoissonArrivals(2.5)
# rate 1.5 on [0, 10), 0 on [10, 20), 3 from 20 on (the last value holds)
PROFILE = ProfileArrivals(10.0, (1.5, 0.0, 3.0))
# two arrivals share 0.5; one at time 0 itself
TRACE = TraceArrivals((0.0, 0.5, 0.5, 2.25, 7.0))


# --- Poisson -------------------------------------------------------------------------------------


def test_poisson_counts_and_rates():
    # λ = 2.5: Λ(t) = 2.5 t; nothing before 0
    assert POISSON.cumulative(4.0) == 10.0
    assert POISSON.cumulative(0.0) == 0.0 and POISSON.cumulative(-1.0) == 0.0
    assert POISSON.rate_at(0.0) == POISSON.rate_at(123.0) == 2.5
    assert POISSON.mean_rate(100.0) == 2.5
    assert POISSON.cumulative_grid(np.array([0.0, 1.0, 4.0])).tolist() == [0.0, 2.5, 10.0]
    assert POISSON.is_constant and POISSON.kind == "poisson"
    assert POISSON.steps == () and POISSON.file_data is None


def test_poisson_scaled():
    # rate × 2 = 5; the document field that holds it is `rate`
    assert POISSON.scaled(2) == PoissonArrivals(5.0)
    assert POISSON.scaled(2).rate_fields() == {"rate": 5.0}
    assert POISSON.scaled(2).cumulative(4.0) == 20.0
    assert POISSON.describe() == "Poisson 2.5"


# --- profile -------------------------------------------------------------------------------------


def test_profile_rate_at_each_interval():
    # [0, 10) → 1.5, [10, 20) → 0, [20, ...) → 3 (last value holds); before 0 the first value
    assert [PROFILE.rate_at(t) for t in (0.0, 9.75, 10.0, 19.5, 20.0, 25.0, 1000.0)] == [
        1.5, 1.5, 0.0, 0.0, 3.0, 3.0, 3.0]
    assert PROFILE.rate_at(-1.0) == 1.5


@pytest.mark.parametrize("t, expected", [
    (-1.0, 0.0),
    (0.0, 0.0),
    (5.0, 7.5),     # 1.5 · 5
    (10.0, 15.0),   # 1.5 · 10
    (15.0, 15.0),   # + 0 · 5
    (25.0, 30.0),   # 15 + 0 · 10 + 3 · 5
    (30.0, 45.0),   # 15 + 0 + 3 · 10 (end of the last interval)
    (40.0, 75.0),   # 45 + 3 · 10 after the end (the last rate holds)
])
def test_profile_cumulative_is_the_integral_of_the_rate(t, expected):
    assert PROFILE.cumulative(t) == expected
    if t >= 0:
        assert PROFILE.cumulative_grid(np.array([t])).tolist() == [expected]


def test_profile_mean_rate_and_grid_steps():
    # Λ(40) / 40 = 75 / 40 = 1.875; Λ(10) / 10 = 1.5
    assert PROFILE.mean_rate(40.0) == 1.875
    assert PROFILE.mean_rate(10.0) == 1.5
    assert PROFILE.steps == (10.0,)
    assert not PROFILE.is_constant and PROFILE.kind == "profile" and PROFILE.file_data is None


def test_profile_scaled():
    # every rate × 2, the step unchanged: Λ doubles, Λ(40) = 150
    twice = PROFILE.scaled(2)
    assert twice == ProfileArrivals(10.0, (3.0, 0.0, 6.0))
    assert twice.cumulative(40.0) == 150.0
    assert twice.rate_fields() == {"profile.rates": [3.0, 0.0, 6.0]}
    assert PROFILE.describe() == "profile step 10, 3 rates, 0..3"


# --- trace ---------------------------------------------------------------------------------------


@pytest.mark.parametrize("t, expected", [
    (-1.0, 0.0), (0.0, 1.0), (0.25, 1.0), (0.5, 3.0), (2.0, 3.0), (2.25, 4.0), (7.0, 5.0),
    (100.0, 5.0),
])
def test_trace_cumulative_counts_recorded_arrivals(t, expected):
    # arrivals in [0, t], an arrival at t included
    assert TRACE.cumulative(t) == expected
    if t >= 0:
        assert TRACE.cumulative_grid(np.array([t])).tolist() == [expected]


def test_trace_rate_at_is_the_slope_between_arrivals():
    # [0, 0.5): the 2 arrivals at 0.5 over 0.5 → 4; [0.5, 2.25): 1 / 1.75; [2.25, 7): 1 / 4.75;
    # from 7 on (and before 0): 0
    assert TRACE.rate_at(0.0) == TRACE.rate_at(0.25) == 4.0
    assert TRACE.rate_at(0.5) == TRACE.rate_at(2.0) == 1 / 1.75
    assert TRACE.rate_at(6.0) == 1 / 4.75
    assert TRACE.rate_at(7.0) == TRACE.rate_at(50.0) == TRACE.rate_at(-1.0) == 0.0
    # its integral over [0, 7] is the count in (0, 7]: 4 · 0.5 + 1.75 / 1.75 + 4.75 / 4.75 = 4
    assert 4.0 * 0.5 + (1 / 1.75) * 1.75 + (1 / 4.75) * 4.75 == TRACE.cumulative(7.0) - 1


def test_trace_mean_rate_and_data():
    # 5 recorded arrivals over a horizon of 10 → 0.5; over 2 → 3 / 2
    assert TRACE.mean_rate(10.0) == 0.5
    assert TRACE.mean_rate(2.0) == 1.5
    assert TRACE.file_data == (0.0, 0.5, 0.5, 2.25, 7.0)
    assert not TRACE.is_constant and TRACE.kind == "trace" and TRACE.steps == ()
    assert TRACE.describe() == "trace, 5 arrivals"


def test_trace_cannot_be_scaled():
    with pytest.raises(FieldError, match="a trace source cannot be scaled"):
        TRACE.scaled(2)
    assert TRACE.rate_fields() == {}


# --- sources hold them ---------------------------------------------------------------------------


def test_sources_are_frozen_hashable_and_picklable():
    src = Source("calls", "queue", PROFILE)
    assert pickle.loads(pickle.dumps(src)) == src
    assert hash(Source("calls", "queue", ProfileArrivals(10.0, [1.5, 0.0, 3.0]))) == hash(src)
    with pytest.raises(AttributeError):
        src.arrivals.step = 5.0


def test_the_loader_builds_one_arrival_process_per_source(tmp_path):
    (tmp_path / "walkins.txt").write_text("0.5\n1.25\n3\n")
    s = load_scenario_text(NET.format(
        calls="{rate: 2.5, into: queue}",
        peak="{profile: {step: 10, rates: [1.5, 0, 3]}, into: queue}",
        walkins="{trace: walkins.txt, into: queue}"), base_dir=str(tmp_path))
    assert s.sources["calls"].arrivals == POISSON
    assert s.sources["peak"].arrivals == PROFILE
    assert s.sources["walkins"].arrivals == TraceArrivals((0.5, 1.25, 3.0))
    assert s.has_time_variation


# --- the simulator's draws -----------------------------------------------------------------------

NET = """
name: draws (invented)
sources:
  calls: {calls}
  peak: {peak}
  walkins: {walkins}
pools:
  agents: 2
places:
  queue: {{}}
  talk: {{hold: 1.0}}
transitions:
  answer: {{in: [queue, agents], out: [talk]}}
  close: {{in: [talk], out: [agents]}}
"""

# (seed, replication, block) -> first six arrival times, the 1500th and the sum of all 1500
RECORDED = {
    "poisson": {
        (0, 0, 1024): ([0.36962363236813184, 0.5479608553433681, 1.4263799603906309,
                        2.0893437615424935, 2.154153237959873, 2.2449241059647194],
                       594.2575063969715, 451170.09239705914),
        (7, 3, 4): ([0.30909450606971756, 0.5628169703982435, 0.5713085547655627,
                     0.8441648122109771, 1.408803403074256, 1.9528510952631066],
                    603.8747243063943, 466023.3483620363),
    },
    "profile": {
        (0, 0, 1024): ([0.6160393872802198, 0.9132680922389469, 2.3772999339843848,
                        3.482239602570822, 3.5902553965997885, 3.7415401766078653],
                       509.6608455591529, 397505.25022172387),
        (7, 3, 4): ([0.5151575101161959, 0.9380282839970726, 0.9521809246092713,
                     1.4069413536849618, 2.3480056717904265, 3.2547518254385106],
                    518.4818207154235, 410811.8011309052),
    },
}
ARRIVALS = {"poisson": POISSON, "profile": PROFILE}


def _times(next_time, count=1500):
    t, out = 0.0, []
    for _ in range(count):
        t = next_time(t)
        out.append(t)
    return out


@pytest.mark.parametrize("kind", ["poisson", "profile"])
@pytest.mark.parametrize("setting", [(0, 0, 1024), (7, 3, 4)])
def test_clock_draws_are_the_recorded_ones(kind, setting):
    seed, rep, block = setting
    first, last, total = RECORDED[kind][setting]
    clock = ARRIVALS[kind].clock(stream_rng(seed, rep, "arrivals", "calls"), block)
    times = _times(clock.next_time)
    assert times[:6] == first and times[-1] == last and sum(times) == total


@pytest.mark.parametrize("setting", [(0, 0, 1024), (7, 3, 4)])
def test_the_engine_hot_path_sees_the_same_poisson_times(setting):
    # the engine adds the clock's `spacing` to the current time itself for a constant rate
    seed, rep, block = setting
    first, last, total = RECORDED["poisson"][setting]
    clock = POISSON.clock(stream_rng(seed, rep, "arrivals", "calls"), block)
    times = _times(lambda now: now + next(clock.spacing))
    assert times[:6] == first and times[-1] == last and sum(times) == total
    profile = PROFILE.clock(stream_rng(seed, rep, "arrivals", "calls"), block)
    assert profile.spacing is None


SPECS = {"poisson": "{rate: 2.5, into: queue}",
         "profile": "{profile: {step: 10, rates: [1.5, 0, 3]}, into: queue}"}


@pytest.mark.parametrize("kind", ["poisson", "profile"])
@pytest.mark.parametrize("setting", [(0, 0, 1024), (7, 3, 4)])
def test_a_run_net_draws_the_recorded_times(kind, setting, tmp_path):
    # what the engine reads: the SourceState of a net built for a run (as recorded, the source
    # is named "calls"; the other sources have streams of their own and change nothing)
    seed, rep, block = setting
    (tmp_path / "walkins.txt").write_text("0\n0.5\n0.5\n2.25\n7\n")
    s = load_scenario_text(NET.format(calls=SPECS[kind], peak=SPECS["profile"],
                                      walkins="{trace: walkins.txt, into: queue}"),
                           base_dir=str(tmp_path))
    net = build_net(s, seed, rep, block=block)
    first, last, total = RECORDED[kind][setting]
    times = _times(net.sources["calls"].next_time)
    assert times[:6] == first and times[-1] == last and sum(times) == total
    assert (net.sources["calls"].spacing is not None) == (kind == "poisson")
    assert _times(net.sources["walkins"].next_time, 6) == [0.0, 0.5, 0.5, 2.25, 7.0, math.inf]


def test_trace_clock_replays_the_times_then_stops():
    clock = TRACE.clock(stream_rng(0, 0, "arrivals", "walkins"), 1024)
    assert _times(clock.next_time, 7) == [0.0, 0.5, 0.5, 2.25, 7.0, math.inf, math.inf]
    assert clock.spacing is None
