"""The event engine: executes a scenario's net with callbacks on SimPy's event queue.

There is no generator process per job. Arrivals, ends of holds, patience deadlines, staffing
changes and statistics snapshots are entries ``(time, priority, eid, item)`` of the queue of a
:class:`simpy.Environment`, in SimPy's order (time, priority, then the environment's own event
counter). :meth:`Engine.run` pops them in a loop of its own, equivalent to ``env.run(until)``;
the items are the engine's small objects (not SimPy events), so only it can process them.
Semantics (design.md §4.2):

* A job entering a place with ``hold`` becomes available after an independent draw; a routed
  place draws the job's output transition at entry (preselection) and keeps one FIFO per output.
* A transition fires as soon as every input holds enough available tokens, at once and repeatedly
  while enabled; jobs leave oldest-first. All events at one instant are applied before anything
  fires (the settle runs when the next event lies later), and transitions then fire one at a time
  lowest global rank first, the rank extending every priority list and putting transitions that
  take no agents first (see :func:`desim.net.transition_order`). So priorities hold even between
  tokens that appear at the same instant.
* Patience: every place with patience has a heap of (deadline, stamp, job) with lazy deletion and
  one armed :class:`~desim.net.PatienceTimer` (after normal events of its instant, so a job with
  patience 0 is taken if it can be at that instant, else it leaves). A timer acts only if its
  generation is the place's current one, a heap entry only if the job's stamp still matches:
  nothing stale can touch a later token. Stale heap entries are purged when they exceed twice the
  live ones; superseded timers are dropped from the event queue when they exceed twice the jobs
  waiting at their place plus :data:`STALE_TIMER_SLACK`.
* Staffing schedules: an increase adds idle agents at the boundary; a cut removes idle agents at
  once and the rest as busy agents return.

Shortcuts do exactly what the general path would (same draws in the same order, same event
order, same floating-point sums): when nothing is pending and no other event shares the instant,
a token that becomes available is offered to the one transition its FIFO feeds
(:meth:`Engine._offer`), and taken without entering the FIFO when it can be
(:meth:`Engine._take_at_once`, inline in :meth:`Engine.run` for the end of a hold and for an
arrival into a queue served by one pool). Every shortcut is guarded by a fact that
:func:`desim.net.build_net` precomputes; a net built with ``shortcuts=False`` has none of them,
so the same loop then takes its general branches alone (:meth:`Engine._available` or
:meth:`Engine._enter`, then :meth:`Engine._settle`), which the tests compare against the
shortcuts. Job objects are reused once their job has ended.

All times are in the scenario's time unit.
"""

from __future__ import annotations

from bisect import bisect_right
from heapq import heapify, heappop, heappush
from itertools import count

import simpy

from .net import INF, Job, Net, PatienceTimer, PlaceState, SourceState

__all__ = ["Engine", "ConservationError", "SimulationError", "ClockStopped", "PatienceTimer",
           "STALE_TIMER_SLACK", "EVENTS_AT_ONE_INSTANT"]

_FIRST = 0  # snapshots and the end of a run (SimPy's URGENT): before the rest of an instant
_NORMAL = 1
_LATE = 2  # after every normal event at the same instant (patience deadlines)
_OUTCOME_INDEX = {"served": 0, "abandoned": 1, "lost": 2}  # SourceState.ended_new

#: Superseded patience timers of a place allowed in the event queue beyond twice its jobs waiting.
STALE_TIMER_SLACK = 16
#: Events at one instant after which a run is stopped as stuck (:class:`ClockStopped`), unless
#: the net itself can need more (recorded arrivals sharing an instant; see ``desim.run``).
EVENTS_AT_ONE_INSTANT = 1_000_000


class SimulationError(RuntimeError):
    """The simulator found itself in an impossible state (a bug, never a user error)."""


class ConservationError(SimulationError):
    """arrivals != completed + abandoned + inside at the end of a run."""


class ClockStopped(ValueError):
    """The simulated clock stopped advancing: more events at one instant than a run can need
    (a scenario whose jobs circle through near-zero holding times, say). Bad input, not a bug:
    the command line reports it in one line with exit code 2."""

    def __init__(self, message: str):
        super().__init__(message)


class _Hook:
    __slots__ = ("callback",)

    def __init__(self, callback):
        self.callback = callback

    def act(self, engine: "Engine", now: float) -> None:
        self.callback(engine)


