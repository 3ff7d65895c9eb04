"""Per-caller outcomes beside per-visit ones (issue 13 item 2; design.md §4.2).

A redial net (invented): callers wait in ``queue`` with some patience; a caller whose patience
runs out goes (``abandon_to``) to ``redial``, holds there, and then either gives up (transition
``give_up``, marked ``outcome: abandoned``, route share q) or calls again (``retry``, share 1 - q,
back into the queue). A per-visit figure counts every patience expiry and every return to the
queue; a per-caller figure counts each caller once, by how they finally ended.

Deterministic cases are checked exactly; the one statistical check (the mean number of visits)
uses a fixed seed and the 99.9 % Student t interval of iid per-caller counts.
"""

from __future__ import annotations

import textwrap

import numpy as np
import pytest
from scipy import stats

from desim import replicate, run_replication
from fluid.loading import load_scenario_text

Q = 0.25  # share of redials that give up


def redial(staff: int, patience: str, *, horizon: float = 2000.0, warmup: float = 100.0,
           give_up: str = "abandoned"):
    """The redial net with ``staff`` agents and queue patience ``patience`` (YAML)."""
    return load_scenario_text(textwrap.dedent(f"""\
        name: redial line (invented)
        run: {{horizon: {horizon}, warmup: {warmup}, replications: 4, seed: 3}}
        sources:
          calls: {{rate: 1.0, into: queue}}
        pools:
          agents: {staff}
        places:
          queue: {{patience: {patience}, abandon_to: redial}}
          redial: {{hold: {{dist: exponential, mean: 2.0}}, route: {{give_up: {Q}, retry: {1 - Q}}}}}
          talk: {{hold: {{dist: exponential, mean: 1.0}}}}
        transitions:
          answer: {{in: [queue, agents], out: [talk]}}
          close: {{in: [talk], out: [agents]}}
          give_up: {{in: [redial], out: [], outcome: {give_up}}}
          retry: {{in: [redial], out: [queue]}}
        """), file="redial.yaml")


def test_no_agents_every_caller_is_abandoned_exactly():
    """No agents and patience 0: every visit ends in an immediate redial, and a caller ends only
    at give_up. By hand: the share of callers never served is exactly 1 (served 0, lost 0), and
    none of them counts as completed (before, every give_up ended as "completed")."""
    s = redial(0, "0")
    for rep in range(2):
        r = run_replication(s, rep)
        src = r.sources["calls"]
        assert src["callers_ended"] > 0
        assert src["callers_abandoned"] == 1.0
        assert src["callers_served"] == 0.0 and src["callers_lost"] == 0.0
        assert src["completed"] == 0 and r.totals["completed"] == 0
        assert src["abandoned"] > 0 and src["lost"] == 0
        assert src["abandoned_share"] == 1.0
        # per visit the queue is abandoned every time, and sees more entries than callers
        assert r.places["queue"]["abandoned"] == 1.0
        assert r.places["queue"]["became"] > src["arrivals"]
    res = replicate(s, reps=2)
    js = res.to_json()["sources"]["calls"]
    assert js["outcomes"]["abandoned"]["mean"] == 1.0
    assert js["outcomes"]["served"]["mean"] == 0.0
    assert js["outcomes"]["abandoned"]["high"] <= 1.0
    assert "callers_abandoned" not in js and "completed" in js and "abandoned_share" in js


def test_no_agents_visits_per_caller_are_geometric():
    """No agents: the visits of a caller are iid Geometric(q) (trials up to the first give-up),
    mean 1/q (scipy.stats.geom.mean). Counted per caller from the trace (one patience expiry at
    the queue per visit), over the callers that arrived in the first half and have ended; the
    per-visit entries are thus 1/q times the callers, in expectation."""
    s = redial(0, "0", horizon=4000.0, warmup=0.0)
    trace: list = []
    r = run_replication(s, 0, trace=trace, record_jobs=True)
    visits: dict[int, int] = {}
    for _, what, name, job in trace:
        if what == "abandon" and name == "queue":
            visits[job] = visits.get(job, 0) + 1
    early = [j for j, _, arrival, _, outcome in r.jobs if arrival < 2000.0]
    assert all(o == "abandoned:give_up" for *_, o in r.jobs)
    counts = np.array([visits[j] for j in early], dtype=float)
    expected = stats.geom.mean(Q)  # 1 / q = 4
    half = stats.t.ppf(0.9995, len(counts) - 1) * counts.std(ddof=1) / np.sqrt(len(counts))
    assert half < 0.1 * expected
    assert abs(counts.mean() - expected) <= half


