"""The per-interval table by arrival interval (desim.by_arrival, desim.run._interval_table):
each job counted in the interval it became available (a place) or arrived (a caller).

Expected values are derived by hand in the comments from design.md §4.2 on tiny deterministic
nets (trace arrivals, deterministic holds and patience)."""

from __future__ import annotations

import math

import pytest

from desim import replicate, run_replication

IMPATIENT = """
    name: one impatient queue (invented)
    run: {horizon: 30, warmup: 0, replications: 1, seed: 1}
    sources:
      calls: {trace: calls.txt, into: queue}
    pools:
      agent: 1
    places:
      queue: {patience: 5}
      talk: {hold: 4}
    transitions:
      answer: {in: [queue, agent], out: [talk]}
      close: {in: [talk], out: [agent]}
    targets:
      queue: {within: 1, goal: 0.8}
"""

# Arrivals 0, 1, 2, 8, 12, 29; one agent, hold 4, patience 5, intervals of 10.
# Job 0 is taken at 0 (wait 0; busy until 4). Job 1 waits 1..4 (taken, wait 3; busy until 8).
# Job 2 abandons at 7 after waiting 5. At 8 job 3 arrives (its arrival was scheduled at 2,
# before the hold end at 8 was, at 4) and waits for the close at the same instant: wait 0
# (busy until 12). Job 4 likewise at 12 (busy until 16). Job 5 arrives at 29, is taken at once
# and is still in its hold at the end (30).
ARRIVALS = [0, 1, 2, 8, 12, 29]


def _table(r):
    return r.intervals.set_index(["interval", "metric", "name"])["value"]


def test_hand_checked_table_by_arrival_interval(net):
    r = run_replication(net(IMPATIENT, calls=ARRIVALS), 0, interval=10)
    t = _table(r)
    # interval 0 [0, 10): jobs 0..3 became available; taken within 1: jobs 0 and 3; job 2
    # abandoned (counted against): 2 / 4. Wait by arrival: (0 + 3 + 5 + 0) / 4 = 2.
    assert t[(0, "service_level", "queue")] == 0.5
    assert t[(0, "wait", "queue")] == 2.0
    # interval 1 [10, 20): job 4, wait 0; interval 2 [20, 30): job 5, wait 0 (it left the queue)
    assert t[(1, "service_level", "queue")] == 1.0
    assert t[(1, "wait", "queue")] == 0.0
    assert t[(2, "service_level", "queue")] == 1.0
    # per caller: of the 4 callers of interval 0 (all ended) 1 abandoned; of interval 1, none;
    # the caller of interval 2 is still inside at the end: nothing to measure
    assert t[(0, "abandonment", "")] == 0.25
    assert t[(1, "abandonment", "")] == 0.0
    assert math.isnan(t[(2, "abandonment", "")])
    # counts as they happened: completions at 4, 8 | 12, 16; the abandonment at 7
    assert [t[(i, "arrivals", "")] for i in range(3)] == [4, 1, 1]
    assert [t[(i, "completed", "")] for i in range(3)] == [2, 2, 0]
    assert [t[(i, "abandoned", "")] for i in range(3)] == [1, 0, 0]
    # the agent: busy all of [0, 10) (0-4, 4-8, 8-12), 10-16 of [10, 20), 29-30 of [20, 30)
    assert [t[(i, "busy", "agent")] for i in range(3)] == [1.0, 0.6, 0.1]
    assert [t[(i, "staff", "agent")] for i in range(3)] == [1.0, 1.0, 1.0]
    # queue area in [0, 10): job 1 waits 3, job 2 waits 5 -> 0.8
    assert t[(0, "queue", "queue")] == pytest.approx(0.8)


PATIENT = IMPATIENT.replace("queue: {patience: 5}", "queue: {}").replace("hold: 4", "hold: 3")


