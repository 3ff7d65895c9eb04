"""The run-time form of a scenario's net: mutable per-run state objects with ``__slots__``.

A :class:`fluid.scenario.Scenario` is frozen and shared; one run needs counters, queues and
random streams of its own. :func:`build_net` makes them: a :class:`PlaceState` per job place (with
one FIFO of available jobs, or one per output transition when the place routes by preselection),
a :class:`PoolState` per pool, a :class:`TransitionState` per transition and a
:class:`SourceState` per source. All times are in the scenario's time unit.

Transitions get a global rank that respects every priority list (a linear extension of the local
orders): when several transitions could fire at the same instant, the engine fires the lowest
rank first, one firing at a time, so a higher-priority transition never loses a token to a lower
one at the same instant.

:func:`build_net` also precomputes the facts the engine's shortcuts read (which FIFO feeds one
transition only, which pool one transition only takes from, ...): see :func:`_shortcuts`. With
``shortcuts=False`` it leaves them unset, and the engine executes the net by its general firing
logic alone, with identical results (a reference for tests).
"""

from __future__ import annotations

import heapq
import math
from collections import deque
from typing import Callable, Iterator

import numpy as np

from fluid.scenario import Scenario
from fluid.sources import ArrivalClock
from fluid.structure import route_share

from .streams import block_draws, stream_rng, uniform_draws

__all__ = ["Job", "PatienceTimer", "Fifo", "PlaceState", "PoolState", "TransitionState",
           "SourceState", "Net", "build_net", "transition_order"]

INF = math.inf


class Job:
    """One job (the engine makes it without ``__init__`` and reuses it once the job has ended):
    ``id`` (set only when a trace or job records are kept), ``source``, ``arrival``, ``waited``
    (total time available-and-waiting over all places), ``fifo`` (the FIFO it is in or about to
    enter), ``avail`` (when it became available there), ``stamp`` (its current stay as an
    available token of a place with patience; -1 once it has left such a place)."""

    __slots__ = ("id", "source", "arrival", "stamp", "avail", "fifo", "waited")


class PatienceTimer:
    """The event-queue item of the patience deadline armed at ``place``; it acts only while
    ``gen`` is the place's current generation (an earlier deadline arriving later supersedes it)."""

    __slots__ = ("place", "gen")

    def __init__(self, place: "PlaceState", gen: int):
        self.place = place
        self.gen = gen


class Fifo:
    """Available jobs of a place, oldest first (by the time they became available).

    In a place with patience the entries are ``(deadline, stamp, job)`` tuples, shared with the
    place's deadline heap; an entry is stale when ``job.stamp != stamp`` (the job abandoned).
    Stale entries are skipped when met and purged when they outnumber the live ones by more than
    two to one. In a place without patience the entries are the jobs themselves (none is ever
    stale)."""

    __slots__ = ("dq", "live", "dead", "place", "mask", "single", "direct", "quick", "at_once")

    def __init__(self, place: "PlaceState", mask: int):
        self.dq: deque = deque()
        self.live = 0
        self.dead = 0
        self.place = place
        self.mask = mask  # bits of the transitions that take from this FIFO
        # Set by build_net (see _shortcuts; None without shortcuts): the only transition taking
        # from this FIFO; the same when it takes no agents (`direct`) or agents from one pool
        # (`quick`) and the place has neither patience nor route, so that a token that becomes
        # available while nothing else is pending can be taken at once, without entering the FIFO.
        self.single: TransitionState | None = None
        self.direct: TransitionState | None = None
        self.quick: TransitionState | None = None
        self.at_once = 0  # tokens `single` took that way (counted for the place and for it)

    def compact(self) -> None:
        self.dq = deque(e for e in self.dq if e[2].stamp == e[1])
        self.dead = 0

    def waiting(self) -> list:
        """The jobs available and waiting, oldest first."""
        if self.place.heap is None:
            return list(self.dq)
        return [e[2] for e in self.dq if e[2].stamp == e[1]]