class _Restaff:
    __slots__ = ("pool", "staff")

    def __init__(self, pool, staff: int):
        self.pool = pool
        self.staff = staff

    def act(self, engine: "Engine", now: float) -> None:
        engine.pending |= self.pool.restaff(self.staff, now)


class _Stop:
    """The end of :meth:`Engine.run`."""

    __slots__ = ()


class Engine:
    """One run of a :class:`~desim.net.Net` on a fresh SimPy environment.

    ``max_jobs``: the run stops (setting ``unstable``) when an arrival would make more jobs inside
    than this. ``trace``: a list that collects ``(time, what, name, job_id)`` for every arrival
    ("arrive", source), firing ("fire", transition) and abandonment ("abandon", place); None (the
    default) records nothing. ``records``: a list collecting job records ``(id, source, arrival,
    end, outcome)`` with outcome ``"completed:<transition>"`` (served), ``"abandoned:<where>"`` or
    ``"lost:<where>"`` (where: a place whose patience ran out, or a transition marked with that
    outcome), or None.
    ``warmup``: waits are recorded (with ``record_waits`` nets) from this time on.
    ``events_at_one_instant``: a run whose clock stays at one instant for more events than
    this raises :class:`ClockStopped` (checked once per that many events: the clock has not
    moved between two checks only when every event between them shared one instant).

    The shortcuts are switched by the net (``build_net(..., shortcuts=False)``): without them
    every token goes through the general firing logic; the results are identical.
    """

    def __init__(self, net: Net, *, max_jobs: int = 1_000_000, trace: list | None = None,
                 records: list | None = None, warmup: float = 0.0,
                 events_at_one_instant: int = EVENTS_AT_ONE_INSTANT):
        self.net = net
        self.env = simpy.Environment()
        self.queue = self.env._queue  # SimPy's heap of (time, priority, eid, item)
        self.eid = self.env._eid  # SimPy's counter of scheduled events
        self.max_jobs = max_jobs
        self.trace = trace
        self.records = records
        self.warmup = warmup
        self.pending = 0  # bits (by rank) of transitions that may have become enabled
        self.stamp = 0
        self.ids = count()  # job ids, in order of arrival
        self.spare: list[Job] = []  # job objects of ended jobs, for reuse
        self.alive = 0
        self.completed = 0
        self.abandoned = 0  # jobs ended unserved (abandoned or lost)
        self.lost = 0  # of those, the lost ones
        self.trans = net.transitions
        self.unstable = False
        self.timed_places = tuple(p for p in net.places.values() if p.patience is not None)
        self.dropped_timers = 0  # superseded patience timers removed from the event queue
        self.events_at_one_instant = events_at_one_instant

    # --- running ----------------------------------------------------------------------------------

    def _push(self, time: float, priority: int, item) -> None:
        heappush(self.queue, (time, priority, next(self.eid), item))

    def start(self) -> None:
        """Schedule the first arrival of every source and the staffing boundaries."""
        now = self.env.now
        for src in self.net.sources.values():
            t = src.next_time(0.0)
            if t < INF:
                self._push(now + (t - now), _NORMAL, src)
        for pool in self.net.pools.values():
            sched = pool.schedule
            if sched is not None:
                for i in range(1, len(sched.staff)):
                    self._push(now + i * sched.step, _NORMAL, _Restaff(pool, sched.staff[i]))

    def at(self, time: float, callback) -> None:
        """Call ``callback(engine)`` at ``time``, before any other event of that instant (so a
        snapshot at t counts what happens at t in the period that starts at t)."""
        now = self.env.now
        self._push(now + (time - now), _FIRST, _Hook(callback))

    def run(self, until: float) -> float:
        """Run to ``until`` (or until the job limit); return the time the run ended.

        As ``env.run(until)``: the end is an urgent entry at ``until``, so events at ``until``
        itself stay in the queue, except urgent ones scheduled before the run started."""
        env = self.env
        at = until if isinstance(until, int) else float(until)
        if at <= env.now:
            raise ValueError(f"until ({at}) must be greater than the current time {env.now}")
        self._push(env.now + (at - env.now), _FIRST, _Stop())
        q, eid, pop, push, new = self.queue, self.eid, heappop, heappush, object.__new__
        Source, Timer = SourceState, PatienceTimer
        trace, records, warmup = self.trace, self.records, self.warmup
        waits = any(p.waits_taken is not None for p in self.net.places.values())
        ids = self.ids if trace is not None or records is not None else None
        spare, max_jobs = self.spare, self.max_jobs
        now = env.now
        every = left = self.events_at_one_instant
        checked_at = None
        while True:
            now, _, _, ev = pop(q)
            left -= 1
            if not left:  # (a countdown costs less per event than comparing times)
                if now == checked_at:
                    self._clock_stopped(now, ev)
                checked_at, left = now, every
            cls = ev.__class__
            if cls is Job:  # the end of a hold
                fifo = ev.fifo
                place = fifo.place
                place.n_hold -= 1
                t = fifo.direct
                if t is not None and not self.pending and q[0][0] > now:
                    # _take_at_once inline, for a transition that takes no agents (its FIFO,
                    # the place's only one, is empty: nothing waits, the area does not grow)
                    fifo.at_once += 1  # counts for the place and the firings of t
                    if waits and place.waits_taken is not None and now >= warmup:
                        place.waits_taken.append(0.0)
                    if trace is not None:
                        trace.append((now, "fire", t.name, ev.id))
                    bits = 0
                    served = None  # the FIFO of the one transition the agents can serve
                    pool = t.give1
                    if pool is not None and not pool.owed:  # PoolState.give inline
                        pool.area_avail += pool.avail * (now - pool.last)
                        pool.last = now
                        pool.avail += t.given1
                        f = pool.taker
                        if f is None:
                            for f, bit in pool.takers:
                                if f.live:
                                    bits |= bit
                        elif f.live:
                            bits = pool.mask
                            served = f
                    else:
                        for pool, k in t.gives:
                            bits |= pool.give(k, now)
                    out = t.out_place
                    if out is not None:
                        bits |= self._enter(out, ev, now)
                    elif records is None and t.outcome == "served":  # _end inline
                        self.alive -= 1
                        src = ev.source
                        src.completed += 1
                        self.completed += 1
                        if ev.arrival >= warmup:
                            src.ended_new[0] += 1
                        w = ev.waited
                        if w:
                            src.wait_sum += w
                        spare.append(ev)
                    else:
                        self._end(ev, now, t.outcome, t.name)
                    if bits:
                        t = served.quick if served is not None and out is None else None
                        if t is None:
                            self.pending = bits
                            self._settle(now)
                        elif pool.avail >= t.weight1:
                            # the one transition the agent can serve (a queue waits) fires, as
                            # _settle would; tried again after only if still enabled
                            bits = self._fire(t, now)
                            if served.live and pool.avail >= t.weight1:
                                bits |= t.bit
                            if bits:
                                self.pending = bits
                                self._settle(now)
                elif not self.pending and q[0][0] > now:
                    self._offer(place, fifo, ev, now)
                else:
                    self.pending |= self._available(place, fifo, ev, now)
                    if q[0][0] > now:
                        self._settle(now)
            elif cls is Source:  # an arrival
                if self.alive >= max_jobs:
                    self.unstable = True
                    break
                job = spare.pop() if spare else new(Job)
                if ids is not None:  # (ids are read by traces and records only)
                    job.id = next(ids)
                job.arrival = now
                job.source = ev
                job.waited = 0.0
                self.alive += 1
                ev.arrived += 1
                if trace is not None:
                    trace.append((now, "arrive", ev.name, job.id))
                place = ev.place
                fifo = place.plain
                if fifo is None:  # a place with a hold or a route
                    bits = self._enter(place, job, now)
                    spacing = ev.spacing
                    t = now + next(spacing) if spacing is not None else ev.next_time(now)
                    if t < INF:
                        push(q, (now + (t - now), _NORMAL, next(eid), ev))
                    if bits or self.pending:
                        self.pending |= bits
                        if q[0][0] > now:
                            self._settle(now)
                    continue
                # A queue. Scheduling the next arrival before a patience timer of the job (the
                # general path does it after) changes no order: the timer is a late event, and
                # entries of different priorities never compare by eid.
                spacing = ev.spacing
                t = now + next(spacing) if spacing is not None else ev.next_time(now)
                if t < INF:
                    push(q, (now + (t - now), _NORMAL, next(eid), ev))
                if self.pending or q[0][0] <= now:
                    job.fifo = fifo
                    self.pending |= self._available(place, fifo, job, now)
                    if q[0][0] > now:
                        self._settle(now)
                    continue
                t = fifo.quick
                if t is None:
                    job.fifo = fifo
                    self._offer(place, fifo, job, now)
                    continue
                if t.take1.avail < t.weight1:  # _available inline: the job waits
                    job.fifo = fifo
                    n = place.n_avail
                    if n:
                        place.area += n * (now - place.last)
                    place.last = now
                    place.n_avail = n + 1
                    place.became_q += 1
                    job.avail = now
                    fifo.dq.append(job)
                    fifo.live += 1
                    continue
                # _take_at_once inline, for a transition that takes agents from one pool (idle
                # agents and nothing pending: the FIFO, the place's only one, is empty)
                fifo.at_once += 1
                if waits and place.waits_taken is not None and now >= warmup:
                    place.waits_taken.append(0.0)
                pool = t.take1
                pool.area_avail += pool.avail * (now - pool.last)
                pool.last = now
                pool.avail -= t.weight1
                if trace is not None:
                    trace.append((now, "fire", t.name, job.id))
                bits = 0
                if t.gives:
                    for pool, k in t.gives:
                        bits |= pool.give(k, now)
                out = t.out_place
                if out is None:
                    self._end(job, now, t.outcome, t.name)
                elif out.held is not None:  # _enter inline
                    job.fifo = out.held
                    out.n_hold += 1
                    push(q, (now + next(out.hold), _NORMAL, next(eid), job))
                else:
                    bits |= self._enter(out, job, now)
                if bits:
                    self.pending = bits
                    self._settle(now)
            elif cls is _Stop:
                break
            else:  # a patience deadline, a snapshot hook, a staffing change
                env._now = now
                if cls is Timer:
                    self._on_patience(ev, now)
                else:
                    ev.act(self, now)
                if self.pending and q[0][0] > now:
                    self._settle(now)
        env._now = now
        return now

    def _clock_stopped(self, now: float, ev) -> None:
        """Raise :class:`ClockStopped` saying where the events of the instant ``now`` act."""
        where: dict[str, None] = {}
        for item in [ev, *(e[3] for e in self.queue if e[0] == now)][:10_000]:
            if isinstance(item, Job):
                where[f"ends of holds at place {item.fifo.place.name}"] = None
            elif isinstance(item, PatienceTimer):
                where[f"patience deadlines at place {item.place.name}"] = None
            elif isinstance(item, SourceState):
                where[f"arrivals of source {item.name}"] = None
        what = ", ".join(list(where)[:4]) or "events"
        raise ClockStopped(
            f"{self.net.scenario.file}: the simulated clock stopped at t={now:g} "
            f"{self.net.scenario.time_unit}: more than {self.events_at_one_instant:,} events at "
            f"that instant ({what}); look for jobs circling through places whose holding times "
            "or patience are (near) zero")

    # --- marking changes (each returns the bits of the transitions it may have enabled) ---------

    def _enter(self, place: PlaceState, job: Job, now: float) -> int:
        if place.route_cum is None:
            fifo = place.fifo
        else:
            fifo = place.fifos[bisect_right(place.route_cum, next(place.route_draw))]
        job.fifo = fifo
        if place.hold is not None:
            place.n_hold += 1
            heappush(self.queue, (now + next(place.hold), _NORMAL, next(self.eid), job))
            return 0
        return self._available(place, fifo, job, now)

    def _available(self, place: PlaceState, fifo, job: Job, now: float) -> int:
        n = place.n_avail
        if n:  # (adding 0 × (now - last) would leave the sum as it is)
            place.area += n * (now - place.last)
        place.last = now
        place.n_avail = n + 1
        place.became_q += 1
        job.avail = now
        if place.patience is not None:
            self.stamp += 1
            stamp = job.stamp = self.stamp
            deadline = now + next(place.patience)
            entry = (deadline, stamp, job)
            heappush(place.heap, entry)
            if deadline < place.armed_at:
                self._arm(place, deadline, now)
            fifo.dq.append(entry)
        else:
            fifo.dq.append(job)
        fifo.live += 1
        return fifo.mask

    def _offer(self, place: PlaceState, fifo, job: Job, now: float) -> None:
        """``job`` becomes available while nothing is pending and no other event shares this
        instant: :meth:`_available` then :meth:`_settle`, trying only what can have changed.
        Without ``fifo.single`` (several takers, or a net without shortcuts) it is exactly
        those two calls."""
        t = fifo.single
        if t is None:
            self.pending = self._available(place, fifo, job, now)
            self._settle(now)
            return
        # Nothing was enabled before, so t is enabled now only if its agents are idle, and then
        # the FIFO was empty: the job is its oldest token.
        for pool, w in t.takes:
            if pool.avail < w:
                self._available(place, fifo, job, now)  # it waits
                return
        if place.patience is None:
            bits = self._take_at_once(place, fifo, t, job, now)
        else:  # the patience draw and the deadline's bookkeeping happen all the same
            self._available(place, fifo, job, now)
            bits = self._fire(t, now)
        if bits:
            self.pending = bits
            self._settle(now)

    def _take_at_once(self, place: PlaceState, fifo, t, job: Job, now: float) -> int:
        """``job`` becomes available in ``place`` (without patience) and ``t`` takes it at this
        instant: :meth:`_available` then :meth:`_fire`, a wait of 0, without the FIFO."""
        n = place.n_avail
        if n:
            place.area += n * (now - place.last)
            place.last = now
        fifo.at_once += 1
        if place.waits_taken is not None and now >= self.warmup:
            place.waits_taken.append(0.0)
        return self._move(t, job, now)

    def _move(self, t, job: Job, now: float) -> int:
        """The rest of a firing of ``t`` once ``job`` has left its place: agents taken and given
        back, the job into the output place or ended. Returns the bits of what may be enabled."""
        for pool, k in t.takes:
            pool.area_avail += pool.avail * (now - pool.last)
            pool.last = now
            pool.avail -= k
        if self.trace is not None:
            self.trace.append((now, "fire", t.name, job.id))
        bits = 0
        for pool, k in t.gives:
            bits |= pool.give(k, now)
        if t.out_place is not None:
            bits |= self._enter(t.out_place, job, now)
        else:
            self._end(job, now, t.outcome, t.name)
        return bits

    def _arm(self, place: PlaceState, deadline: float, now: float) -> None:
        if place.armed_at < INF:  # the timer armed so far is superseded
            place.stale_timers += 1
        place.gen += 1
        place.armed_at = deadline
        heappush(self.queue, (now + (deadline - now), _LATE, next(self.eid),
                              PatienceTimer(place, place.gen)))
        if place.stale_timers > 2 * place.n_avail + STALE_TIMER_SLACK:
            self._drop_stale_timers()

    def _drop_stale_timers(self) -> None:
        """Remove every superseded patience timer from the event queue: they would act on nothing
        (their generation is old), and the other entries keep their keys, hence their order.
        Called when a place's count passes its bound, so the cost, linear in the queue, is paid
        once per STALE_TIMER_SLACK superseded timers or more."""
        q = self.queue
        self.dropped_timers += len(q)
        q[:] = [e for e in q if e[3].__class__ is not PatienceTimer or e[3].gen == e[3].place.gen]
        self.dropped_timers -= len(q)
        heapify(q)
        for place in self.timed_places:
            place.stale_timers = 0

    def _abandon(self, place: PlaceState, job: Job, now: float) -> int:
        fifo = job.fifo
        job.stamp = -1
        fifo.live -= 1
        fifo.dead += 1
        if fifo.dead > 2 * fifo.live + 32:
            fifo.compact()
        n = place.n_avail
        place.area += n * (now - place.last)
        place.last = now
        place.n_avail = n - 1
        w = now - job.avail
        place.left_q += 1
        place.wait_sum += w
        place.abandoned += 1
        early = job.avail < self.warmup
        if early:
            place.left_early += 1
            place.abandoned_early += 1
        if w > place.late_after:  # (counts against the service level, by its convention)
            place.late_q += 1
            place.late_early += early
        if place.tally is not None:
            place.tally.abandoned_after(job.avail, w)
        job.waited += w
        if place.stale_timers > 2 * place.n_avail + STALE_TIMER_SLACK:
            self._drop_stale_timers()
        if place.waits_abandoned is not None and now >= self.warmup:
            place.waits_abandoned.append(w)
        if self.trace is not None:
            self.trace.append((now, "abandon", place.name, job.id))
        if place.abandon_to is not None:
            return self._enter(place.abandon_to, job, now)
        self._end(job, now, "lost" if place.loses else "abandoned", place.name)
        return 0

    def _end(self, job: Job, now: float, outcome: str, where: str) -> None:
        """``job`` ends at ``where`` (a transition or a place) as ``outcome`` for its caller:
        served, abandoned or lost (the last two both count as abandoned in the totals)."""
        self.alive -= 1
        src = job.source
        if outcome == "served":
            src.completed += 1
            self.completed += 1
        else:
            src.abandoned += 1
            self.abandoned += 1
            if outcome == "lost":
                src.lost += 1
                self.lost += 1
            if src.tally is not None:
                src.tally.unserved(job.arrival)
        if job.arrival >= self.warmup:
            src.ended_new[_OUTCOME_INDEX[outcome]] += 1
        src.wait_sum += job.waited
        if self.records is not None:
            kind = "completed:" if outcome == "served" else outcome + ":"
            self.records.append((job.id, src.name, job.arrival, now, kind + where))
        # Stale entries of a patience heap may still point at the object: their stamps can never
        # match the stamps it gets in a later life.
        self.spare.append(job)

    # --- events other than arrivals and ends of holds --------------------------------------------

    def _on_patience(self, timer: PatienceTimer, now: float) -> None:
        place = timer.place
        if timer.gen == place.gen:
            limit = max(place.armed_at, now)
            place.armed_at = INF
            if self.pending:  # jobs that can be taken at this instant are taken, not lost
                self._settle(now)
            heap = place.heap
            bits = 0
            while heap and heap[0][0] <= limit:
                _, stamp, job = heappop(heap)
                if job.stamp == stamp:
                    bits |= self._abandon(place, job, now)
                else:
                    place.heap_dead -= 1
            while heap and heap[0][2].stamp != heap[0][1]:
                heappop(heap)
                place.heap_dead -= 1
            if heap and heap[0][0] < place.armed_at:
                self._arm(place, heap[0][0], now)
            self.pending |= bits
        else:
            place.stale_timers -= 1

    # --- firing ----------------------------------------------------------------------------------

    def _settle(self, now: float) -> None:
        """Fire enabled transitions, one firing at a time, lowest rank first, until none is."""
        trans = self.trans
        pending = self.pending
        while pending:
            low = pending & -pending
            t = trans[low.bit_length() - 1]
            if t.fifo.live:
                for pool, w in t.takes:
                    if pool.avail < w:
                        break
                else:
                    pending |= self._fire(t, now)
                    continue
            pending ^= low
        self.pending = 0

    def _fire(self, t, now: float) -> int:
        fifo = t.fifo
        place = fifo.place
        if place.heap is None:
            job = fifo.dq.popleft()
        else:
            dq = fifo.dq
            entry = dq.popleft()
            while entry[2].stamp != entry[1]:
                fifo.dead -= 1
                entry = dq.popleft()
            job = entry[2]
            job.stamp = -1
            place.heap_dead += 1
            if place.heap_dead > 2 * (len(place.heap) - place.heap_dead) + 32:
                place.compact_heap()
            if place.stale_timers > 2 * (place.n_avail - 1) + STALE_TIMER_SLACK:
                self._drop_stale_timers()
        fifo.live -= 1
        n = place.n_avail
        place.area += n * (now - place.last)
        place.last = now
        place.n_avail = n - 1
        w = now - job.avail
        place.left_q += 1
        if job.avail < self.warmup:
            place.left_early += 1
        if w:
            place.wait_sum += w
            job.waited += w
        else:
            place.zero_q += 1
        if w <= place.within:
            place.within_q += 1
            if job.avail < self.warmup:
                place.within_early += 1
        if place.waits_taken is not None and now >= self.warmup:
            place.waits_taken.append(w)
        if place.tally is not None:
            place.tally.taken(job.avail, w)
        t.fired += 1
        return self._move(t, job, now)

    # --- bookkeeping -----------------------------------------------------------------------------

    def inside(self) -> int:
        """Jobs in the net now, counted place by place (held or available)."""
        return sum(p.n_hold + p.n_avail for p in self.net.places.values())

    def check_conservation(self) -> None:
        """Raise :class:`ConservationError` unless arrivals = completed + abandoned + inside, and
        the per-place and per-FIFO counts agree."""
        arrivals = sum(s.arrived for s in self.net.sources.values())
        inside = self.inside()
        if arrivals != self.completed + self.abandoned + inside or inside != self.alive:
            raise ConservationError(
                f"conservation violated at t={self.env.now:g}: arrivals {arrivals} != completed "
                f"{self.completed} + abandoned {self.abandoned} + inside {inside} "
                f"(jobs alive {self.alive})")
        for p in self.net.places.values():
            live = sum(f.live for f in p.fifos)
            if live != p.n_avail or p.n_hold < 0:
                raise ConservationError(
                    f"place {p.name}: {live} jobs in its queues but {p.n_avail} counted available")
        for r in self.net.pools.values():
            if r.present != r.target + r.owed or r.owed < 0 or r.avail < 0:
                raise ConservationError(f"pool {r.name}: inconsistent staffing state")
