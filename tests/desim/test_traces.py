"""Exact event traces on tiny deterministic nets (trace arrivals, deterministic holds).

Every expected sequence is derived by hand in the comment above it from design.md §4.2: a
transition fires as soon as its inputs hold enough available tokens, jobs leave oldest-first, all
events of one instant are applied before anything fires, priorities are honoured, patience 0 means
"taken at once or lost".
"""

from __future__ import annotations

import pytest

from desim import run_replication, stream_rng

from .conftest import fired

SINGLE = """
    name: single server (invented)
    run: {horizon: 20, warmup: 0, replications: 1, seed: 1}
    sources:
      calls: {trace: calls.txt, into: queue}
    pools:
      agent: 1
    places:
      queue: {}
      talk: {hold: 3}
    transitions:
      answer: {in: [queue, agent], out: [talk]}
      close: {in: [talk], out: [agent]}
"""


def test_single_server_fifo_trace_and_statistics(net):
    # Arrivals 0, 1, 2; one agent, hold 3. Job 0 is answered at 0 and closes at 3; job 1 waits
    # 1..3, answered at 3, closes at 6; job 2 waits 2..6, answered at 6, closes at 9. At 3 and 6
    # the close fires first (it returns the agent), then the answer.
    s = net(SINGLE, calls=[0, 1, 2])
    trace = []
    r = run_replication(s, 0, trace=trace)
    assert trace == [
        (0, "arrive", "calls", 0), (0, "fire", "answer", 0),
        (1, "arrive", "calls", 1), (2, "arrive", "calls", 2),
        (3, "fire", "close", 0), (3, "fire", "answer", 1),
        (6, "fire", "close", 1), (6, "fire", "answer", 2),
        (9, "fire", "close", 2),
    ]
    # Hand-derived statistics over [0, 20]: waits 0, 2, 4 -> mean 2; queue area 2 + 4 = 6 -> 0.3;
    # the agent is busy 9 of 20 time units; 3 firings of each transition -> rate 0.15.
    q = r.places["queue"]
    assert q["wait"] == pytest.approx(2.0)
    assert q["queue"] == pytest.approx(0.3)
    assert q["abandoned"] == 0.0
    assert r.pools["agent"]["busy"] == pytest.approx(0.45)
    assert r.transitions["answer"]["rate"] == pytest.approx(0.15)
    assert r.sources["calls"]["completed"] == 3
    assert r.sources["calls"]["total_wait"] == pytest.approx(2.0)
    assert r.totals == {"arrivals": 3, "completed": 3, "abandoned": 0, "inside": 0}


def test_warmup_window_counts_only_what_leaves_inside_it(net):
    # Same run measured over [2.5, 20] (length 17.5): tokens leaving the queue in the window are
    # job 1 (at 3, wait 2) and job 2 (at 6, wait 4) -> mean wait 3; became available in the
    # window: none (jobs became available at 0, 1, 2) -> abandoned share nan; queue area in the
    # window: job 1 on [2.5, 3] and job 2 on [2.5, 6] -> 0.5 + 3.5 = 4 -> 4/17.5.
    s = net(SINGLE, calls=[0, 1, 2])
    r = run_replication(s, 0, warmup=2.5)
    q = r.places["queue"]
    assert q["wait"] == pytest.approx(3.0)
    assert q["queue"] == pytest.approx(4 / 17.5)
    assert q["left"] == 2 and q["became"] == 0
    assert q["abandoned"] != q["abandoned"]  # nan: nothing became available in the window


PRIORITY = """
    name: priority at a pool (invented)
    run: {horizon: 20, warmup: 0, replications: 1, seed: 1}
    sources:
      b_calls: {trace: b.txt, into: qb}
      a_calls: {trace: a.txt, into: ivr}
    pools:
      desk: {staff: 1, priority: [serve_a, serve_b]}
    places:
      ivr: {hold: 1.5}
      qa: {}
      qb: {}
      talk_a: {hold: 2}
      talk_b: {hold: 2}
    transitions:
      done_b: {in: [talk_b], out: [desk]}
      serve_b: {in: [qb, desk], out: [talk_b]}
      serve_a: {in: [qa, desk], out: [talk_a]}
      done_a: {in: [talk_a], out: [desk]}
      to_qa: {in: [ivr], out: [qa]}
"""


