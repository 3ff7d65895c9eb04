"""Patience exits in the conservation invariants: an abandoning job takes whatever waits with it.

Hand derivations of ``yᵀC = 0`` sit beside each check (the P-semiflow definition of Martínez and
Silva 1982, as in :mod:`fluid.invariants`); the short simulation shows that the warning is
warranted (the pool really drains). Every net is invented for these tests.
"""

from __future__ import annotations

import json
import warnings

import pytest

from desim.run import run_replication
from fluid.invariants import (
    incidence_matrix,
    leak_message,
    p_semiflows,
    patience_exits,
    patience_leaks,
    pool_invariant,
    uncovered_pools,
)
from fluid.loading import ScenarioWarning

from . import nets

# The caller and the agent who took the call wait together for an expert in expert_wait, which
# has patience and no abandon_to: an abandoning caller leaves, and the agent with them. The
# expert also works a second task stream (first in its priority), so that even the last agent's
# caller sometimes waits and abandons.
WAIT_TOGETHER = """
name: caller and agent wait together (invented test net)
run: {horizon: 400, warmup: 200, replications: 2, seed: 3}
sources:
  calls: {rate: 0.5, into: queue}
  tasks: {rate: 0.5, into: task_list}
pools:
  agents: 3
  experts: {staff: 1, priority: [task_start, consult_start]}
places:
  queue: {}
  talk: {hold: 1.0}
  expert_wait: {patience: {dist: exponential, mean: 1.0}}
  consult: {hold: 1.0}
  task_list: {}
  task: {hold: {dist: exponential, mean: 1.0}}
transitions:
  answer: {in: [queue, agents], out: [talk]}
  ask: {in: [talk], out: [expert_wait]}
  consult_start: {in: [expert_wait, experts], out: [consult]}
  consult_end: {in: [consult], out: [agents, experts]}
  task_start: {in: [task_list, experts], out: [task]}
  task_end: {in: [task], out: [experts]}
"""


def _load_quiet(text: str):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ScenarioWarning)
        return nets.load(text)


def test_incidence_matrix_has_one_abandonment_column_per_place_with_patience():
    s = _load_quiet(WAIT_TOGETHER)
    rows, cols, c = incidence_matrix(s)
    assert cols[-1] == "expert_wait.abandon"
    assert patience_exits(s) == {"expert_wait": None}
    # the exit takes one token out of expert_wait and puts it nowhere
    assert {rows[i]: int(v) for i, v in enumerate(c[:, -1]) if v} == {"expert_wait": -1}
    # without the exits: the matrix of the transitions and sources alone
    _, cols_plain, c_plain = incidence_matrix(s, patience=False)
    assert cols_plain == cols[:-1]
    assert (c_plain == c[:, :-1]).all()


def test_pool_that_waits_with_an_abandoning_caller_is_reported_leaking():
    # Without the exit, by hand: source calls gives y_queue = 0; answer: y_talk = y_agents;
    # ask: y_wait = y_talk; consult_start: y_consult = y_wait + y_experts; consult_end:
    # y_consult = y_agents + y_experts: (agents, talk, expert_wait, consult) is a semiflow.
    # The exit column adds -y_wait = 0, so y_agents = 0: only (experts, consult, task) stays.
    with pytest.warns(ScenarioWarning) as caught:
        s = nets.load(WAIT_TOGETHER)
    messages = [str(w.message) for w in caught if issubclass(w.category, ScenarioWarning)]
    assert messages == [
        "<test net>: pools.agents: pool agents can lose agents: place expert_wait has patience "
        "and its abandoning jobs take the agent with them (no conservation invariant covers "
        "this pool once abandonment is counted)"
    ]
    assert uncovered_pools(s) == ["agents"]
    assert patience_leaks(s) == {"agents": ["expert_wait"]}
    assert p_semiflows(s) == [{"experts": 1, "consult": 1, "task": 1}]
    assert pool_invariant(s, "agents") == {}
    assert leak_message("a", ["p", "q"]) == (
        "pool a can lose agents: places p, q have patience and their abandoning jobs take the "
        "agent with them")


def test_the_simulation_indeed_drains_the_leaking_pool():
    # Each abandonment from expert_wait removes one of the 3 agents for good; by time 200 all
    # three are gone (fixed seed), so over [200, 400] nobody answers and the pool reads busy.
    s = _load_quiet(WAIT_TOGETHER)
    r = run_replication(s, 0)
    assert r.transitions["answer"]["firings"] == 0
    assert r.transitions["consult_end"]["firings"] == 0
    assert r.pools["agents"]["busy"] == pytest.approx(1.0, abs=1e-12)
    assert r.places["expert_wait"]["abandoned_count"] == 0  # nothing left to abandon
    # the expert's own stream is untouched by the leak
    assert r.transitions["task_end"]["firings"] > 0