def test_tokens_taken_at_once_count_in_their_interval(net):
    # Without patience the engine's shortcuts take jobs 0 and 3 without a FIFO (the snapshots
    # count them). Arrivals 0, 1, 2, 12, hold 3: waits 0, 2, 4 in [0, 10) (within 1: job 0
    # only: 1/3; mean wait 2), 0 in [10, 20). The same table without the shortcuts.
    s = net(PATIENT, calls=[0, 1, 2, 12])
    t = _table(run_replication(s, 0, interval=10))
    assert t[(0, "service_level", "queue")] == pytest.approx(1 / 3)
    assert t[(0, "wait", "queue")] == 2.0
    assert t[(1, "service_level", "queue")] == 1.0
    assert t[(0, "abandonment", "")] == 0.0
    plain = run_replication(s, 0, interval=10, shortcuts=False).intervals
    assert run_replication(s, 0, interval=10).intervals.equals(plain)


def test_a_job_waiting_across_a_boundary_counts_where_it_arrived(net):
    # Arrivals 0, 1, 9.5 with hold 12: job 0 is taken at once (busy until 12); job 1 waits
    # 1..6 and abandons; job 2 arrives at 9.5 and is taken at 12, in interval 1, with a wait
    # of 2.5: it counts in interval 0, where it arrived. Interval 0: within 1 only job 0 of 3;
    # waits (0 + 5 + 2.5) / 3; 1 caller of 3 abandoned. Nothing became available in [10, 20).
    s = net(IMPATIENT.replace("hold: 4", "hold: 12"), calls=[0, 1, 9.5])
    t = _table(run_replication(s, 0, interval=10))
    assert t[(0, "service_level", "queue")] == pytest.approx(1 / 3)
    assert t[(0, "wait", "queue")] == 2.5
    assert t[(0, "abandonment", "")] == pytest.approx(1 / 3)
    assert math.isnan(t[(1, "service_level", "queue")])
    assert math.isnan(t[(1, "wait", "queue")])


MARKOV = """
    name: M/M/2+M (invented)
    time_unit: min
    run: {horizon: 400, warmup: 0, replications: 4, seed: 11}
    sources:
      calls: {rate: 1.8, into: queue}
    pools:
      agents: 2
    places:
      queue: {patience: {dist: exponential, mean: 2}}
      talk: {hold: {dist: exponential, mean: 1}}
    transitions:
      answer: {in: [queue, agents], out: [talk]}
      close: {in: [talk], out: [agents]}
    targets:
      queue: {within: 0.5, goal: 0.8}
"""


def test_one_interval_gives_the_window_service_level(net):
    # One interval covering [0, horizon] with no warm-up: the jobs counted by arrival are the
    # window's jobs that left, so the figure equals served_within in every replication.
    s = net(MARKOV)
    for rep in range(3):
        r = run_replication(s, rep, interval=400)
        t = _table(r)
        assert t[(0, "service_level", "queue")] == r.places["queue"]["served_within"]
        assert t[(0, "wait", "queue")] == pytest.approx(r.places["queue"]["wait"], rel=1e-12)
        assert t[(0, "abandonment", "")] == r.sources["calls"]["callers_abandoned"] + \
            r.sources["calls"]["callers_lost"]


def test_counts_by_arrival_sum_to_the_window_counts(net, monkeypatch):
    # With no warm-up, the jobs counted by arrival interval, summed over the intervals, are the
    # window's: jobs that left the queue, taken within the target, abandoned; callers ended and
    # ended unserved. (The counts are read where the table is built.)
    import desim.run as run

    seen = {}
    build = run._interval_table

    def spy(scenario, net_, times, snaps, inside):
        seen.update(net=net_, times=times, snaps=snaps, inside=inside)
        return build(scenario, net_, times, snaps, inside)

    monkeypatch.setattr(run, "_interval_table", spy)
    r = run_replication(net(MARKOV), 0, interval=25)
    q, times, snaps = seen["net"].places["queue"], seen["times"], seen["snaps"]
    k = len(times) - 1
    assert k == 16
    at_once = sum(run._split(seen["net"], snaps[i + 1] - snaps[i])[0]["queue"]["at_once"]
                  for i in range(k))
    tally = q.tally
    m = r.places["queue"]
    assert at_once + sum(tally.left) == m["left"] == m["became"] - m["waiting_at_end"]
    assert sum(tally.abandoned) == m["abandoned_count"]
    assert at_once + sum(tally.within) == round(m["served_within"] * m["left"])
    src = r.sources["calls"]
    assert src["arrivals"] - sum(seen["inside"]) == src["callers_ended"]
    callers = next(iter(seen["net"].sources.values())).tally
    assert sum(callers.unserved_by) == src["abandoned"]
    assert sum(tally.wait_sum) == pytest.approx(m["wait"] * m["left"], rel=1e-12)


