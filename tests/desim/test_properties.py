"""Property tests on random valid priority-free nets (hypothesis).

The nets are chains of service stages, each a queue and a pool of agents: answer takes a job and
1 or 2 agents, the talk holds them (exponential or deterministic hold), and the talk ends by
closing the job, a cold transfer (agents released, job to the next stage's queue), a warm
hand-over (job and agents wait until the next stage's pool takes the job, then the agents are
released) or rework (back to the same queue), chosen by a routing split. Poisson sources feed the
first queue and possibly a later one; queues may have patience with a redial loop.

Checked:

* the throughput LP equals the long-run slopes of the integrated counter equations (design.md
  §4.1: two independent computations of the same fluid rates);
* every simulated run conserves jobs: arrivals = completed + abandoned + still inside
  (design.md §4.2; style.md, the one invariant both engines share);
* on conflict-free nets (every place has one output transition, no priority: stochastic event
  graphs with pools) the simulated rate of a transition does not exceed the fluid rate beyond its
  confidence interval (references.md, "When the fluid throughput is an upper bound": Baccelli and
  Liu 1992; Baccelli, Cohen, Olsder and Quadrat 1992, ch. 8).

Every net is invented for the tests. The default run keeps few examples; ``-m slow`` runs many.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from scipy import stats

from desim import replicate, run_replication
from fluid import load_scenario_text
from fluid.counters import integrate_counters
from fluid.lp import throughput_lp

# --- random nets ---------------------------------------------------------------------------------


def render(net: dict) -> str:
    """The YAML text (design.md §3) of a generated net (see :func:`nets`)."""
    stages, links = net["stages"], net["links"]
    n = len(stages)
    pools, places, trans = [], [], []
    for i, sg in enumerate(stages):
        w = sg["weight"]
        pools.append(f"  pool{i}: {sg['staff']}")
        has_queue = i == 0 or links[i - 1] == "cold"
        exits = {}
        if i < n - 1:
            exits[("transfer" if links[i] == "cold" else "hand") + str(i)] = sg["link"]
        if sg["close"] or i == n - 1:
            exits[f"close{i}"] = sg["close"] or 1
        if has_queue and sg["rework"]:
            exits[f"rework{i}"] = sg["rework"]
        total = sum(exits.values())
        route = "" if len(exits) == 1 else ", route: {" + ", ".join(
            f"{q}: {k / total!r}" for q, k in exits.items()) + "}"
        hold = (f"{{dist: exponential, mean: {sg['hold']!r}}}" if sg["dist"] == "exponential"
                else repr(sg["hold"]))
        if has_queue:
            patience = ""
            if sg["patience"] is not None:
                patience = (f"patience: {{dist: exponential, mean: {sg['patience']!r}}}, "
                            f"abandon_to: redial{i}")
                back = sg["redial"]
                places.append(f"  redial{i}: {{hold: {{dist: exponential, mean: 5.0}}, "
                              f"route: {{back{i}: {back!r}, give_up{i}: {1 - back!r}}}}}")
                trans.append(f"  back{i}: {{in: [redial{i}], out: [queue{i}]}}")
                trans.append(f"  give_up{i}: {{in: [redial{i}], out: []}}")
            places.append(f"  queue{i}: {{{patience}}}")
            trans.append(f"  answer{i}: {{in: {{queue{i}: 1, pool{i}: {w}}}, out: [talk{i}]}}")
        places.append(f"  talk{i}: {{hold: {hold}{route}}}")
        for q in exits:
            if q.startswith("close"):
                trans.append(f"  {q}: {{in: [talk{i}], out: {{pool{i}: {w}}}}}")
            elif q.startswith("rework"):
                trans.append(f"  {q}: {{in: [talk{i}], out: {{pool{i}: {w}, queue{i}: 1}}}}")
            elif q.startswith("transfer"):
                trans.append(f"  {q}: {{in: [talk{i}], out: {{pool{i}: {w}, queue{i + 1}: 1}}}}")
            else:  # warm hand-over: the agents stay with the job until the next pool takes it
                w2 = stages[i + 1]["weight"]
                places.append(f"  handoff{i}: {{}}")
                trans.append(f"  {q}: {{in: [talk{i}], out: [handoff{i}]}}")
                trans.append(f"  take{i}: {{in: {{handoff{i}: 1, pool{i + 1}: {w2}}}, "
                             f"out: {{talk{i + 1}: 1, pool{i}: {w}}}}}")
    sources = [f"  calls: {{rate: {net['rate']!r}, into: queue0}}"]
    if net["second"] is not None:
        j, rate = net["second"]
        sources.append(f"  more_calls: {{rate: {rate!r}, into: queue{j}}}")
    return "\n".join(["name: random service chain (generated test net)", "time_unit: min",
                      "sources:", *sources, "pools:", *pools, "places:", *places,
                      "transitions:", *trans, ""])


@st.composite
def nets(draw, conflicts: bool = True, patience: bool = False) -> dict:
    """A random net description for :func:`render`. ``conflicts``: allow routing splits (close,
    link, rework shares) and a second source; otherwise every place has one output transition.
    ``patience``: queues may have exponential patience with a redial loop. Holds are multiples of
    0.5 so that the counters' grid divides them exactly."""
    n = draw(st.integers(1, 3))
    links = [draw(st.sampled_from(["cold", "warm"])) for _ in range(n - 1)]
    stages = []
    for i in range(n):
        last = i == n - 1
        stages.append({
            "staff": draw(st.integers(1, 8)),
            "weight": draw(st.sampled_from([1, 1, 2])),
            "hold": draw(st.integers(1, 8)) / 2,
            "dist": draw(st.sampled_from(["exponential", "deterministic"])),
            "link": 0 if last else (draw(st.integers(1, 10)) if conflicts else 1),
            "close": (draw(st.integers(0 if not last else 1, 10)) if conflicts
                      else int(last)),
            "rework": draw(st.sampled_from([0, 0, 1, 2])) if conflicts else 0,
            "patience": (draw(st.none() | st.sampled_from([1.0, 4.0])) if patience else None),
            "redial": draw(st.sampled_from([0.3, 0.5, 0.7])),
        })
    second = None
    queued = [i for i in range(1, n) if links[i - 1] == "cold"]
    if conflicts and queued:
        second = draw(st.none() | st.tuples(st.sampled_from(queued),
                                            st.integers(1, 8).map(lambda k: k / 4)))
    return {"rate": draw(st.integers(1, 16)) / 4, "stages": stages, "links": links,
            "second": second}