def test_priority_at_a_pool_including_a_tie_at_one_instant(net):
    # Ids follow arrival order: b job 0 at 0, a job 1 at 0.5 (into the ivr, hold 1.5), b job 2
    # at 1. t=0: serve_b takes job 0 (desk busy until 2). t=1: job 2 waits in qb.
    # t=2: three things at one instant: talk_b ends (desk returns; its timer was set at 0),
    # the ivr hold of job 1 ends (timer set at 0.5, so processed after) and to_qa moves it to qa.
    # An engine firing event by event would hand the desk to job 2 before job 1 reached qa;
    # with all of the instant applied first, priority gives the desk to serve_a (job 1).
    # t=4: done_a; desk -> serve_b takes job 2; t=6: done_b.
    s = net(PRIORITY, b=[0, 1], a=[0.5])
    trace = []
    run_replication(s, 0, trace=trace)
    assert fired(trace, "fire") == [
        (0, "serve_b", 0),
        (2, "done_b", 0), (2, "to_qa", 1), (2, "serve_a", 1),
        (4, "done_a", 1), (4, "serve_b", 2),
        (6, "done_b", 2),
    ]


PLACE_PRIORITY = """
    name: priority at a place (invented)
    run: {horizon: 20, warmup: 0, replications: 1, seed: 1}
    sources:
      calls: {trace: calls.txt, into: queue}
    pools:
      expert: 1
      junior: 1
    places:
      queue: {priority: [by_expert, by_junior]}
      talk_e: {hold: 4}
      talk_j: {hold: 4}
    transitions:
      by_junior: {in: [queue, junior], out: [talk_j]}
      by_expert: {in: [queue, expert], out: [talk_e]}
      end_e: {in: [talk_e], out: [expert]}
      end_j: {in: [talk_j], out: [junior]}
"""


def test_priority_at_a_place_offers_jobs_to_outputs_in_order(net):
    # Arrivals 0, 1, 2, 3. Job 0 goes to the expert (first in priority) although the junior is
    # also free; job 1 to the junior; jobs 2 and 3 wait. t=4: the expert frees -> job 2 (oldest);
    # t=5: the junior frees -> job 3. t=8: end_e (job 2); t=9: end_j (job 3).
    s = net(PLACE_PRIORITY, calls=[0, 1, 2, 3])
    trace = []
    run_replication(s, 0, trace=trace)
    assert fired(trace, "fire") == [
        (0, "by_expert", 0), (1, "by_junior", 1),
        (4, "end_e", 0), (4, "by_expert", 2),
        (5, "end_j", 1), (5, "by_junior", 3),
        (8, "end_e", 2), (9, "end_j", 3),
    ]


ROUTED = """
    name: preselection routing (invented)
    run: {horizon: 50, warmup: 0, replications: 1, seed: 11}
    sources:
      calls: {trace: calls.txt, into: front}
    pools:
      sales_desk: 1
      closed_desk: 0
    places:
      front: {route: {to_sales: 0.5, to_closed: 0.5}}
      sales: {hold: 2}
    transitions:
      to_sales: {in: [front, sales_desk], out: [sales]}
      to_closed: {in: [front, closed_desk], out: [closed_desk]}
      sales_done: {in: [sales], out: [sales_desk]}
"""


def test_preselection_keeps_one_fifo_per_transition(net):
    # The route is drawn at entry: job i goes to to_sales when the i-th uniform of the place's
    # routing stream is below 0.5 (the cumulative proportion of the first output). Jobs routed to
    # the closed desk (no staff) wait for ever but must not block the sales jobs behind them
    # (one FIFO per (place, transition)). Arrivals every 0.5 from 0; one sales agent, hold 2:
    # the k-th sales job starts at max(its arrival, 2k) and ends 2 later.
    arrivals = [0.5 * i for i in range(12)]
    s = net(ROUTED, calls=arrivals)
    u = stream_rng(11, 0, "route", "front").random(len(arrivals))
    sales_jobs = [i for i in range(len(arrivals)) if u[i] < 0.5]
    assert 0 < len(sales_jobs) < len(arrivals)  # this seed routes both ways
    expected, free = [], 0.0
    for j in sales_jobs:
        start = max(arrivals[j], free)
        free = start + 2
        expected.append((start, "to_sales", j))
    trace = []
    r = run_replication(s, 0, trace=trace)
    got = [e for e in fired(trace, "fire") if e[1] == "to_sales"]
    assert got == [e for e in expected if e[0] < 50]
    assert r.places["front"]["left"] == len(sales_jobs)


def test_route_with_proportion_zero_is_never_taken(net):
    # With proportions {to_sales: 0, to_closed: 1} every job goes to the closed desk: no job is
    # ever served, all twelve stay inside.
    s = net(ROUTED.replace("to_sales: 0.5, to_closed: 0.5", "to_sales: 0, to_closed: 1"),
            calls=[0.5 * i for i in range(12)])
    r = run_replication(s, 0)
    assert r.transitions["to_sales"]["firings"] == 0
    assert r.totals["inside"] == 12