def test_patience_zero_without_redial_is_a_loss():
    """Patience 0 and no abandon_to, no agents: every caller is lost at once (lost share 1,
    counted among the source's abandoned, none completed); a transition marked lost counts the
    same way."""
    text = textwrap.dedent("""\
        name: loss line (invented)
        run: {horizon: 200, warmup: 20, replications: 2, seed: 5}
        sources:
          calls: {rate: 2.0, into: queue}
        pools:
          agents: 0
        places:
          queue: {patience: 0}
          talk: {hold: 1.0}
        transitions:
          answer: {in: [queue, agents], out: [talk]}
          close: {in: [talk], out: [agents]}
        """)
    r = run_replication(load_scenario_text(text, file="loss.yaml"), 0)
    src = r.sources["calls"]
    assert src["callers_lost"] == 1.0 and src["callers_abandoned"] == 0.0
    assert src["lost"] == src["abandoned"] > 0 and src["completed"] == 0
    r = run_replication(redial(0, "0", horizon=400.0, give_up="lost"), 0, record_jobs=True)
    src = r.sources["calls"]
    assert src["callers_lost"] == 1.0 and src["lost"] == src["abandoned"] > 0
    assert {o for *_, o in r.jobs} == {"lost:give_up"}


def test_per_visit_abandonment_exceeds_per_caller():
    """With agents (2 agents, load 0.5 before redials, patience of mean 0.5): a caller who
    abandons and then is served has abandoned visits but ends served. By hand, over the same
    callers: per visit V_a / (V_a + S) >= per caller A / (A + S), since every abandoned caller
    has at least one abandoned visit (V_a >= A), strictly as soon as one caller retries. The
    per-caller shares are checked exactly against the job records, and sum to 1."""
    s = redial(2, "{dist: exponential, mean: 0.5}", horizon=3000.0)
    for rep in range(3):
        r = run_replication(s, rep, record_jobs=True)
        src = r.sources["calls"]
        window = [o for _, _, arrival, _, o in r.jobs if arrival >= s.run.warmup]
        assert src["callers_ended"] == len(window)
        served = sum(o.startswith("completed:") for o in window)
        abandoned = sum(o == "abandoned:give_up" for o in window)
        assert served + abandoned == len(window)
        assert src["callers_served"] == pytest.approx(served / len(window), abs=0)
        assert src["callers_abandoned"] == pytest.approx(abandoned / len(window), abs=0)
        assert src["callers_lost"] == 0.0
        assert src["callers_served"] + src["callers_abandoned"] == pytest.approx(1.0, abs=1e-12)
        per_visit = r.places["queue"]["abandoned"]
        assert 0 < src["callers_abandoned"] < per_visit < 1
        # completed counts only the served ends, no longer the give-ups
        ended = [o for *_, arrival, end, o in r.jobs if end >= s.run.warmup]
        assert src["completed"] == sum(o.startswith("completed:") for o in ended)
        assert src["abandoned"] == sum(o == "abandoned:give_up" for o in ended)


def test_outcomes_agree_with_and_without_shortcuts():
    """The engine's shortcuts end jobs as the general path does (same figures to the last bit)."""
    s = redial(2, "{dist: exponential, mean: 0.5}", horizon=500.0, give_up="lost")
    fast, slow = run_replication(s, 1), run_replication(s, 1, shortcuts=False)
    assert fast.sources == slow.sources and fast.totals == slow.totals
    assert fast.sources["calls"]["callers_lost"] > 0