class PlaceState:
    """A job place during a run: FIFOs, the patience heap and cumulative counters."""

    __slots__ = (
        "name", "hold", "route_cum", "route_draw", "fifos", "fifo", "patience", "abandon_to",
        "heap", "heap_dead", "armed_at", "gen", "stale_timers", "plain", "held",
        "n_avail", "n_hold", "area", "last", "wait_sum", "abandoned", "within",
        "became_q", "left_q", "within_q", "zero_q", "waits_taken", "waits_abandoned",
        "left_early", "abandoned_early", "within_early", "loses", "late_after", "late_q",
        "late_early", "tally",
    )

    def __init__(self, name: str):
        self.name = name
        self.hold: Iterator[float] | None = None  # hold draws, or None (available at once)
        self.route_cum: list[float] | None = None  # cumulative route proportions (all but last)
        self.route_draw: Iterator[float] | None = None
        self.fifos: list[Fifo] = []
        self.fifo: Fifo | None = None  # the single FIFO of a place without route
        self.patience: Iterator[float] | None = None
        self.abandon_to: PlaceState | None = None
        self.loses = False  # patience 0: a job not taken at once is lost, not abandoned
        self.heap: list | None = None  # (deadline, stamp, job), lazily deleted
        self.heap_dead = 0
        self.armed_at = INF  # time of the one patience timer that counts
        self.gen = 0  # generation of that timer; older timers see a different number
        self.stale_timers = 0  # superseded patience timers still in the event queue
        # (these two are shortcut facts, see _shortcuts; None in a net without shortcuts)
        self.plain: Fifo | None = None  # the FIFO, when the place has neither hold nor route
        self.held: Fifo | None = None  # the FIFO, when the place has a hold but no route
        self.n_avail = 0
        self.n_hold = 0
        self.area = 0.0  # ∫ n_avail dt from 0 to `last`
        self.last = 0.0
        self.wait_sum = 0.0
        self.abandoned = 0
        self.within = -1.0  # service-level threshold; negative = no target
        # The target's abandoner convention: abandoners that waited more than `late_after`
        # count against the service level (-1: all of them; inf: none); `late_q` counts them
        # (`late_early`: of those, the jobs that became available before the warm-up)
        self.late_after = -1.0
        self.late_q = 0
        self.late_early = 0
        self.tally = None  # per-interval counts by arrival interval (desim.by_arrival), or None
        # Counts of tokens. Most tokens taken the instant they become available skip the FIFO
        # (the engine's shortcuts) and are counted by their FIFO alone (Fifo.at_once); the
        # others in the `_q` counters. Read the totals through the properties below.
        self.became_q = 0
        self.left_q = 0  # taken or abandoned
        self.within_q = 0  # taken with a wait of at most `within`
        self.zero_q = 0  # taken with a wait of 0
        # Of `left_q`, `abandoned` and `within_q`: the jobs that had become available before the
        # warm-up (the run takes them out of the window's shares, which count only the jobs that
        # became available in the window; see desim.run)
        self.left_early = 0
        self.abandoned_early = 0
        self.within_early = 0
        self.waits_taken: list[float] | None = None
        self.waits_abandoned: list[float] | None = None

    @property
    def at_once(self) -> int:
        """Tokens taken the instant they became available without entering a FIFO."""
        return sum(f.at_once for f in self.fifos)

    @property
    def became(self) -> int:
        """Tokens that became available."""
        return self.became_q + self.at_once

    @property
    def left(self) -> int:
        """Tokens that left after becoming available (taken or abandoned)."""
        return self.left_q + self.at_once

    @property
    def taken_within(self) -> int:
        """Tokens taken with a wait of at most ``within``."""
        return self.within_q + (self.at_once if self.within >= 0.0 else 0)

    @property
    def taken_at_once(self) -> int:
        """Tokens taken the instant they became available (a wait of 0)."""
        return self.zero_q + self.at_once

    def compact_heap(self) -> None:
        self.heap = [e for e in self.heap if e[2].stamp == e[1]]
        heapq.heapify(self.heap)
        self.heap_dead = 0

    def area_at(self, now: float) -> float:
        """∫ n_avail dt from 0 to ``now`` (jobs available and waiting × time)."""
        return self.area + self.n_avail * (now - self.last)

    def waiting_at(self, now: float) -> tuple[int, float]:
        """(jobs available and waiting now, the sum of how long each has waited so far)."""
        jobs = [j for f in self.fifos for j in f.waiting()]
        return len(jobs), float(sum(now - j.avail for j in jobs))


