"""Random runs: conservation, Little's law, reproducibility, common random numbers, the job limit,
per-interval tables and the JSON contract (design.md §4.2, §5)."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

import desim
from desim import ConservationError, replicate, run_replication
from desim.engine import Engine
from desim.net import build_net
from fluid.structure import waiting_places

from .conftest import fired

MMC = """
    name: M/M/c with patience (invented)
    time_unit: min
    run: {horizon: 400, warmup: 40, replications: 8, seed: 5}
    sources:
      calls: {rate: 9.0, into: queue}
    pools:
      agents: 10
    places:
      queue: {patience: {dist: exponential, mean: 2.0}}
      talk: {hold: {dist: exponential, mean: 1.0}}
    transitions:
      answer: {in: [queue, agents], out: [talk]}
      close: {in: [talk], out: [agents]}
    targets:
      queue: {within: 0.5, goal: 0.8}
"""

# The design.md §3 example net (invented demo data), shortened.
CONTACT = """
    name: Fernhollow Utilities customer line (invented demo data)
    time_unit: min
    run: {horizon: 300, warmup: 30, replications: 3, seed: 7}
    sources:
      calls: {rate: 4.0, into: ivr}
    pools:
      front_desk: 14
      supervisors: 2
      billing_desk: {staff: 8, priority: [billing_answer, callback_start]}
    places:
      ivr:          {hold: {dist: deterministic, value: 0.75},
                     route: {ivr_done: 0.25, ivr_to_agent: 0.75}}
      front_queue:  {patience: {dist: exponential, mean: 3.0}, abandon_to: redial}
      redial:       {hold: {dist: exponential, mean: 10.0}, route: {redial_back: 0.5, give_up: 0.5}}
      front_talk:   {hold: {dist: lognormal, mean: 4.0, cv: 0.8},
                     route: {front_close: 0.6, front_transfer: 0.2, front_callback: 0.1,
                             front_consult: 0.1}}
      consult_wait: {}
      consulting:   {hold: {dist: exponential, mean: 2.0}}
      front_wrap:   {hold: {dist: lognormal, mean: 2.0, cv: 0.5}}
      billing_queue: {patience: {dist: exponential, mean: 6.0}}
      billing_talk: {hold: {dist: gamma, mean: 7.0, cv: 0.6}}
      callback_list: {}
      callback_talk: {hold: {dist: exponential, mean: 5.0}}
    transitions:
      ivr_done:       {in: [ivr], out: []}
      ivr_to_agent:   {in: [ivr], out: [front_queue]}
      redial_back:    {in: [redial], out: [front_queue]}
      give_up:        {in: [redial], out: []}
      front_answer:   {in: [front_queue, front_desk], out: [front_talk]}
      front_close:    {in: [front_talk], out: [front_desk]}
      front_transfer: {in: [front_talk], out: [front_desk, billing_queue]}
      front_callback: {in: [front_talk], out: [front_desk, callback_list]}
      front_consult:  {in: [front_talk], out: [consult_wait]}
      consult_start:  {in: [consult_wait, supervisors], out: [consulting]}
      consult_end:    {in: [consulting], out: [supervisors, front_wrap]}
      wrap_close:     {in: [front_wrap], out: [front_desk]}
      billing_answer: {in: [billing_queue, billing_desk], out: [billing_talk]}
      billing_close:  {in: [billing_talk], out: [billing_desk]}
      callback_start: {in: [callback_list, billing_desk], out: [callback_talk]}
      callback_close: {in: [callback_talk], out: [billing_desk]}
    targets:
      front_queue:   {within: 0.5, goal: 0.80}
      billing_queue: {within: 2.0, goal: 0.80}
