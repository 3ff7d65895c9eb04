"""The derived facts of a scenario's net, in one place for both engines and every study.

A :class:`~fluid.scenario.Scenario` holds the net as written (places, pools, transitions and
their arcs, routes, priorities); this module derives from it what several readers need and must
agree on:

* routing shares: the route's proportion (:func:`route_share`) and the share a place gives an
  output when no pool limits (:func:`unlimited_share`);
* whether a job can still end from a place (:func:`places_that_can_end`,
  :func:`places_without_exit`) and which transitions make "the output"
  (:func:`output_transitions`);
* the places where jobs wait for staff (:func:`waiting_places`, :func:`serving_pools`);
* flows at given rates: into a place or pool (:func:`inflow`) and out of it (:func:`outflow`);
* whether the throughput LP applies (:func:`lp_obstacles`, :func:`lp_applies`);
* the one-more-agent bottleneck test (:func:`output_rises`, :func:`bottlenecks`,
  :func:`counter_output_level`) and the statistics window (:func:`statistics_window`).

The work the inflow-driven rates offer each pool is in :mod:`fluid.offered` (it needs the
conservation invariants). Everything here reads only the scenario, so the simulator may import
it (design.md §2). Derived facts live here and in :mod:`fluid.offered`, nowhere else.

Rates are per the scenario's time unit.
"""

from __future__ import annotations

from typing import Callable, Iterable, Mapping

from .scenario import Scenario

__all__ = [
    "COUNTER_RISE",
    "LP_RISE",
    "bottlenecks",
    "counter_output_level",
    "inflow",
    "longest_hold_path",
    "lp_applies",
    "lp_obstacles",
    "outflow",
    "output_rises",
    "output_transitions",
    "places_that_can_end",
    "places_without_exit",
    "route_share",
    "serving_pools",
    "statistics_window",
    "unlimited_share",
    "waiting_places",
]

#: One more agent raises a rate computed by the throughput LP when the rate grows by more than
#: this times max(1, |rate|): the LP is exact to about 1e-9.
LP_RISE = 1e-7
#: The same for the counter equations, whose long-run slopes are exact to about 1e-9 once
#: periodic and to about 1e-6 while converging.
COUNTER_RISE = 1e-6
_RISE = {"lp": LP_RISE, "counters": COUNTER_RISE}


# --- routing shares ------------------------------------------------------------------------------


def route_share(scenario: Scenario, place: str, transition: str) -> float:
    """Routing proportion π of ``transition`` at ``place``: its share in the place's route (the
    preselection proportion); 1 when the place has no route, and at a pool."""
    node = scenario.places.get(place)
    if node is None or node.route is None:
        return 1.0
    return node.route[transition]


def unlimited_share(scenario: Scenario, place: str, transition: str) -> float:
    """Share of the jobs entering ``place`` that leave by ``transition`` when no pool limits: at
    a place with a priority the highest-priority output takes every job as it becomes available
    (1 for it, 0 for the others); otherwise :func:`route_share`. 1 at a pool."""
    if scenario.is_pool(place):
        return 1.0
    order = scenario.priority_order(place)
    if order:
        return 1.0 if order[0] == transition else 0.0
    return route_share(scenario, place, transition)


# --- where jobs can end --------------------------------------------------------------------------


def places_that_can_end(
    scenario: Scenario, share: Callable[[Scenario, str, str], float] = route_share
) -> set[str]:
    """Job places from which some job can still end: some path of transitions, each with a
    positive ``share`` at the place it takes the job from, leads to a transition that ends the
    job. ``share``: :func:`route_share` (any firing the net allows) or :func:`unlimited_share`
    (the paths jobs take when no pool limits)."""
    moves = [(scenario.job_input(q), scenario.job_output(q))
             for q in scenario.transitions if share(scenario, scenario.job_input(q), q) > 0]
    can_end = {a for a, b in moves if b is None}
    grew = True
    while grew:
        grew = False
        for a, b in moves:
            if a not in can_end and b in can_end:
                can_end.add(a)
                grew = True
    return can_end


def places_without_exit(scenario: Scenario) -> list[str]:
    """Job places from which no job can ever end: no path of transitions with a positive routing
    proportion leads to a transition that ends the job (declaration order)."""
    can_end = places_that_can_end(scenario)
    return [p for p in scenario.places if p not in can_end]


def output_transitions(scenario: Scenario) -> tuple[str, ...]:
    """The transitions whose summed rate is the net's output: those that end jobs, or every
    transition when none does."""
    return scenario.ending_transitions or tuple(scenario.transitions)


# --- where jobs wait -----------------------------------------------------------------------------


def serving_pools(scenario: Scenario, place: str) -> list[str]:
    """Pools that the output transitions of ``place`` take agents from (declaration order of
    the transitions, each pool once)."""
    return list(dict.fromkeys(r for q in scenario.outputs_of(place)
                              for r in scenario.transitions[q].inputs if r in scenario.pools))


def waiting_places(scenario: Scenario) -> tuple[str, ...]:
    """Places where jobs wait for staff or may abandon: a patience, a service target, or an output
    transition that takes agents from a pool (declaration order)."""
    return tuple(p.name for p in scenario.places.values()
                 if p.patience is not None or p.name in scenario.targets.service
                 or serving_pools(scenario, p.name))