class PoolState:
    """A pool during a run. ``present`` agents are on duty (``target`` scheduled plus ``owed``
    busy agents that leave as they finish after a cut); ``avail`` of them are idle."""

    __slots__ = ("name", "avail", "target", "owed", "present", "area_avail", "last",
                 "area_present", "plast", "mask", "takers", "taker", "schedule")

    def __init__(self, name: str, staff: int, schedule):
        self.name = name
        self.avail = staff
        self.target = staff
        self.owed = 0
        self.present = staff
        self.area_avail = 0.0
        self.last = 0.0
        self.area_present = 0.0
        self.plast = 0.0
        self.mask = 0
        self.takers: tuple = ()  # (FIFO, bit) of each transition taking agents from this pool
        self.taker: Fifo | None = None  # the FIFO of the only such transition (a shortcut fact)
        self.schedule = schedule

    def give(self, w: int, now: float) -> int:
        """``w`` agents come back at ``now`` (those owed to a cut leave instead); return the bits
        of the transitions that may have become enabled (those with a job waiting)."""
        if self.owed:
            a = min(self.owed, w)
            self.owed -= a
            self.area_present += self.present * (now - self.plast)
            self.plast = now
            self.present -= a
            w -= a
            if not w:
                return 0
        self.area_avail += self.avail * (now - self.last)
        self.last = now
        self.avail += w
        bits = 0
        for fifo, bit in self.takers:  # a taker with no job waiting stays disabled
            if fifo.live:
                bits |= bit
        return bits

    def restaff(self, staff: int, now: float) -> int:
        """The scheduled staff becomes ``staff`` at ``now``: an increase adds idle agents at
        once, a cut removes idle agents at once and the rest as busy agents come back. Return
        the bits of the transitions that may have become enabled."""
        diff = staff - self.target
        self.target = staff
        self.area_present += self.present * (now - self.plast)
        self.plast = now
        self.area_avail += self.avail * (now - self.last)
        self.last = now
        if diff > 0:
            keep = min(self.owed, diff)  # busy agents due to leave stay on instead
            self.owed -= keep
            diff -= keep
            self.present += diff
            self.avail += diff
            if diff:
                return self.mask
        elif diff < 0:
            cut = -diff
            idle = min(self.avail, cut)
            self.avail -= idle
            self.present -= idle
            self.owed += cut - idle
        return 0

    def areas_at(self, now: float) -> tuple[float, float]:
        """(∫ busy dt, ∫ on-duty dt) from 0 to ``now``."""
        present = self.area_present + self.present * (now - self.plast)
        avail = self.area_avail + self.avail * (now - self.last)
        return present - avail, present


class TransitionState:
    __slots__ = ("name", "bit", "fifo", "takes", "out_place", "gives", "fired", "take1",
                 "weight1", "give1", "given1", "outcome")

    def __init__(self, name: str, bit: int):
        self.name = name
        self.bit = bit
        self.fifo: Fifo | None = None
        self.takes: tuple = ()  # ((PoolState, weight), ...)
        self.out_place: PlaceState | None = None
        self.gives: tuple = ()  # ((PoolState, weight), ...)
        self.fired = 0  # firings, but those counted by the FIFO (Fifo.at_once)
        # shortcut facts (see _shortcuts): the pool and weight when it takes from one pool, ...
        self.take1: PoolState | None = None
        self.weight1 = 0
        self.give1: PoolState | None = None  # ... and when it gives to one pool
        self.given1 = 0
        self.outcome = "served"  # how a job that ends here ends for its caller

    @property
    def firings(self) -> int:
        """Times it fired."""
        fifo = self.fifo
        return self.fired + (fifo.at_once if fifo.single is self else 0)