def load(net: dict):
    return load_scenario_text(render(net), file="<generated net>")


def test_the_generator_writes_what_the_docstring_says():
    # One hand-written description of each feature, read back through the validating loader.
    net = {"rate": 2.0, "links": ["warm", "cold"], "second": (2, 0.5), "stages": [
        {"staff": 4, "weight": 1, "hold": 2.0, "dist": "exponential", "link": 3, "close": 1,
         "rework": 1, "patience": 4.0, "redial": 0.5},
        {"staff": 3, "weight": 2, "hold": 1.5, "dist": "deterministic", "link": 1, "close": 0,
         "rework": 0, "patience": None, "redial": 0.5},
        {"staff": 2, "weight": 1, "hold": 1.0, "dist": "exponential", "link": 0, "close": 1,
         "rework": 0, "patience": None, "redial": 0.5},
    ]}
    s = load(net)
    assert set(s.transitions) == {
        "answer0", "hand0", "close0", "rework0", "take0", "back0", "give_up0", "transfer1",
        "answer2", "close2"}
    assert dict(s.places["talk0"].route) == {"hand0": 0.6, "close0": 0.2, "rework0": 0.2}
    assert dict(s.transitions["take0"].inputs) == {"handoff0": 1, "pool1": 2}
    assert dict(s.transitions["take0"].outputs) == {"talk1": 1, "pool0": 1}
    assert s.places["queue0"].abandon_to == "redial0"
    assert s.sources["more_calls"].into == "queue2"
    assert "queue1" not in s.places  # a stage entered by a warm hand-over has no queue


# --- LP = counters -------------------------------------------------------------------------------


def lp_equals_counters(net: dict) -> None:
    s = load(net)
    lp = throughput_lp(s)
    c = integrate_counters(s)
    assert c.rounding == 0.0  # holds are multiples of the grid step: the counters are exact
    assume(c.period is not None)  # slopes are read over whole periods of the increments
    scale = max([*lp.rates.values(), *lp.source_rates.values()])
    for q, rate in lp.rates.items():
        assert math.isclose(c.rates[q], rate, rel_tol=1e-8, abs_tol=1e-8 * scale), \
            (q, rate, c.rates[q])


FEW = settings(max_examples=12, deadline=None, derandomize=True,
               suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much])
MANY = settings(max_examples=150, deadline=None, derandomize=True,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much])


@FEW
@given(nets())
def test_lp_equals_the_integrated_counters(net):
    lp_equals_counters(net)


@pytest.mark.slow
@MANY
@given(nets())
def test_lp_equals_the_integrated_counters_thoroughly(net):
    lp_equals_counters(net)


# --- conservation of jobs --------------------------------------------------------------------------