LOSS = """
    name: loss system (invented)
    run: {horizon: 20, warmup: 0, replications: 1, seed: 1}
    sources:
      calls: {trace: calls.txt, into: queue}
    pools:
      agent: 1
    places:
      queue: {patience: 0}
      talk: {hold: 3}
    transitions:
      answer: {in: [queue, agent], out: [talk]}
      close: {in: [talk], out: [agent]}
"""


def test_patience_zero_loses_callers_not_taken_at_once(net):
    # Arrivals 0, 1, 3, 3.5; one agent, hold 3, patience 0. Job 0 is taken at 0 (busy until 3);
    # job 1 is lost at 1. At 3 the arrival of job 2 is processed before the agent returns (its
    # timer was set at 0, before the hold's), yet job 2 is taken: patience 0 means "unless taken
    # at that instant". Job 3 at 3.5 is lost. Abandoned share 2/4, every wait 0.
    s = net(LOSS, calls=[0, 1, 3, 3.5])
    trace = []
    r = run_replication(s, 0, trace=trace)
    assert trace == [
        (0, "arrive", "calls", 0), (0, "fire", "answer", 0),
        (1, "arrive", "calls", 1), (1, "abandon", "queue", 1),
        (3, "arrive", "calls", 2), (3, "fire", "close", 0), (3, "fire", "answer", 2),
        (3.5, "arrive", "calls", 3), (3.5, "abandon", "queue", 3),
        (6, "fire", "close", 2),
    ]
    assert r.places["queue"]["abandoned"] == pytest.approx(0.5)
    assert r.places["queue"]["wait"] == 0.0
    assert r.sources["calls"]["abandoned_share"] == pytest.approx(0.5)


REDIAL = """
    name: redial loop (invented)
    run: {horizon: 30, warmup: 0, replications: 1, seed: 1}
    sources:
      calls: {trace: calls.txt, into: queue}
    pools:
      agent: 1
    places:
      queue: {patience: 2, abandon_to: redial}
      redial: {hold: 5}
      talk: {hold: 10}
    transitions:
      answer: {in: [queue, agent], out: [talk]}
      close: {in: [talk], out: [agent]}
      retry: {in: [redial], out: [queue]}
"""


def test_abandon_to_moves_the_job_and_a_deadline_tie_goes_to_service(net):
    # Arrivals 0, 1; one agent, hold 10, patience 2. Job 0 is taken at 0 (busy until 10). Job 1
    # waits from 1, abandons at 3 into redial (hold 5), is back in the queue at 8 with a new
    # deadline 10. At 10 the agent returns exactly at the deadline: deadlines act after every
    # other event of the instant, so job 1 is taken (not lost) and closes at 20.
    s = net(REDIAL, calls=[0, 1])
    trace = []
    r = run_replication(s, 0, trace=trace)
    assert trace == [
        (0, "arrive", "calls", 0), (0, "fire", "answer", 0),
        (1, "arrive", "calls", 1), (3, "abandon", "queue", 1),
        (8, "fire", "retry", 1),
        (10, "fire", "close", 0), (10, "fire", "answer", 1),
        (20, "fire", "close", 1),
    ]
    # queue: available 3 times (job 0 at 0, job 1 at 1 and 8), 1 abandonment -> 1/3; waits
    # 0, 2, 2 -> 4/3. Job 1 ended completed, having waited 4 in all: per-job total wait 2.
    q = r.places["queue"]
    assert q["abandoned"] == pytest.approx(1 / 3)
    assert q["wait"] == pytest.approx(4 / 3)
    src = r.sources["calls"]
    assert (src["completed"], src["abandoned"]) == (2, 0)
    assert src["total_wait"] == pytest.approx(2.0)


STALE = """
    name: stale deadline (invented)
    run: {horizon: 30, warmup: 0, replications: 1, seed: 1}
    sources:
      calls: {trace: calls.txt, into: queue}
    pools:
      agent: 1
    places:
      queue: {patience: 5}
      talk: {hold: {dist: empirical, values: [1]}}
    transitions:
      answer: {in: [queue, agent], out: [talk]}
      close: {in: [talk], out: [agent]}
"""


def test_deadline_of_a_taken_job_never_acts_on_a_later_one(net):
    # Hold 1 for everyone. Arrivals 0, 0.5, 1.2, 1.4: job 0 taken at 0; job 1 (deadline 5.5)
    # taken at 1; job 2 (deadline 6.2) taken at 2; job 3 (deadline 6.4) taken at 3. The timer
    # armed for job 1's deadline still fires at 5.5 and must find nothing to do: no abandonment.
    s = net(STALE, calls=[0, 0.5, 1.2, 1.4])
    trace = []
    r = run_replication(s, 0, trace=trace)
    assert fired(trace, "abandon") == []
    assert [e for e in fired(trace, "fire") if e[1] == "answer"] == [
        (0, "answer", 0), (1, "answer", 1), (2, "answer", 2), (3, "answer", 3)]
    assert r.places["queue"]["abandoned"] == 0.0