class SourceState:
    """Arrivals of one source and the cumulative counts of its jobs.

    ``next_time(now)``: the time of the arrival after the one at ``now`` (inf when there is
    none), from the run's :class:`fluid.sources.ArrivalClock`; ``spacing``: that clock's times
    between arrivals when the rate is constant (read directly by the engine's hot path), else
    None."""

    __slots__ = ("name", "place", "spacing", "next_time", "arrived", "completed", "abandoned",
                 "wait_sum", "lost", "ended_new", "rate_factor", "tally")

    def __init__(self, name: str, place: PlaceState, clock: ArrivalClock,
                 rate_factor: float | None = None):
        self.name = name
        self.rate_factor = rate_factor  # this run's day factor on the rates (None: no factor)
        self.place = place
        self.spacing: Iterator[float] | None = clock.spacing
        self.next_time: Callable[[float], float] = clock.next_time
        self.arrived = 0
        self.completed = 0
        self.abandoned = 0  # every job that ended unserved (abandoned or lost)
        self.wait_sum = 0.0
        self.lost = 0  # of those, the jobs lost (turned away)
        # per-caller outcomes (served, abandoned, lost) of jobs that arrived at or after the
        # engine's warm-up, counted when they end
        self.ended_new = [0, 0, 0]
        self.tally = None  # unserved callers by arrival interval (desim.by_arrival), or None


class Net:
    """All run-time state of one run's net, in declaration order."""

    __slots__ = ("places", "pools", "transitions", "sources", "scenario", "shortcuts")

    def __init__(self, scenario, places, pools, transitions, sources, shortcuts: bool = True):
        self.scenario = scenario
        self.places: dict[str, PlaceState] = places
        self.pools: dict[str, PoolState] = pools
        self.transitions: list[TransitionState] = transitions  # by rank
        self.sources: dict[str, SourceState] = sources
        self.shortcuts = shortcuts  # whether the facts of _shortcuts were set


def late_after(target) -> float:
    """The wait after which an abandoner counts against ``target``'s service level: -1 (every
    abandoner, "against"), inf (none, "excluded"), or the target's ``excluded_within``."""
    convention = getattr(target, "abandoned", "against")
    if convention == "excluded":
        return INF
    if convention == "excluded_within":
        return float(target.excluded_within)
    return -1.0


def transition_order(scenario: Scenario) -> list[str]:
    """Transitions in a global order that extends every priority list (places first, then pools,
    each in declaration order; a constraint that would contradict an earlier one is dropped).
    Where the priorities leave a choice, transitions that take no agents come first (they only
    move jobs on and hand agents back, so every token of an instant is in place before agents
    are allocated), then declaration order."""
    names = list(scenario.transitions)
    index = {
        n: (any(p in scenario.pools for p in t.inputs), i)
        for i, (n, t) in enumerate(scenario.transitions.items())
    }
    after: dict[str, set[str]] = {n: set() for n in names}

    def reaches(a: str, b: str) -> bool:
        stack, seen = [a], {a}
        while stack:
            x = stack.pop()
            if x == b:
                return True
            for y in after[x] - seen:
                seen.add(y)
                stack.append(y)
        return False

    for node in (*scenario.places.values(), *scenario.pools.values()):
        prio = node.priority
        for hi, lo in zip(prio, prio[1:]):
            if not reaches(lo, hi):
                after[hi].add(lo)
    indeg = {n: 0 for n in names}
    for n in names:
        for m in after[n]:
            indeg[m] += 1
    ready = [(index[n], n) for n in names if indeg[n] == 0]
    heapq.heapify(ready)
    order = []
    while ready:
        _, n = heapq.heappop(ready)
        order.append(n)
        for m in after[n]:
            indeg[m] -= 1
            if indeg[m] == 0:
                heapq.heappush(ready, (index[m], m))
    return order