"""


@pytest.mark.parametrize("text", [MMC, CONTACT], ids=["mmc", "contact"])
def test_conservation_holds_on_random_nets(net, text):
    # run_replication checks arrivals = completed + abandoned + inside itself (and raises
    # ConservationError otherwise); check the totals it reports as well.
    s = net(text)
    for rep in range(2):
        r = run_replication(s, rep, horizon=200, warmup=20, record_jobs=True)
        t = r.totals
        assert t["arrivals"] == t["completed"] + t["abandoned"] + t["inside"]
        assert t["arrivals"] > 100
        # job records: one per job that ended, ids unique, end >= arrival
        assert len(r.jobs) == t["completed"] + t["abandoned"]
        assert len({j[0] for j in r.jobs}) == len(r.jobs)
        assert all(j[3] >= j[2] for j in r.jobs)


def test_conservation_error_is_raised_when_the_books_do_not_balance(net):
    s = net(MMC)
    engine = Engine(build_net(s, 1, 0))
    engine.start()
    engine.run(50)
    engine.check_conservation()
    engine.completed += 1  # a job counted twice
    with pytest.raises(ConservationError, match="conservation violated"):
        engine.check_conservation()


def test_littles_law_per_place(net):
    # Little's law L = λW holds on every sample path up to edge terms (jobs present at the window
    # ends), so per replication queue ≈ (tokens that left / window length) × wait. Checked for
    # the differences across replications: their mean must lie within the 95 % half-width of the
    # queue estimate (the replication interval of the quantity being checked).
    s = net(MMC)
    res = replicate(s, reps=6, horizon=300, warmup=30, workers=1)
    length = 300 - 30
    for place in ("queue",):
        q = res.raw("place", place, "queue")
        lam = res.raw("place", place, "left") / length
        w = res.raw("place", place, "wait")
        diff = q - lam * w
        assert abs(diff.mean()) <= res.places[place]["queue"].half_width
        assert q.mean() > 0.05  # the check is not vacuous: there is a queue


def test_same_seed_same_numbers_whatever_the_workers(net):
    s = net(MMC)
    a = replicate(s, reps=4, horizon=150, warmup=10, workers=1, interval=50)
    b = replicate(s, reps=4, horizon=150, warmup=10, workers=2, interval=50)
    assert a.to_frame().equals(b.to_frame())
    assert a.per_replication().equals(b.per_replication())
    assert a.intervals.equals(b.intervals)
    c = replicate(s, reps=4, horizon=150, warmup=10, workers=1, seed=6)
    assert not a.to_frame().equals(c.to_frame())


def test_executor_argument_is_used(net):
    # Any concurrent.futures executor plugs in; a thread pool gives the same numbers.
    from concurrent.futures import ThreadPoolExecutor

    s = net(MMC)
    done = []
    with ThreadPoolExecutor(2) as ex:
        a = replicate(s, reps=3, horizon=100, warmup=10, executor=ex,
                      progress=lambda: done.append(1))
    b = replicate(s, reps=3, horizon=100, warmup=10, workers=1)
    assert a.to_frame().equals(b.to_frame())
    assert len(done) == 3


UNRELATED = """
      side: {rate: 2.0, into: side_queue}
    pools:
      side_desk: 3