def test_replicated_table_has_every_contract_metric_within_bounds(net):
    r = replicate(net(MARKOV), reps=4, horizon=400, warmup=0, workers=1, interval=100)
    metrics = set(r.intervals["metric"])
    assert metrics == {"arrivals", "completed", "abandoned", "service_level", "abandonment",
                       "wait", "queue", "busy", "staff"}
    shares = r.intervals[r.intervals.metric.isin(["service_level", "abandonment", "busy"])]
    assert (shares["low"] >= 0).all() and (shares["high"] <= 1).all()
    assert (r.intervals["low"].dropna() >= 0).all()
    assert (r.intervals["n"] == 4).all()


@pytest.mark.parametrize("convention,first,window", [
    # interval 0 (jobs 0..3): taken within 1: jobs 0 and 3; taken: 0, 1, 3; job 2 abandoned
    # after waiting 5. Window (all 6 jobs left the queue; 5 taken, 4 within): against 4/6.
    ("against", 2 / 4, 4 / 6),
    ("excluded", 2 / 3, 4 / 5),  # job 2 out of both sides
    ("{excluded_within: 6}", 2 / 3, 4 / 5),  # it waited 5 <= 6: out
    ("{excluded_within: 4}", 2 / 4, 4 / 6),  # it waited 5 > 4: counted against
])
def test_conventions_by_hand(net, convention, first, window):
    text = IMPATIENT.replace("goal: 0.8}", f"goal: 0.8, abandoned: {convention}}}")
    r = run_replication(net(text, calls=ARRIVALS), 0, interval=10)
    t = _table(r)
    assert t[(0, "service_level", "queue")] == pytest.approx(first, abs=1e-15)
    assert t[(1, "service_level", "queue")] == 1.0
    assert r.places["queue"]["served_within"] == pytest.approx(window, abs=1e-15)


def test_served_and_abandoned_waits_apart(net):
    # The hand trace above, whole window: taken waits 0, 3, 0, 0, 0 (jobs 0, 1, 3, 4, 5), one
    # abandoner after 5 (job 2). Numpy's linear percentiles: served p80 = 0.6 (0.8 × 4 = 3.2nd
    # of 0, 0, 0, 0, 3 lies 0.2 of the way from 0 to 3); the abandoner's p50 = 5; of all six,
    # p80 = 3 (0.8 × 5 = 4th of 0, 0, 0, 0, 3, 5).
    r = run_replication(net(IMPATIENT, calls=ARRIVALS), 0, record_waits=True)
    q = r.places["queue"]
    assert q["served_wait_p50"] == 0.0 and q["served_wait_p80"] == pytest.approx(0.6)
    assert q["abandoned_wait_p50"] == 5.0 and q["abandoned_wait_p95"] == 5.0
    assert q["wait_p80"] == 3.0
    assert q["asa"] == pytest.approx(3 / 5)


def test_wait_distribution_json_keeps_its_keys_and_adds_the_groups(net):
    r = replicate(net(MARKOV), reps=3, horizon=200, warmup=0, workers=1)
    doc = r.to_json()
    w = doc["wait_distribution"]["queue"]
    assert set(w) == {"asa", "wait_percentiles", "served_wait_percentiles",
                      "abandoned_wait_percentiles"}
    assert set(w["served_wait_percentiles"]) == set(w["wait_percentiles"]) == {"50", "80", "90",
                                                                                "95"}
    assert set(doc["places"]["queue"]) == {"wait", "abandoned", "queue", "served_within",
                                           "delayed"}
    assert doc["targets"] == {"queue": {"within": 0.5, "goal": 0.8, "abandoned": "against",
                                        "excluded_within": None,
                                        "describes": "within 0.5 min, abandoners counted "
                                                     "against"}}
    for group in ("served_wait_percentiles", "abandoned_wait_percentiles"):
        for est in w[group].values():
            assert est["n"] == 3 and 0 <= est["low"] <= est["mean"] <= est["high"]