# --- flows at given rates ------------------------------------------------------------------------


def inflow(scenario: Scenario, node: str, rates: Mapping, source_rates: Mapping):
    """Tokens per time unit put into place or pool ``node`` when the transitions fire at
    ``rates`` (transition -> firings per time unit) and the sources arrive at ``source_rates``
    (source -> arrivals per time unit): Σ arc weight × rate over the transitions that feed it,
    then the sources into it. The values may be numpy arrays of cumulative counts (the counter
    equations); the answer is then the cumulative inflow."""
    total = 0.0
    for q in scenario.inputs_of(node):
        total = total + scenario.transitions[q].outputs[node] * rates[q]
    for s in scenario.sources_into(node):
        total = total + source_rates[s]
    return total


def outflow(scenario: Scenario, node: str, rates: Mapping):
    """Tokens per time unit taken out of place or pool ``node`` when the transitions fire at
    ``rates``: Σ arc weight × rate over its output transitions (arrays of cumulative counts
    allowed, as for :func:`inflow`)."""
    total = 0.0
    for q in scenario.outputs_of(node):
        total = total + scenario.transitions[q].inputs[node] * rates[q]
    return total


# --- whether the throughput LP applies -----------------------------------------------------------


def lp_obstacles(scenario: Scenario, *, constant_staff: bool = False) -> tuple[str, ...]:
    """Why the throughput LP (:mod:`fluid.lp`) does not give the fluid rates of ``scenario``, in
    words, in this order: "priorities", "arrival profiles or traces", "schedules", "jobs that can
    never end"; empty when it applies. ``constant_staff``: every pool's staff is given as a
    constant (as the LP's ``staff`` argument does), so schedules are no obstacle."""
    reasons = (
        ("priorities", scenario.has_priorities),
        ("arrival profiles or traces",
         any(not s.arrivals.is_constant for s in scenario.sources.values())),
        ("schedules", not constant_staff
         and any(p.schedule is not None for p in scenario.pools.values())),
        ("jobs that can never end", bool(places_without_exit(scenario))),
    )
    return tuple(why for why, holds in reasons if holds)


def lp_applies(scenario: Scenario, *, constant_staff: bool = False) -> bool:
    """True when the throughput LP gives the fluid rates: no priorities, only Poisson sources,
    no schedules (unless ``constant_staff``) and every job can end (:func:`lp_obstacles`)."""
    return not lp_obstacles(scenario, constant_staff=constant_staff)


# --- the one-more-agent bottleneck test ----------------------------------------------------------


def output_rises(base: float, more: float, method: str) -> bool:
    """True when the output ``more`` (with one more agent in a pool, or pools) exceeds ``base``
    (without) by more than the solver's tolerance: :data:`LP_RISE` (``method`` "lp") or
    :data:`COUNTER_RISE` ("counters") times max(1, |base|). Same unit as the outputs."""
    return more - base > _RISE[method] * max(1.0, abs(base))


def bottlenecks(pools: Iterable[str], base: float, with_one_more: Callable[[str], float],
                method: str) -> tuple[str, ...]:
    """The pools (in the order given) whose one more agent raises the output: ``base`` is the
    output at the staff as it is, ``with_one_more(pool)`` the output with one more agent in
    ``pool``; see :func:`output_rises`."""
    return tuple(p for p in pools if output_rises(base, with_one_more(p), method))


def counter_output_level(sol, transitions: Iterable[str],
                         window: tuple[float, float] | None) -> float:
    """The level the one-more-agent test compares on a counter solution ``sol``
    (:class:`fluid.counters.CounterSolution`): without a window the long-run rate of
    ``transitions`` summed (per time unit); with a ``window`` (time-varying nets) the mean over
    it of their summed counters (jobs), which rises whenever some job ends earlier."""
    if window is None:
        return sum(sol.rates[q] for q in transitions)
    i, j = (int(round(t / sol.dt)) for t in window)
    return float(sum(sol.counters[q][i: j + 1].mean() for q in transitions))


def statistics_window(scenario: Scenario, end: float) -> tuple[float, float]:
    """The window ``(start, end)`` over which figures are measured (time units): from the
    scenario's warm-up, or from 0 when the warm-up is not before ``end``."""
    start = scenario.run.warmup if scenario.run.warmup < end else 0.0
    return start, end


def longest_hold_path(scenario: Scenario) -> float:
    """The largest total mean hold (time units) along a path a job can take through the job
    places, each place counted once on a path (a loop back is not followed again): how long the
    longest journey through the net takes when nobody waits."""
    succ: dict[str, set[str]] = {p: set() for p in scenario.places}
    for q in scenario.transitions:
        a, b = scenario.job_input(q), scenario.job_output(q)
        if a is not None and b is not None:
            succ[a].add(b)
    best: dict[str, float] = {}

    def walk(p: str, on_path: set[str]) -> float:
        if p in best:
            return best[p]
        on_path.add(p)
        tail = max((walk(b, on_path) for b in succ[p] if b not in on_path), default=0.0)
        on_path.discard(p)
        best[p] = scenario.places[p].hold_mean + tail
        return best[p]

    return max((walk(p, set()) for p in scenario.places), default=0.0)