"""
UNRELATED_PARTS = """
      side_queue: {patience: {dist: exponential, mean: 1.0}}
      side_talk: {hold: {dist: exponential, mean: 1.0}}
    transitions:
      side_answer: {in: [side_queue, side_desk], out: [side_talk]}
      side_close: {in: [side_talk], out: [side_desk]}"""


def _with_unrelated_station(text: str) -> str:
    text = text.replace("""
    pools:""", UNRELATED, 1)
    return text.replace("""
    transitions:""", UNRELATED_PARTS, 1)


def test_common_random_numbers_adding_an_unrelated_station(net):
    # Streams are keyed by (replication, kind, name): a new source, pool and places change no
    # draw of the existing ones, so the original net's whole trace is unchanged.
    base = net(MMC)
    bigger = net(_with_unrelated_station(MMC))
    assert "side_queue" in bigger.places
    ta, tb = [], []
    run_replication(base, 3, horizon=100, trace=ta)
    run_replication(bigger, 3, horizon=100, trace=tb)
    names = set(base.transitions) | set(base.sources) | set(base.places)
    mine = [(t, w, n) for t, w, n, _ in tb if n in names]
    assert [(t, w, n) for t, w, n, _ in ta] == mine


def _holds_by_entry(trace):
    """{k: hold of the k-th job to enter talk} for the jobs whose hold ended."""
    answered = {}
    holds = {}
    for t, w, n, j in trace:
        if w == "fire" and n == "answer":
            answered[j] = (len(answered), t)
        elif w == "fire" and n == "close":
            holds[answered[j][0]] = t - answered[j][1]
    return holds


def test_common_random_numbers_across_staffing_plans(net):
    # Two staffing plans with the same seed see the same arrival times, and the k-th job to
    # enter talk gets the same hold draw in both.
    a, b = net(MMC), net(MMC.replace("agents: 10", "agents: 7"))
    ta, tb = [], []
    ra = run_replication(a, 0, horizon=100, record_jobs=True, trace=ta)
    rb = run_replication(b, 0, horizon=100, record_jobs=True, trace=tb)
    arrivals_a = [t for t, w, _, _ in ta if w == "arrive"]
    arrivals_b = [t for t, w, _, _ in tb if w == "arrive"]
    assert arrivals_a == arrivals_b
    ha, hb = _holds_by_entry(ta), _holds_by_entry(tb)
    common = sorted(set(ha) & set(hb))
    assert len(common) > 300
    np.testing.assert_allclose([ha[k] for k in common], [hb[k] for k in common], rtol=0, atol=1e-9)
    assert ra.places["queue"]["wait"] < rb.places["queue"]["wait"]  # the plans do differ


UNSTABLE = """
    name: overloaded, no patience (invented)
    run: {horizon: 100000, warmup: 10, replications: 2, seed: 1}
    sources:
      calls: {rate: 2.0, into: queue}
    pools:
      agent: 1
    places:
      queue: {}
      talk: {hold: {dist: exponential, mean: 1.0}}
    transitions:
      answer: {in: [queue, agent], out: [talk]}
      close: {in: [talk], out: [agent]}
