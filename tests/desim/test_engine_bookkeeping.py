"""Bookkeeping of the engine: superseded patience timers stay bounded, the ``delayed`` share
(P(W > 0)), and Little's law closed exactly per run and place by the waiting jobs at the window's
two ends (design.md §4.2).

Everything here is deterministic (fixed seeds, exact identities) except one check of ``delayed``
against Erlang C, which follows the interval rule of test_reference_erlang.py.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from compare.formulas.erlang import erlang_c_queue
from desim import replicate, run_replication
from desim.engine import STALE_TIMER_SLACK, Engine, PatienceTimer
from desim.net import build_net
from fluid.loading import load_scenario

from .conftest import fired
from .test_reference_erlang import agrees, station
from .test_traces import LOSS, SINGLE

CONFIGS = Path(__file__).resolve().parents[2] / "configs"

# λ = 48 per min into 60 agents (load 0.8), patience of mean 1 min: the queue is empty most of the
# time, yet nearly every caller's patience deadline is drawn, and each one earlier than the timer
# armed so far supersedes it.
BUSY_LINE = """
    name: busy line with patience (invented)
    run: {horizon: 600, warmup: 0, replications: 1, seed: 1}
    sources:
      calls: {rate: 48.0, into: queue}
    pools:
      agents: 60
    places:
      queue: {patience: {dist: exponential, mean: 1.0}}
      talk: {hold: {dist: exponential, mean: 1.0}}
    transitions:
      answer: {in: [queue, agents], out: [talk]}
      close: {in: [talk], out: [agents]}