def conserves_jobs(net: dict, replication: int, horizon: float, max_jobs: int | None) -> None:
    s = load(net)
    trace: list = []
    run = run_replication(s, replication, horizon=horizon, warmup=horizon / 4, seed=11,
                          max_jobs=max_jobs, trace=trace)
    t = run.totals
    assert t["arrivals"] == t["completed"] + t["abandoned"] + t["inside"], t
    # Recounted from the event trace, independently of the engine's counters: a job ends when
    # it fires a transition that ends jobs or abandons a place without abandon_to, only once,
    # and nothing happens to it afterwards; "inside" (counted place by place) is the rest.
    arrived, ended = set(), set()
    for _, what, name, job in trace:
        assert job not in ended, (what, name, job)
        if what == "arrive":
            arrived.add(job)
        elif job is not None:
            assert job in arrived
            if (what == "fire" and s.ends_job(name)) or (
                    what == "abandon" and s.places[name].abandon_to is None):
                ended.add(job)
    assert len(arrived) == t["arrivals"]
    assert len(ended) == t["completed"] + t["abandoned"]
    assert len(arrived - ended) == t["inside"]
    assert min(t.values()) >= 0
    assert run.end == horizon or (run.unstable and run.end < horizon)
    if max_jobs is not None:
        assert t["inside"] <= max_jobs  # an arrival beyond the limit stops the run
    if not any(sg["patience"] for sg in net["stages"]):
        assert t["abandoned"] == 0


conservation_cases = st.tuples(nets(patience=True), st.integers(0, 50),
                               st.sampled_from([20.0, 60.0]), st.sampled_from([None, None, 15]))


@FEW
@given(conservation_cases)
def test_every_run_conserves_jobs(case):
    conserves_jobs(*case)


@pytest.mark.slow
@MANY
@given(conservation_cases)
def test_every_run_conserves_jobs_thoroughly(case):
    conserves_jobs(*case)


# --- the fluid rate bounds the simulated one on conflict-free nets ----------------------------------

REPS, HORIZON, WARMUP = 8, 300.0, 50.0
#: Family-wise confidence of the checks on one net (per net, not per transition).
CONFIDENCE = 0.99


def fluid_bounds_simulation(net: dict) -> None:
    s = load(net)
    assert not any(len(s.outputs_of(p)) > 1 for p in (*s.places, *s.pools))  # conflict-free
    fluid = throughput_lp(s).rates
    sim = replicate(s, reps=REPS, horizon=HORIZON, warmup=WARMUP, seed=5, workers=1)
    # references.md: for stochastic event graphs the mean-value (fluid) throughput bounds the
    # stochastic one from above, so the data must not put the simulated rate above it: the lower
    # end of a two-sided Student t interval on the per-replication rates stays at or below the
    # bound, i.e. mean <= bound + half-width (the upper end of the interval on bound - rate). The
    # level is 99 % for the net as a whole: Bonferroni over its m transitions, each interval at
    # 1 - 0.01/m. Where the fluid rate is the arrival rate the two are equal in the long run, so
    # only the interval separates them.
    m = len(fluid)
    t = stats.t.ppf(1 - (1 - CONFIDENCE) / (2 * m), REPS - 1)
    # The bound is a long-run rate; a window of length L is finite. By hand: an agent slot (staff
    # / agents per job of a pool) that needs at least T per cycle finishes at most L/T + 1 cycles
    # in any window of length L (it may enter the window part-way through a cycle), and a
    # transition downstream of its bottleneck fires at most once more per job in service at the
    # window's start; so a window can show up to (agent slots in the net) / L above the long-run
    # rate. It matters with deterministic holds, whose runs all lock into the same phase and
    # have almost no spread between replications.
    slots = sum(pool.staff / s.transitions[s.outputs_of(name)[0]].inputs[name]
                for name, pool in s.pools.items())
    edge = slots / (HORIZON - WARMUP)
    for q, bound in fluid.items():
        x = sim.raw("transition", q, "rate")
        half = t * np.std(x, ddof=1) / math.sqrt(REPS)
        assert x.mean() - half <= bound + edge, (q, x.mean(), half, bound, edge)


@settings(max_examples=10, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.too_slow])
@given(nets(conflicts=False))
def test_fluid_rate_bounds_the_simulated_rate_without_conflicts(net):
    fluid_bounds_simulation(net)


@pytest.mark.slow
@settings(max_examples=300, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.too_slow])
@given(nets(conflicts=False))
def test_fluid_rate_bounds_the_simulated_rate_without_conflicts_thoroughly(net):
    fluid_bounds_simulation(net)