"""


def test_job_limit_ends_an_unstable_run_cleanly(net):
    # Inflow 2 per time unit into one agent serving 1: the queue grows ~1 per time unit, so 500
    # jobs inside are reached after roughly 500 time units, far before the horizon.
    s = net(UNSTABLE)
    res = replicate(s, reps=2, workers=1, max_jobs=500)
    assert res.unstable == (True, True) and res.unstable_replications == 2
    assert any("job limit" in w for w in res.warnings)
    for r in res.runs:
        assert r.end < 5000
        assert r.totals["inside"] == 500
        assert r.transitions["answer"]["rate"] == pytest.approx(1.0, abs=0.2)
    assert res.to_json()["unstable_replications"] == 2


def test_heap_of_deadlines_stays_proportional_to_jobs_waiting(net):
    # Lazy deletion with compaction: entries in a place's deadline heap never exceed
    # 3 × live + 33 (stale ones are purged when they pass 2 × live + 32).
    s = net(MMC.replace("agents: 10", "agents: 12"))
    nt = build_net(s, 2, 0)
    engine = Engine(nt)
    engine.start()
    worst = []

    def look(e):
        p = nt.places["queue"]
        worst.append(len(p.heap) - 3 * p.n_avail)
        if e.env.now < 499:
            e.at(e.env.now + 1, look)

    engine.at(1, look)
    engine.run(500)
    assert max(worst) <= 33


def test_profile_arrivals_are_exact_per_interval(net):
    # Rates 3, 0, 1 on [0,100), [100,200), [200,...): no arrival at all in the zero interval
    # (exact, never by rounding), and Poisson counts elsewhere: mean = rate × 100, sd = its
    # square root; a 4-sd band fails by chance with probability 6e-5.
    s = net("""
        name: profile (invented)
        run: {horizon: 400, warmup: 0, replications: 1, seed: 9}
        sources:
          calls: {profile: {step: 100, rates: [3, 0, 1]}, into: queue}
        pools:
          agents: 50
        places:
          queue: {}
          talk: {hold: 0.1}
        transitions:
          answer: {in: [queue, agents], out: [talk]}
          close: {in: [talk], out: [agents]}
    """)
    for rep in range(3):
        trace = []
        run_replication(s, rep, trace=trace)
        times = np.array([t for t, n, _ in fired(trace, "arrive")])
        counts = np.histogram(times, bins=[0, 100, 200, 300, 400])[0]
        assert counts[1] == 0
        for count, mean in zip(counts[[0, 2, 3]], (300, 100, 100)):
            assert abs(count - mean) < 4 * math.sqrt(mean)


def test_result_structure_and_json_contract(net):
    s = net(MMC)
    res = replicate(s, reps=3, horizon=100, warmup=10, workers=1, interval=25)
    doc = json.loads(json.dumps(res.to_json()))  # plain JSON, no NaN
    assert doc["replications"] == 3
    assert set(doc["transitions"]) == {"answer", "close"}
    assert set(doc["transitions"]["answer"]) == {"rate"}
    assert set(doc["places"]["queue"]) == {"wait", "abandoned", "queue", "served_within", "delayed"}
    assert set(doc["places"]["talk"]) == {"wait", "abandoned", "queue", "delayed"}
    assert set(doc["pools"]["agents"]) == {"busy"}
    assert set(doc["places"]["queue"]["wait"]) == {"mean", "low", "high", "n"}
    assert doc["places"]["queue"]["wait"]["n"] == 3
    frame = res.to_frame()
    assert list(frame.columns) == ["kind", "name", "metric", "mean", "low", "high", "n"]
    # (the metrics of the per-interval table pinned in the session's CONTRACT.md)
    assert set(res.intervals["metric"]) == {"arrivals", "completed", "abandoned",
                                            "service_level", "abandonment", "wait", "queue",
                                            "busy", "staff"}
    assert res.intervals["interval"].max() == 3
    assert isinstance(res.places["queue"]["wait"], desim.Estimate)
    assert res.sources["calls"]["arrivals"].mean > 0


def test_warmup_warning_when_the_start_is_far_from_steady_state(net):
    # 50 agents start idle and empty under an offered load of 5.5 × 10 = 55 with patience of
    # mean 20: the queue builds up over several mean holds. With no warm-up at all MSER-5 should
    # ask to discard a beginning.
    s = net(MMC.replace("rate: 9.0", "rate: 5.5").replace("mean: 1.0}", "mean: 10.0}")
            .replace("agents: 10", "agents: 50").replace("mean: 2.0}", "mean: 20.0}"))
    res = replicate(s, reps=4, horizon=400, warmup=0, workers=1)
    assert res.warmup_suggestion.time > 0
    assert any("warm-up" in w or "run longer" in w for w in res.warnings)


def test_record_waits_keeps_the_waits_of_the_window(net):
    from .test_traces import SINGLE

    s = net(SINGLE, calls=[0, 1, 2])
    r = run_replication(s, 0, record_waits=True)
    # hand-derived in test_traces: waits 0, 2, 4 in the queue, none abandoned
    assert r.waits["queue"]["taken"].tolist() == [0, 2, 4]
    assert r.waits["queue"]["abandoned"].size == 0


@pytest.mark.slow
def test_littles_law_on_every_waiting_place_of_the_contact_net(net):
    # As test_littles_law_per_place, on the design.md example net: every place where jobs wait.
    s = net(CONTACT)
    res = replicate(s, reps=10, horizon=2000, warmup=100, workers=2)
    length = 2000 - 100
    for place in waiting_places(s):
        q = res.raw("place", place, "queue")
        diff = q - res.raw("place", place, "left") / length * res.raw("place", place, "wait")
        assert abs(diff.mean()) <= max(res.places[place]["queue"].half_width, 1e-12), place
