"""Small nets (YAML in the format of design.md §3) shared by the fluid tests.

Every net is invented for the tests. The hand derivations of their fluid answers sit beside the
tests that use them. Holds are chosen so that the counters' grid divides them exactly.
"""

from __future__ import annotations

from fluid import Scenario, load_scenario_text
from fluid.stations import station_yaml


def load(text: str) -> Scenario:
    return load_scenario_text(text, file="<test net>")


def single_pool(rate: float, staff: int, hold: float, horizon: float = 600) -> str:
    """One queue, one pool of ``staff`` agents, exponential holds of mean ``hold`` (the
    counters read its mean only)."""
    return station_yaml(staff, float(rate), float(hold), name="single pool (invented test net)",
                        run={"horizon": horizon, "warmup": 0}, targets=False)


def cold_transfer(billing_staff: int = 3) -> str:
    """Front desk (10 agents, hold 2) closes 75 % of its calls and transfers 25 % cold (the
    front agent is released) to a billing desk (hold 5)."""
    return f"""
name: cold transfer (invented test net)
time_unit: min
sources:
  calls: {{rate: 4.0, into: front_queue}}
pools:
  front_desk: 10
  billing_desk: {billing_staff}
places:
  front_queue: {{}}
  front_talk: {{hold: 2.0, route: {{front_close: 0.75, front_transfer: 0.25}}}}
  billing_queue: {{}}
  billing_talk: {{hold: {{dist: gamma, mean: 5.0, cv: 0.5}}}}
transitions:
  front_answer: {{in: [front_queue, front_desk], out: [front_talk]}}
  front_close: {{in: [front_talk], out: [front_desk]}}
  front_transfer: {{in: [front_talk], out: [front_desk, billing_queue]}}
  billing_answer: {{in: [billing_queue, billing_desk], out: [billing_talk]}}
  billing_close: {{in: [billing_talk], out: [billing_desk]}}
"""


def hand_over(front_staff: int, supervisors: int, rate: float = 5.0) -> str:
    """Front agents (hold 2) hand half their calls to a supervisor: the front agent waits with
    the caller until a supervisor is free, then both stay for the joint part (hold 2) and are
    released together."""
    return f"""
name: hand-over (invented test net)
time_unit: min
sources:
  calls: {{rate: {rate}, into: front_queue}}
pools:
  front_desk: {front_staff}
  supervisors: {supervisors}
places:
  front_queue: {{}}
  front_talk: {{hold: 2.0, route: {{front_close: 0.5, front_consult: 0.5}}}}
  consult_wait: {{}}
  consulting: {{hold: 2.0}}
transitions:
  front_answer: {{in: [front_queue, front_desk], out: [front_talk]}}
  front_close: {{in: [front_talk], out: [front_desk]}}
  front_consult: {{in: [front_talk], out: [consult_wait]}}
  consult_start: {{in: [consult_wait, supervisors], out: [consulting]}}
  consult_end: {{in: [consulting], out: [supervisors, front_desk]}}
"""


def two_agents(rate: float = 2.0, staff: int = 5, hold: float = 2.0) -> str:
    """Every job needs two agents of the same pool at once (arc weight 2)."""
    return f"""
name: two agents per job (invented test net)
time_unit: min
sources:
  jobs: {{rate: {rate}, into: queue}}
pools:
  crew: {staff}
places:
  queue: {{}}
  work: {{hold: {hold}}}
transitions:
  start: {{in: {{queue: 1, crew: 2}}, out: [work]}}
  finish: {{in: [work], out: {{crew: 2}}}}
"""


def priority_desk(high: float, low: float, staff: int = 6, high_hold: float = 2.0,
                  low_hold: float = 3.0) -> str:
    """Two sources into two queues; one desk serves the high class first."""
    return f"""
name: two-class priority desk (invented test net)
time_unit: min
run: {{horizon: 600, warmup: 100}}
sources:
  high_calls: {{rate: {high}, into: high_queue}}
  low_calls: {{rate: {low}, into: low_queue}}
pools:
  desk: {{staff: {staff}, priority: [high_answer, low_answer]}}
places:
  high_queue: {{}}
  low_queue: {{patience: {{dist: exponential, mean: 10.0}}}}
  high_talk: {{hold: {high_hold}}}
  low_talk: {{hold: {low_hold}}}
transitions:
  high_answer: {{in: [high_queue, desk], out: [high_talk]}}
  low_answer: {{in: [low_queue, desk], out: [low_talk]}}
  high_close: {{in: [high_talk], out: [desk]}}
  low_close: {{in: [low_talk], out: [desk]}}
"""


LEAKY = """
name: leaking pool (invented test net)
sources:
  calls: {rate: 1.0, into: queue}
pools:
  agents: 4
  helpers: 2
places:
  queue: {}
  talk: {hold: 2.0, route: {close: 0.9, escalate: 0.1}}
  help: {hold: 1.0}
transitions:
  answer: {in: [queue, agents], out: [talk]}
  close: {in: [talk], out: [agents]}
  # the job leaves with its agent, who never comes back
  escalate: {in: [talk, helpers], out: [help]}
  help_done: {in: [help], out: [helpers]}
"""

MULTIPLYING = """
name: multiplying pool (invented test net)
sources:
  calls: {rate: 1.0, into: queue}
pools:
  agents: 4
places:
  queue: {}
  talk: {hold: 2.0}
transitions:
  answer: {in: [queue, agents], out: [talk]}
  close: {in: [talk], out: {agents: 2}}
"""