def build_net(scenario: Scenario, seed: int, replication: int, *, record_waits: bool = False,
              block: int = 1024, shortcuts: bool = True) -> Net:
    """Fresh run-time state for replication ``replication`` of ``scenario`` with base ``seed``.

    ``shortcuts``: precompute the facts the engine's shortcuts read (:func:`_shortcuts`; the
    default). False leaves every one of them unset, so that :class:`desim.engine.Engine` takes
    its general path alone (each token made available in its FIFO, then the enabled transitions
    fired in rank order); the results are the same either way, to the last bit."""
    places: dict[str, PlaceState] = {}
    for p in scenario.places.values():
        ps = PlaceState(p.name)
        if p.hold is not None:
            ps.hold = block_draws(p.hold.sample, stream_rng(seed, replication, "hold", p.name), block)
        if p.patience is not None:
            ps.patience = block_draws(
                p.patience.sample, stream_rng(seed, replication, "patience", p.name), block)
            ps.heap = []
            ps.loses = p.patience.mean == 0  # (patience is never negative)
        target = scenario.targets.service.get(p.name)
        if target is not None:
            ps.within = target.within
            ps.late_after = late_after(target)
        if record_waits:
            ps.waits_taken, ps.waits_abandoned = [], []
        places[p.name] = ps
    for p in scenario.places.values():
        if p.abandon_to is not None:
            places[p.name].abandon_to = places[p.abandon_to]

    pools = {r.name: PoolState(r.name, r.staff_at(0.0), r.schedule) for r in scenario.pools.values()}
    order = transition_order(scenario)
    bit = {name: 1 << i for i, name in enumerate(order)}
    trans = {name: TransitionState(name, bit[name]) for name in order}

    for p in scenario.places.values():
        ps = places[p.name]
        outs = scenario.outputs_of(p.name)
        if p.route is not None:
            chosen = list(p.route)
            ps.fifos = [Fifo(ps, bit[t]) for t in chosen]
            shares = [route_share(scenario, p.name, t) for t in chosen]
            ps.route_cum = list(np.cumsum(shares)[:-1].tolist())
            ps.route_draw = uniform_draws(stream_rng(seed, replication, "route", p.name), block)
            for t, f in zip(chosen, ps.fifos):
                trans[t].fifo = f
        else:
            mask = 0
            for t in outs:
                mask |= bit[t]
            ps.fifo = Fifo(ps, mask)
            ps.fifos = [ps.fifo]
            for t in outs:
                trans[t].fifo = ps.fifo
    for r in scenario.pools.values():
        for t in scenario.outputs_of(r.name):
            pools[r.name].mask |= bit[t]
    for t in scenario.transitions.values():
        ts = trans[t.name]
        ts.takes = tuple((pools[n], w) for n, w in t.inputs.items() if n in pools)
        ts.gives = tuple((pools[n], w) for n, w in t.outputs.items() if n in pools)
        out = scenario.job_output(t.name)
        ts.out_place = places[out] if out is not None else None
        ts.outcome = t.outcome

    sources: dict[str, SourceState] = {}
    for s in scenario.sources.values():
        arrivals, factor = s.arrivals, None
        if s.rate_varies:
            # drawn once per run from its own stream: every other draw stays as it was
            factor = s.random_rate.sample(stream_rng(seed, replication, "random_rate", s.name))
            arrivals = arrivals.scaled(factor)
        clock = arrivals.clock(stream_rng(seed, replication, "arrivals", s.name), block)
        sources[s.name] = SourceState(s.name, places[s.into], clock, factor)
    net = Net(scenario, places, pools, [trans[n] for n in order], sources, shortcuts)
    for pool in net.pools.values():  # read by PoolState.give, on every path
        pool.takers = tuple((t.fifo, t.bit) for t in net.transitions
                            if any(r is pool for r, _ in t.takes))
    if shortcuts:
        _shortcuts(net)
    return net


def _shortcuts(net: Net) -> None:
    """Precompute what the engine's shortcuts read (see :class:`desim.engine.Engine`).

    When nothing is pending (every transition is disabled) and a token becomes available in a
    FIFO that feeds one transition, only that transition can have become enabled, and only if
    the FIFO was empty: the engine then tries it alone instead of settling the whole net.

    Every fact set here is read by a shortcut only: left at its default (None), it makes the
    engine take the general path at that point."""
    for place in net.places.values():
        plain = place.route_cum is None
        place.plain = place.fifo if plain and place.hold is None else None
        place.held = place.fifo if plain and place.hold is not None else None
    for t in net.transitions:
        if len(t.takes) == 1:
            t.take1, t.weight1 = t.takes[0]
        if len(t.gives) == 1:
            t.give1, t.given1 = t.gives[0]
    for place in net.places.values():
        for fifo in place.fifos:
            takers = [t for t in net.transitions if t.fifo is fifo]
            t = fifo.single = takers[0] if len(takers) == 1 else None
            if t is not None and place.patience is None and place.route_cum is None:
                fifo.direct = t if not t.takes else None
                fifo.quick = t if t.take1 is not None else None
    for pool in net.pools.values():
        pool.taker = pool.takers[0][0] if len(pool.takers) == 1 else None
