"""The engine's shortcuts change nothing: every run is the same with and without them.

``build_net(..., shortcuts=False)`` (``run_replication``/``replicate`` with ``shortcuts=False``)
leaves unset every fact the engine's shortcuts read, so the engine executes the net by its general
firing logic alone: each token is made available in its FIFO, then the enabled transitions fire
one at a time in rank order (design.md §4.2). The shortcuts claim to do exactly that, with the
same random draws in the same order, the same event order and the same floating-point sums, so
the two runs must agree to the last bit: every figure of the RunResult (compared through the
exact hexadecimal form of each float, nan included), the per-interval tables, the recorded waits,
the job records and the event trace. No tolerance is needed: the draws are keyed by stream name,
and the accumulation order is the same on both paths (the shortcuts skip only additions of an
exact 0).

Checked on random valid nets (the generator of test_properties.py), on hand nets (a single
station with and without patience, a pool with a priority, routed places, events sharing their
instants, a pool whose agents multiply) and on every example config and the built-in demo. Every
net is invented for the tests.
"""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

import desim
from desim.engine import Engine
from desim.net import build_net
from fluid.loading import ScenarioWarning, load_scenario

from .test_properties import FEW, MANY, load, nets

ROOT = Path(__file__).resolve().parents[2]
SCENARIOS = [*sorted((ROOT / "configs").glob("*.yaml")),
             ROOT / "compare" / "demo" / "utility-line.yaml"]