# An agent moves to a second pool and back at the same instant: a cycle of same-time
# dependencies through two pools (answer needs desk, which transfer_in refills; transfer_in
# needs relay, which answer fills).
SAME_TIME_CYCLE = """
name: same-time cycle through two pools (invented test net)
sources:
  calls: {rate: 1.5, into: queue}
pools:
  desk: 2
  relay: 0
places:
  queue: {}
  handed: {}
  talk: {hold: 1.0}
transitions:
  answer: {in: [queue, desk], out: [handed, relay]}
  transfer_in: {in: [handed, relay], out: [talk, desk]}
  close: {in: [talk], out: []}
"""


def staff_cut(horizon: float = 300) -> str:
    """Six agents for the first 50 minutes, then two; calls at 2.5 per minute, hold 2."""
    return f"""
name: staff cut (invented test net)
run: {{horizon: {horizon}, warmup: 0}}
sources:
  calls: {{rate: 2.5, into: queue}}
pools:
  agents: {{schedule: {{step: 50, staff: [6, 2]}}}}
places:
  queue: {{}}
  talk: {{hold: 2.0}}
transitions:
  answer: {{in: [queue, agents], out: [talk]}}
  close: {{in: [talk], out: [agents]}}
"""


def profile_peak(horizon: float = 200) -> str:
    """Arrivals at 1 per minute for 20 minutes, then 3 per minute; 4 agents, hold 2."""
    return f"""
name: profile peak (invented test net)
run: {{horizon: {horizon}, warmup: 0}}
sources:
  calls: {{profile: {{step: 20, rates: [1.0, 3.0]}}, into: queue}}
pools:
  agents: 4
places:
  queue: {{}}
  talk: {{hold: 2.0}}
transitions:
  answer: {{in: [queue, agents], out: [talk]}}
  close: {{in: [talk], out: [agents]}}
"""


def stage_chain(
    stages: list[dict], rate: float, second_source: tuple[int, float] | None = None
) -> str:
    """A priority-free chain of stages for property tests.

    Each stage dict has: ``staff``, ``weight`` (agents per job, 1 or 2), ``hold``, and
    ``route`` (tenths for close / transfer / rework / consult; transfer only before the last
    stage); a stage with a consult share also has ``sup_staff`` and ``joint_hold``.
    """
    pools, places, trans = [], [], []
    n = len(stages)
    for i, st in enumerate(stages):
        w = st["weight"]
        pools.append(f"  pool{i}: {st['staff']}")
        shares = {k: v for k, v in st["route"].items() if v > 0}
        if i == n - 1:
            shares.pop("transfer", None)
        if not shares:
            shares = {"close": 10}
        total = sum(shares.values())
        outs = {f"{k}{i}": v / total for k, v in shares.items()}
        route = "" if len(outs) == 1 else (
            ", route: {" + ", ".join(f"{k}: {v!r}" for k, v in outs.items()) + "}"
        )
        places.append(f"  queue{i}: {{}}")
        places.append(f"  talk{i}: {{hold: {st['hold']}{route}}}")
        trans.append(f"  answer{i}: {{in: {{queue{i}: 1, pool{i}: {w}}}, out: [talk{i}]}}")
        if "close" in shares:
            trans.append(f"  close{i}: {{in: [talk{i}], out: {{pool{i}: {w}}}}}")
        if "transfer" in shares:
            trans.append(
                f"  transfer{i}: {{in: [talk{i}], out: {{pool{i}: {w}, queue{i + 1}: 1}}}}"
            )
        if "rework" in shares:
            trans.append(f"  rework{i}: {{in: [talk{i}], out: {{pool{i}: {w}, queue{i}: 1}}}}")
        if "consult" in shares:
            pools.append(f"  sup{i}: {st['sup_staff']}")
            places.append(f"  wait{i}: {{}}")
            places.append(f"  joint{i}: {{hold: {st['joint_hold']}}}")
            trans.append(f"  consult{i}: {{in: [talk{i}], out: [wait{i}]}}")
            trans.append(f"  joint_start{i}: {{in: [wait{i}, sup{i}], out: [joint{i}]}}")
            trans.append(f"  joint_end{i}: {{in: [joint{i}], out: {{sup{i}: 1, pool{i}: {w}}}}}")
    sources = [f"  calls: {{rate: {rate}, into: queue0}}"]
    if second_source is not None:
        j, r2 = second_source
        sources.append(f"  more_calls: {{rate: {r2}, into: queue{min(j, n - 1)}}}")
    return "\n".join(
        ["name: stage chain (generated test net)", "run: {horizon: 600}", "sources:", *sources,
         "pools:", *pools, "places:", *places, "transitions:", *trans, ""]
    )


def overflow(rate: float = 2.5) -> str:
    """One queue served first by its own desk (2 agents, hold 2) and, for what that desk cannot
    take, by an overflow desk (4 agents, hold 2): priority at a job place."""
    return f"""
name: overflow by priority at a queue (invented test net)
sources:
  calls: {{rate: {rate}, into: queue}}
pools:
  own_desk: 2
  overflow_desk: 4
places:
  queue: {{priority: [own_answer, overflow_answer]}}
  own_talk: {{hold: 2.0}}
  overflow_talk: {{hold: 2.0}}
transitions:
  own_answer: {{in: [queue, own_desk], out: [own_talk]}}
  overflow_answer: {{in: [queue, overflow_desk], out: [overflow_talk]}}
  own_close: {{in: [own_talk], out: [own_desk]}}
  overflow_close: {{in: [overflow_talk], out: [overflow_desk]}}
"""