"""


def timer_counts(s, horizon: float = 600.0, every: float = 0.5):
    """Run ``s`` (replication 0, seed 1) and return, sampled every ``every`` min, the pairs
    (patience timers of place ``queue`` in the event queue, jobs waiting there), the engine and
    the trace."""
    nt = build_net(s, 1, 0)
    trace: list = []
    engine = Engine(nt, trace=trace)
    engine.start()
    queue = nt.places["queue"]
    seen = []

    def look(e: Engine) -> None:
        timers = sum(1 for entry in e.env._queue
                     if isinstance(entry[3], PatienceTimer) and entry[3].place is queue)
        seen.append((timers, queue.n_avail))
        if e.env.now + every < horizon:
            e.at(e.env.now + every, look)

    engine.at(every, look)
    engine.run(horizon)
    engine.check_conservation()
    return seen, engine, trace


def test_pending_patience_timers_stay_within_twice_the_waiting_plus_a_constant(net):
    # The bound of issue 3: at every sampled time, pending timers of the place (the current one
    # plus superseded ones) <= 2 × jobs waiting + STALE_TIMER_SLACK + 1.
    s = net(BUSY_LINE)
    seen, engine, trace = timer_counts(s)
    assert len(seen) == 1199
    assert all(timers <= 2 * waiting + STALE_TIMER_SLACK + 1 for timers, waiting in seen), \
        max(timers - 2 * waiting for timers, waiting in seen)
    assert engine.dropped_timers > 0  # the bound was reached and superseded timers were dropped
    assert any(waiting == 0 and timers > 1 for timers, waiting in seen)


def test_dropping_superseded_timers_changes_nothing(net, monkeypatch):
    # The same run with the bound switched off: the superseded timers pile up beyond the bound,
    # yet every event and every figure is the same (a superseded timer acts on nothing).
    s = net(BUSY_LINE)
    bounded, engine, trace = timer_counts(s)
    figures = run_replication(s, 0, warmup=60).values()
    monkeypatch.setattr("desim.engine.STALE_TIMER_SLACK", 10**9)
    piled, loose, loose_trace = timer_counts(s)
    assert loose.dropped_timers == 0
    assert max(t - 2 * w for t, w in piled) > STALE_TIMER_SLACK + 1
    assert [w for _, w in piled] == [w for _, w in bounded]
    assert loose_trace == trace
    assert run_replication(s, 0, warmup=60).values() == figures  # no nan in this run


def test_delayed_share_by_hand(net):
    # SINGLE with arrivals 0, 1, 2 (test_traces): job 0 is taken at once, jobs 1 and 2 wait:
    # delayed 2/3 at the queue. The talk place has a hold and its tokens are taken (by close) the
    # instant they become available: delayed 0.
    s = net(SINGLE, calls=[0, 1, 2])
    r = run_replication(s, 0)
    assert r.places["queue"]["delayed"] == pytest.approx(2 / 3, abs=1e-15)
    assert r.places["talk"]["delayed"] == 0.0
    # Over [2.5, 20] no token becomes available at the queue: nan, as for `abandoned`.
    late = run_replication(s, 0, warmup=2.5)
    assert math.isnan(late.places["queue"]["delayed"])


def test_delayed_counts_the_lost_and_not_the_taken_at_once(net):
    # LOSS (test_traces): arrivals 0, 1, 3, 3.5, one agent, hold 3, patience 0. Job 0 is taken
    # at 0, job 1 lost at 1, job 2 taken at 3 (the instant it arrives, as the agent returns), job
    # 3 lost at 3.5: 2 of 4 delayed, although every wait is 0.
    s = net(LOSS, calls=[0, 1, 3, 3.5])
    r = run_replication(s, 0)
    assert r.places["queue"]["delayed"] == pytest.approx(0.5, abs=1e-15)
    assert r.places["queue"]["wait"] == 0.0


def test_delayed_agrees_with_the_recorded_waits_exactly():
    # 1 − delayed = share of tokens that became available in the window and were taken with a wait
    # of 0; such a token becomes available and leaves at the same instant, so it is also exactly
    # a zero among the recorded waits of the tokens taken in the window.
    for path in sorted(CONFIGS.glob("*.yaml")):
        s = load_scenario(path)
        for rep in range(2):
            r = run_replication(s, rep, horizon=300, warmup=30, record_waits=True)
            for place, m in r.places.items():
                if m["became"] == 0:
                    continue
                at_once = int(np.count_nonzero(r.waits[place]["taken"] == 0))
                assert round(m["became"] * (1 - m["delayed"])) == at_once, (path.name, place)


def test_delayed_is_erlang_c_probability_of_waiting():
    # Erlang C (Erlang 1917; references.md): an M/M/c caller waits with probability C(c, a).
    # 10 agents, λ = 7 per min, mean hold 1 min (as test_erlang_c_ten_agents, another seed).
    # One interval check of the family of test_reference_erlang.py (52 checks there and in its
    # sister modules at the time of writing; with this one 53 <= FAMILY_CHECKS = 64), read with
    # its rule: the reference must lie in the Bonferroni-corrected Student t interval of the
    # per-replication values, which must be narrow.
    ref = erlang_c_queue(10, 7.0, 1.0)
    sim = replicate(station(10, 7.0, "{dist: exponential, mean: 1.0}"), reps=20, horizon=8_000,
                    warmup=100, seed=104, workers=2)
    agrees(sim.raw("place", "queue", "delayed"), ref.p_wait, "P(W > 0) as `delayed`",
           "Erlang C (Erlang 1917), references.md", probability=True)
    assert set(sim.places["talk"]) >= {"delayed"}  # every place reports it
    assert sim.to_json()["places"]["queue"]["delayed"]["n"] == 20


# --- Little's law, exactly -----------------------------------------------------------------------

def test_backlog_at_the_window_ends_by_hand(net):
    # SINGLE, arrivals 0, 1, 2, window [2.5, 20]: at 2.5 jobs 1 and 2 wait (since 1 and 2): 2 jobs
    # that have waited 1.5 + 0.5 = 2 so far; at 20 nobody waits. Waits of the tokens that left in
    # the window: 2 (job 1) and 4 (job 2). Queue area in the window 0.5 + 3.5 = 4 = 6 + 0 − 2.
    s = net(SINGLE, calls=[0, 1, 2])
    q = run_replication(s, 0, warmup=2.5).places["queue"]
    assert (q["waiting_at_warmup"], q["waited_at_warmup"]) == (2, 2.0)
    assert (q["waiting_at_end"], q["waited_at_end"]) == (0, 0.0)
    assert q["queue"] * 17.5 == pytest.approx(q["wait"] * q["left"] + 0.0 - 2.0, abs=1e-12)


def little_residuals(r) -> list[tuple[str, float, float]]:
    """Per place of run ``r``: (place, queue × window, waits of tokens that left + waited at end
    − waited at warm-up). Derivation: the area under the number of jobs waiting over [w, e] adds,
    for every job that waited there, the part of its wait inside [w, e]. A job that left inside
    contributes its whole wait less what it had waited before w (nonzero only if it waited at w);
    a job still waiting at e contributes e − max(w, its start). Summing, the parts before w of the
    jobs waiting at w are subtracted once whether they left or not: area = Σ waits of those that
    left + Σ (e − start) over those waiting at e − Σ (w − start) over those waiting at w."""
    out = []
    length = r.end - r.warmup
    for place, m in r.places.items():
        waits = m["wait"] * m["left"] if m["left"] else 0.0
        out.append((place, m["queue"] * length,
                    waits + m["waited_at_end"] - m["waited_at_warmup"]))
    return out


@pytest.mark.parametrize("name", ["single-station", "priority-desk", "utility-line",
                                  "day-with-shifts"])
def test_littles_law_holds_exactly_per_replication(name):
    s = load_scenario(CONFIGS / f"{name}.yaml")
    for rep in range(3):
        r = run_replication(s, rep, horizon=400, warmup=60)
        for place, area, rhs in little_residuals(r):
            assert area == pytest.approx(rhs, rel=1e-9, abs=1e-9), (name, rep, place)
            m = r.places[place]
            # and the tokens balance: became − left = waiting at the end − waiting at warm-up
            assert m["became"] - m["left"] == m["waiting_at_end"] - m["waiting_at_warmup"]


def test_backlog_is_nan_when_the_window_never_opened(net):
    # A run stopped at the job limit before its warm-up has no window: nothing to report.
    from .test_runs import UNSTABLE

    r = run_replication(net(UNSTABLE), 0, warmup=5000, max_jobs=50)
    assert r.unstable and r.end < 5000
    q = r.places["queue"]
    assert math.isnan(q["waiting_at_warmup"]) and math.isnan(q["waited_at_warmup"])
    assert q["waiting_at_end"] > 0


# --- the engine's shortcuts change nothing -------------------------------------------------------

def test_records_and_traces_do_not_change_the_numbers():
    # With job records or a trace the engine leaves some shortcuts; the figures stay the same.
    for path in sorted(CONFIGS.glob("*.yaml")):
        s = load_scenario(path)
        plain = run_replication(s, 1, horizon=200, warmup=20)
        trace: list = []
        kept = run_replication(s, 1, horizon=200, warmup=20, record_jobs=True, trace=trace)
        assert kept.values().keys() == plain.values().keys()
        for key, value in plain.values().items():
            other = kept.values()[key]
            assert value == other or (math.isnan(value) and math.isnan(other)), (path.name, key)
        assert len(fired(trace, "arrive")) == plain.totals["arrivals"]