def exact(x):
    """``x`` with every float replaced by its exact hexadecimal form (nan by "nan"), numpy arrays
    and tables by lists, dataclasses by dicts: ``==`` on the results is bitwise equality (an int
    never equals a float, 0.0 never equals -0.0)."""
    if isinstance(x, (float, np.floating)):
        f = float(x)
        return "nan" if math.isnan(f) else f.hex()
    if isinstance(x, np.integer):
        return int(x)
    if x is None or isinstance(x, (bool, int, str)):
        return x
    if isinstance(x, dict):
        return {k: exact(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [exact(v) for v in x]
    if isinstance(x, np.ndarray):
        return exact(x.tolist())
    if isinstance(x, pd.DataFrame):
        return {"columns": list(x.columns), "dtypes": [str(d) for d in x.dtypes],
                "rows": exact(x.to_dict("split")["data"])}
    if dataclasses.is_dataclass(x):
        return {f.name: exact(getattr(x, f.name)) for f in dataclasses.fields(x)}
    raise TypeError(f"cannot compare {type(x).__name__} exactly")


def both_ways(scenario, replication: int = 0, *, traced: bool = True, **settings):
    """(RunResult, trace) of ``scenario`` with the shortcuts, then without them."""
    out = []
    for shortcuts in (True, False):
        trace = [] if traced else None
        run = desim.run_replication(scenario, replication, trace=trace, shortcuts=shortcuts,
                                    **settings)
        out.append((run, trace))
    return out


def assert_same_both_ways(scenario, replication: int = 0, *, traced: bool = True, **settings):
    (on, trace_on), (off, trace_off) = both_ways(scenario, replication, traced=traced, **settings)
    a, b = exact(on), exact(off)
    for key in a:  # one field at a time, so that a failure names the field
        assert a[key] == b[key], key
    assert exact(trace_on) == exact(trace_off)
    return on, trace_on


# --- random valid nets ---------------------------------------------------------------------------


def same_on_a_random_net(net: dict, replication: int, horizon: float, max_jobs: int | None,
                         recorded: bool) -> None:
    # Without records the engine ends jobs inline on the shortcut path (records=None), with them
    # through Engine._end: both variants are compared. max_jobs 15 stops some runs early
    # (unstable), at the same arrival on both paths.
    s = load(net)
    settings = dict(horizon=horizon, warmup=horizon / 4, seed=11, max_jobs=max_jobs)
    if recorded:
        settings.update(record_waits=True, record_jobs=True, interval=horizon / 6)
    assert_same_both_ways(s, replication, traced=recorded, **settings)


shortcut_cases = st.tuples(nets(patience=True), st.integers(0, 50), st.sampled_from([40.0, 150.0]),
                           st.sampled_from([None, None, 15]), st.booleans())


@FEW
@given(shortcut_cases)
def test_random_nets_run_the_same_with_and_without_shortcuts(case):
    same_on_a_random_net(*case)


@pytest.mark.slow
@MANY
@given(shortcut_cases)
def test_random_nets_run_the_same_with_and_without_shortcuts_thoroughly(case):
    same_on_a_random_net(*case)


# --- hand nets -----------------------------------------------------------------------------------

STATION = """
    name: one station (invented)
    run: {horizon: 400, warmup: 50, replications: 2, seed: 3}
    sources:
      calls: {rate: 3.6, into: queue}
    pools:
      agents: 4
    places:
      queue: {PATIENCE}
      talk: {hold: {dist: exponential, mean: 1.0}}
    transitions:
      answer: {in: [queue, agents], out: [talk]}
      close: {in: [talk], out: [agents]}
    targets:
      queue: {within: 0.25, goal: 0.8}
"""

POOL_PRIORITY = """
    name: a pool with a priority (invented)
    run: {horizon: 400, warmup: 50, replications: 2, seed: 5}
    sources:
      urgent: {rate: 1.0, into: menu}
      routine: {rate: 2.0, into: qb}
    pools:
      desk: {staff: 3, priority: [serve_a, serve_b]}
    places:
      menu: {hold: 0.5}
      qa: {}
      qb: {patience: {dist: exponential, mean: 3.0}}
      talk_a: {hold: {dist: gamma, mean: 1.0, cv: 0.5}}
      talk_b: {hold: 1.0}
    transitions:
      to_qa: {in: [menu], out: [qa]}
      serve_a: {in: [qa, desk], out: [talk_a]}
      serve_b: {in: [qb, desk], out: [talk_b]}
      done_a: {in: [talk_a], out: [desk]}
      done_b: {in: [talk_b], out: [desk]}
"""

ROUTED = """
    name: routed places (invented)
    run: {horizon: 400, warmup: 50, replications: 2, seed: 7}
    sources:
      calls: {rate: 2.5, into: front}
    pools:
      sales_desk: 3
      help_desk: {staff: 3, priority: [warm_to_help, help_answer]}
    places:
      front: {route: {sales_answer: 0.6, help_answer: 0.4}}
      sales_talk: {hold: {dist: exponential, mean: 1.0},
                   route: {sales_close: 0.7, warm_to_help: 0.3}}
      help_talk: {hold: {dist: lognormal, mean: 1.5, cv: 0.8}}
    transitions:
      sales_answer: {in: [front, sales_desk], out: [sales_talk]}
      sales_close: {in: [sales_talk], out: [sales_desk]}
      warm_to_help: {in: [sales_talk, help_desk], out: [sales_desk, help_talk]}
      help_answer: {in: [front, help_desk], out: [help_talk]}
      help_close: {in: [help_talk], out: [help_desk]}
"""
# (sales_talk is held and routed: while jobs wait in its warm_to_help FIFO for a help agent,
# others leave through sales_close the instant their hold ends, past a non-empty place.)

TIES = """
    name: events that share instants (invented)
    run: {horizon: 120, warmup: 10, replications: 1, seed: 1}
    sources:
      calls: {trace: calls.txt, into: queue}
    pools:
      agents: 8
    places:
      queue: {}
      talk: {hold: {dist: empirical, values: [1.0, 1.5, 2.5]}}
      survey: {hold: 0.5}
    transitions:
      answer: {in: [queue, agents], out: [talk]}
      close: {in: [talk], out: [agents, survey]}
      survey_done: {in: [survey], out: []}
"""
# Arrivals on a grid of 0.5 (several at one instant, sorted) and holds that are multiples of 0.5:
# most events share their instant with others and with the interval snapshots, where the
# shortcuts must stand aside, and talks begun at different instants end together, in the order
# of SimPy's event counter (their order in the survey FIFO, hence in the trace, shows it).
TIE_ARRIVALS = np.sort(np.random.default_rng(1).integers(0, 220, size=330)) / 2

GROWING = """
    name: a pool that grows (invented; its agents multiply, which the loader warns about)
    run: {horizon: 60, warmup: 0, replications: 1, seed: 9}
    sources:
      calls: {rate: 4.0, into: queue}
    pools:
      agents: 1
    places:
      queue: {}
      talk: {hold: {dist: exponential, mean: 3.0}}
    transitions:
      answer: {in: [queue, agents], out: [talk]}
      close: {in: [talk], out: {agents: 2}}
"""
# (close gives back two agents for the one answer took: the only shape of net in which the end
# of a hold gives the pool's only taker enough agents to fire twice, a branch of the shortcuts
# that a net conserving its agents never reaches.)


def station(patience: str = "") -> str:
    return STATION.replace("{PATIENCE}", "{" + patience + "}")


HAND_NETS = {
    "station": station(),
    "station_with_patience": station("patience: {dist: exponential, mean: 0.5}"),
    "loss_station": station("patience: 0"),
    "pool_priority": POOL_PRIORITY,
    "routed": ROUTED,
    "ties": TIES,
    "growing": GROWING,
}


def hand_net(net, name: str):
    if name == "ties":
        return net(TIES, calls=TIE_ARRIVALS)
    if name == "growing":
        with pytest.warns(ScenarioWarning, match="pools.agents"):
            return net(GROWING)
    return net(HAND_NETS[name])


@pytest.mark.parametrize("name", list(HAND_NETS))
@pytest.mark.parametrize("replication", [0, 1])
def test_hand_nets_run_the_same_with_and_without_shortcuts(net, name, replication):
    s = hand_net(net, name)
    run, trace = assert_same_both_ways(s, replication, record_waits=True, record_jobs=True,
                                       interval=5.0 if name == "ties" else 50.0)
    assert run.totals["arrivals"] > 100 and len(trace) > 300  # a real workload was compared
    assert_same_both_ways(s, replication, traced=False)  # jobs ended inline by the shortcuts


@pytest.mark.parametrize("path", SCENARIOS, ids=[f"{p.parent.name}/{p.stem}" for p in SCENARIOS])
def test_every_config_runs_the_same_with_and_without_shortcuts(path):
    # Each example config and the demo over its own horizon, one replication, everything recorded.
    s = load_scenario(path)
    assert_same_both_ways(s, 1, record_waits=True, record_jobs=True, interval=s.run.horizon / 10)


def test_replicate_gives_the_same_result_with_and_without_shortcuts(net, tmp_path):
    # The keyword reaches every replication; a run directory saved with the shortcuts can be
    # resumed without them (they are no setting of the run) and gives the uninterrupted numbers.
    s = net(POOL_PRIORITY)
    on = desim.replicate(s, reps=3, workers=1, out=tmp_path / "run")
    off = desim.replicate(s, reps=3, workers=1, shortcuts=False)
    doc = json.dumps(on.to_json(), sort_keys=True)
    assert json.dumps(off.to_json(), sort_keys=True) == doc
    assert exact(list(on.runs)) == exact(list(off.runs))
    (tmp_path / "run" / "rep-000001.json").unlink()
    resumed = desim.replicate(s, reps=3, workers=1, out=tmp_path / "run", resume=True,
                              shortcuts=False)
    assert json.dumps(resumed.to_json(), sort_keys=True) == doc


# --- the switch itself ---------------------------------------------------------------------------


def test_without_shortcuts_no_shortcut_fact_is_set_and_no_token_skips_its_fifo(net):
    s = net(station())
    on, off = build_net(s, 3, 0), build_net(s, 3, 0, shortcuts=False)
    assert on.shortcuts is True and off.shortcuts is False
    # With them: the queue is served by one pool (quick), the talk ends by a transition that
    # takes no agents (direct), the close gives back to the pool's only taker.
    q, talk = on.places["queue"], on.places["talk"]
    assert q.plain is q.fifo and q.fifo.quick is on.transitions[1]  # rank: close, then answer
    assert talk.held is talk.fifo and talk.fifo.direct is on.transitions[0]
    assert on.pools["agents"].taker is q.fifo
    # Without them: every fact the shortcuts read is unset; what the general path reads is the same.
    for place in off.places.values():
        assert place.plain is None and place.held is None
        for fifo in place.fifos:
            assert fifo.single is None and fifo.direct is None and fifo.quick is None
    for t in off.transitions:
        assert t.take1 is None and t.give1 is None
    for name, pool in off.pools.items():
        assert pool.taker is None
        assert [(f.place.name, bit) for f, bit in pool.takers] == \
            [(f.place.name, bit) for f, bit in on.pools[name].takers]
    # Run both: the shortcuts took tokens at once, the general path never did.
    for nt in (on, off):
        engine = Engine(nt)
        engine.start()
        engine.run(400.0)
        engine.check_conservation()
    assert on.places["queue"].at_once > 0 and on.places["talk"].at_once > 0
    assert all(f.at_once == 0 for p in off.places.values() for f in p.fifos)
    assert [t.firings for t in on.transitions] == [t.fired for t in off.transitions]