QUEUE_WITH_PATIENCE = """
name: patience at a pure job queue (invented test net)
sources:
  calls: {{rate: 1.0, into: queue}}
pools:
  agents: 3
places:
  queue: {{{patience}}}
  talk: {{hold: 2.0}}
  wrap: {{hold: 0.5}}
transitions:
  answer: {{in: [queue, agents], out: [talk]}}
  close: {{in: [talk], out: [wrap]}}
  done: {{in: [wrap], out: [agents]}}
"""


def test_patience_at_a_pure_job_queue_changes_nothing():
    # the source already forces y_queue = 0, so the exit column (-y_queue = 0) adds nothing:
    # agents + talk + wrap = 3 either way, and no warning
    with warnings.catch_warnings():
        warnings.simplefilter("error", ScenarioWarning)
        plain = nets.load(QUEUE_WITH_PATIENCE.format(patience=""))
        patient = nets.load(QUEUE_WITH_PATIENCE.format(
            patience="patience: {dist: exponential, mean: 2.0}"))
    assert p_semiflows(patient) == p_semiflows(plain) == [{"agents": 1, "talk": 1, "wrap": 1}]
    assert uncovered_pools(patient) == [] and patience_leaks(patient) == {}
    assert pool_invariant(patient, "agents") == pool_invariant(plain, "agents")


PATIENT = "expert_wait: {patience: {dist: exponential, mean: 1.0}}"


@pytest.mark.parametrize("abandon_to, extra", [
    # back into talk: the caller and the agent talk again and ask again
    ("talk", {}),
    # into a wrap-up place that gives the agent back
    ("wrap_up", {"places": "  wrap_up: {hold: 0.5}\n",
                 "transitions": "  wrap_done: {in: [wrap_up], out: [agents]}\n"}),
])
def test_abandon_to_a_place_that_keeps_the_agent_keeps_the_pool_invariant(abandon_to, extra):
    # By hand, the exit expert_wait -> talk adds y_talk - y_wait = 0, which ask already says;
    # the exit expert_wait -> wrap_up adds y_wrap_up = y_wait, and wrap_done y_wrap_up =
    # y_agents: both keep (agents, talk, expert_wait, consult [, wrap_up]) a semiflow.
    text = WAIT_TOGETHER.replace(PATIENT, PATIENT[:-1] + f", abandon_to: {abandon_to}}}")
    text = text.replace("transitions:\n", extra.get("places", "") + "transitions:\n")
    text += extra.get("transitions", "")
    with warnings.catch_warnings():
        warnings.simplefilter("error", ScenarioWarning)
        s = nets.load(text)
    rows, cols, c = incidence_matrix(s)
    assert {rows[i]: int(v) for i, v in enumerate(c[:, cols.index("expert_wait.abandon")]) if v} \
        == {"expert_wait": -1, abandon_to: 1}
    agents = {"agents": 1, "talk": 1, "expert_wait": 1, "consult": 1}
    if abandon_to == "wrap_up":
        agents["wrap_up"] = 1
    assert p_semiflows(s) == [agents, {"experts": 1, "consult": 1, "task": 1}]
    assert uncovered_pools(s) == [] and patience_leaks(s) == {}
    assert pool_invariant(s, "agents") == {k: float(v) for k, v in agents.items()}


def test_inspect_shows_the_patience_exits_and_the_leak(tmp_path, capsys):
    from compare.cli.main import main

    net = tmp_path / "wait_together.yaml"
    net.write_text(WAIT_TOGETHER)
    warning = ("pool agents can lose agents: place expert_wait has patience and its abandoning "
               "jobs take the agent with them")
    assert main(["inspect", str(net)]) == 0
    out, err = capsys.readouterr()
    assert "patience exits (in the invariants;" in out
    assert "  expert_wait -> leaves the net" in out
    assert "warning: " + warning in out
    assert warning in err  # the loader's warning, too
    assert main(["inspect", str(net), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["patience_exits"] == {"expert_wait": None}
    assert doc["agent_leaks"] == {"agents": {"places": ["expert_wait"], "message": warning}}
    assert doc["uncovered_pools"] == ["agents"]
    assert doc["invariants"] == [{"experts": 1, "consult": 1, "task": 1}]