WEIGHTS = """
    name: arc weights (invented)
    run: {horizon: 20, warmup: 0, replications: 1, seed: 1}
    sources:
      cases: {trace: cases.txt, into: queue}
    pools:
      team: 3
    places:
      queue: {}
      review: {hold: 4}
    transitions:
      start: {in: {queue: 1, team: 2}, out: [review]}
      finish: {in: [review], out: {team: 2}}
"""


def test_arc_weights_take_and_return_several_agents(net):
    # Each review needs 2 of the 3 team members. Arrivals 0, 1: case 0 starts at 0 (1 member
    # left, not enough); case 1 waits until 4 when case 0 returns 2 members; finishes at 8.
    # Busy member-time 2*4 + 2*4 = 16 of 3*20 = 60.
    s = net(WEIGHTS, cases=[0, 1])
    trace = []
    r = run_replication(s, 0, trace=trace)
    assert fired(trace, "fire") == [
        (0, "start", 0), (4, "finish", 0), (4, "start", 1), (8, "finish", 1)]
    assert r.pools["team"]["busy"] == pytest.approx(16 / 60)


SCHEDULED = """
    name: staffing schedule (invented)
    run: {horizon: 40, warmup: 0, replications: 1, seed: 1}
    sources:
      calls: {trace: calls.txt, into: queue}
    pools:
      agents: {schedule: {step: 10, staff: [2, 1]}}
    places:
      queue: {}
      talk: {hold: 8}
    transitions:
      answer: {in: [queue, agents], out: [talk]}
      close: {in: [talk], out: [agents]}
"""


def test_schedule_cut_takes_effect_as_busy_agents_finish(net):
    # Staff 2 on [0, 10), 1 after. Arrivals 5, 6, 11, 12, hold 8. Both agents are busy at the cut
    # (jobs 0 and 1 until 13 and 14): nobody leaves at 10. The agent freed at 13 leaves instead of
    # taking job 2; the one freed at 14 stays and takes job 2 (until 22), then job 3 (until 30).
    s = net(SCHEDULED, calls=[5, 6, 11, 12])
    trace = []
    r = run_replication(s, 0, trace=trace)
    assert fired(trace, "fire") == [
        (5, "answer", 0), (6, "answer", 1),
        (13, "close", 0), (14, "close", 1), (14, "answer", 2),
        (22, "close", 2), (22, "answer", 3), (30, "close", 3)]
    # busy agent-time 4 * 8 = 32; on duty 2 agents on [0, 13] and 1 on [13, 40] = 26 + 27 = 53.
    assert r.pools["agents"]["busy"] == pytest.approx(32 / 53)


def test_schedule_cut_removes_idle_agents_at_once(net):
    # Arrival 5 (hold 8, busy until 13); at 10 one of the two agents is idle and leaves at once,
    # so the caller arriving at 11 waits until 13.
    s = net(SCHEDULED, calls=[5, 11])
    trace = []
    run_replication(s, 0, trace=trace)
    assert fired(trace, "fire") == [
        (5, "answer", 0), (13, "close", 0), (13, "answer", 1), (21, "close", 1)]


def test_schedule_increase_adds_agents_at_the_boundary(net):
    # Staff 0 on [0, 10), 1 after: the caller arriving at 2 is answered at 10.
    s = net(SCHEDULED.replace("staff: [2, 1]", "staff: [0, 1]"), calls=[2])
    trace = []
    r = run_replication(s, 0, trace=trace)
    assert fired(trace, "fire") == [(10, "answer", 0), (18, "close", 0)]
    # on duty 1 agent on [10, 40] = 30, busy 8 -> 8/30
    assert r.pools["agents"]["busy"] == pytest.approx(8 / 30)


def test_interval_table_counts_each_period(net):
    # SINGLE with arrivals 0, 1, 2, 12 and interval 10: period [0, 10) has 3 arrivals and 3
    # completions (at 3, 6, 9); [10, 20) has 1 arrival and 1 completion (at 15).
    s = net(SINGLE, calls=[0, 1, 2, 12])
    r = run_replication(s, 0, interval=10)
    t = r.intervals.set_index(["interval", "metric"])["value"]
    assert t[(0, "arrivals")] == 3 and t[(0, "completed")] == 3
    assert t[(1, "arrivals")] == 1 and t[(1, "completed")] == 1
    # queue area in [0, 10): 2 + 4 = 6 -> mean 0.6; in [10, 20): job 3 waits 0
    assert t[(0, "queue")] == pytest.approx(0.6)
    assert t[(1, "queue")] == pytest.approx(0.0)
