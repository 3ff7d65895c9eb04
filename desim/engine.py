"""The event engine: executes a scenario's net on SimPy's event queue with callbacks.

There is no generator process per job. Arrivals, ends of holds, patience deadlines, staffing
changes and statistics snapshots are SimPy events whose callbacks change the marking; firing is
done by :meth:`Engine._settle`. Semantics (design.md §4.2):

* A job entering a place with ``hold`` becomes available after an independent draw; a routed
  place draws the job's output transition at entry (preselection) and keeps one FIFO per output.
* A transition fires as soon as every input holds enough available tokens, at once and repeatedly
  while enabled; jobs leave oldest-first. All events at one instant are applied before anything
  fires (the settle runs when the next event lies later), and transitions then fire one at a time
  lowest global rank first, the rank extending every priority list and putting transitions that
  take no agents first (see :func:`desim.net.transition_order`). So priorities hold even between
  tokens that appear at the same instant.
* Patience: every place with patience has a heap of (deadline, stamp, job) with lazy deletion and
  one armed SimPy timer (priority after normal events, so a job with patience 0 is taken if it
  can be at that instant, else it leaves). A timer carries a generation number and acts only if
  it is the current one, and a heap entry acts only if the job's stamp still matches: nothing
  stale can touch a later token. Stale entries are purged when they exceed twice the live ones.
* Staffing schedules: an increase adds idle agents at the boundary; a cut removes idle agents at
  once and the rest as busy agents return.

All times are in the scenario's time unit.
"""

from __future__ import annotations

import heapq
from bisect import bisect_right

import simpy
from simpy.events import Event

from .net import INF, Net, PlaceState, PoolState

__all__ = ["Engine", "JobLimitReached", "ConservationError", "SimulationError"]

_FIRST = 0  # snapshots: before anything else at the same instant
_NORMAL = 1
_LATE = 2  # after every normal event at the same instant (patience deadlines)
_heappush, _heappop = heapq.heappush, heapq.heappop


class SimulationError(RuntimeError):
    """The simulator found itself in an impossible state (a bug, never a user error)."""


class ConservationError(SimulationError):
    """arrivals != completed + abandoned + inside at the end of a run."""


class JobLimitReached(Exception):
    """Raised inside a run when more than ``max_jobs`` jobs are inside at once (an unstable net)."""


class _Timer(Event):
    """A SimPy event scheduled after ``delay`` at a given priority, with one callback."""

    def __init__(self, env, delay, callback, value, priority=_NORMAL):
        self.env = env
        self.callbacks = [callback]
        self._value = value
        self._ok = True
        env.schedule(self, priority, delay)


class _Job:
    """One job: its record and where it currently is. ``stamp`` identifies its current stay as
    an available token (-1 when it is not available anywhere)."""

    __slots__ = ("id", "source", "arrival", "stamp", "avail", "fifo", "waited")

    def __init__(self, id, source, arrival):
        self.id = id
        self.source = source
        self.arrival = arrival
        self.stamp = -1
        self.avail = 0.0
        self.fifo = None
        self.waited = 0.0  # total time available-and-waiting over all places


class Engine:
    """One run of a :class:`~desim.net.Net` on a fresh SimPy environment.

    ``max_jobs``: the run stops (raising :class:`JobLimitReached` out of :meth:`run`'s loop, caught
    by :meth:`run`) when an arrival would make more jobs inside than this. ``trace``: a list that
    collects ``(time, what, name, job_id)`` for every arrival ("arrive", source), firing ("fire",
    transition) and abandonment ("abandon", place); None (the default) records nothing.
    ``records``: a list collecting job records ``(id, source, arrival, end, outcome)`` with
    outcome ``"completed:<transition>"`` or ``"abandoned:<place>"``, or None.
    """

    def __init__(self, net: Net, *, max_jobs: int = 1_000_000, trace: list | None = None,
                 records: list | None = None, warmup: float = 0.0):
        self.net = net
        self.env = simpy.Environment()
        self.max_jobs = max_jobs
        self.trace = trace
        self.records = records
        self.warmup = warmup
        self.pending = 0  # bits (by rank) of transitions that may have become enabled
        self.stamp = 0
        self.next_id = 0
        self.alive = 0
        self.completed = 0
        self.abandoned = 0
        self.trans = net.transitions
        self.unstable = False

    # --- running ----------------------------------------------------------------------------------

    def start(self) -> None:
        """Schedule the first arrival of every source and the staffing boundaries."""
        env = self.env
        for src in self.net.sources.values():
            t = src.next_time(0.0)
            if t < INF:
                _Timer(env, t, self._on_arrival, src)
        for pool in self.net.pools.values():
            sched = pool.schedule
            if sched is not None:
                for i in range(1, len(sched.staff)):
                    _Timer(env, i * sched.step, self._on_schedule, (pool, sched.staff[i]))

    def at(self, time: float, callback) -> None:
        """Call ``callback(engine)`` at ``time``, before any other event of that instant (so a
        snapshot at t counts what happens at t in the period that starts at t)."""
        _Timer(self.env, time - self.env.now, self._on_hook, callback, _FIRST)

    def run(self, until: float) -> float:
        """Run to ``until`` (or until the job limit); return the time the run ended."""
        try:
            self.env.run(until=until)
        except JobLimitReached:
            self.unstable = True
        return self.env.now

    # --- callbacks (each ends by settling if nothing else happens at this instant) -----------------

    def _on_arrival(self, ev) -> None:
        src = ev._value
        env = self.env
        now = env.now
        if self.alive >= self.max_jobs:
            raise JobLimitReached(now)
        job = _Job(self.next_id, src, now)
        self.next_id += 1
        self.alive += 1
        src.arrived += 1
        if self.trace is not None:
            self.trace.append((now, "arrive", src.name, job.id))
        self._enter(src.place, job, now)
        t = src.next_time(now)
        if t < INF:
            _Timer(env, t - now, self._on_arrival, src)
        if self.pending and env.peek() > now:
            self._settle(now)

    def _on_hold(self, ev) -> None:
        job = ev._value
        fifo = job.fifo
        place = fifo.place
        place.n_hold -= 1
        now = self.env.now
        self._available(place, fifo, job, now)
        if self.env.peek() > now:
            self._settle(now)

    def _on_patience(self, ev) -> None:
        place, gen = ev._value
        now = self.env.now
        if gen == place.gen:
            limit = max(place.armed_at, now)
            place.armed_at = INF
            if self.pending:  # jobs that can be taken at this instant are taken, not lost
                self._settle(now)
            heap = place.heap
            while heap and heap[0][0] <= limit:
                _, stamp, job = _heappop(heap)
                if job.stamp == stamp:
                    self._abandon(place, job, now)
                else:
                    place.heap_dead -= 1
            while heap and heap[0][2].stamp != heap[0][1]:
                _heappop(heap)
                place.heap_dead -= 1
            if heap and heap[0][0] < place.armed_at:
                self._arm(place, heap[0][0], now)
        if self.pending and self.env.peek() > now:
            self._settle(now)

    def _on_schedule(self, ev) -> None:
        pool, staff = ev._value
        now = self.env.now
        self._restaff(pool, staff, now)
        if self.pending and self.env.peek() > now:
            self._settle(now)

    def _on_hook(self, ev) -> None:
        ev._value(self)
        now = self.env.now
        if self.pending and self.env.peek() > now:
            self._settle(now)

    # --- marking changes -----------------------------------------------------------------------------

    def _enter(self, place: PlaceState, job: _Job, now: float) -> None:
        if place.route_cum is None:
            fifo = place.fifo
        else:
            fifo = place.fifos[bisect_right(place.route_cum, next(place.route_draw))]
        job.fifo = fifo
        if place.hold is not None:
            place.n_hold += 1
            _Timer(self.env, next(place.hold), self._on_hold, job)
        else:
            self._available(place, fifo, job, now)

    def _available(self, place: PlaceState, fifo, job: _Job, now: float) -> None:
        place.area += place.n_avail * (now - place.last)
        place.last = now
        place.n_avail += 1
        place.became += 1
        self.stamp += 1
        stamp = job.stamp = self.stamp
        job.avail = now
        if place.patience is not None:
            deadline = now + next(place.patience)
            entry = (deadline, stamp, job)
            _heappush(place.heap, entry)
            if deadline < place.armed_at:
                self._arm(place, deadline, now)
        else:
            entry = (now, stamp, job)
        fifo.dq.append(entry)
        fifo.live += 1
        self.pending |= fifo.mask

    def _arm(self, place: PlaceState, deadline: float, now: float) -> None:
        place.gen += 1
        place.armed_at = deadline
        _Timer(self.env, deadline - now, self._on_patience, (place, place.gen), _LATE)

    def _abandon(self, place: PlaceState, job: _Job, now: float) -> None:
        fifo = job.fifo
        job.stamp = -1
        fifo.live -= 1
        fifo.dead += 1
        if fifo.dead > 2 * fifo.live + 32:
            fifo.compact()
        place.area += place.n_avail * (now - place.last)
        place.last = now
        place.n_avail -= 1
        w = now - job.avail
        place.left += 1
        place.wait_sum += w
        place.abandoned += 1
        job.waited += w
        if place.waits_abandoned is not None and now >= self.warmup:
            place.waits_abandoned.append(w)
        if self.trace is not None:
            self.trace.append((now, "abandon", place.name, job.id))
        if place.abandon_to is not None:
            self._enter(place.abandon_to, job, now)
        else:
            self._end(job, now, False, place.name)

    def _give(self, pool: PoolState, w: int, now: float) -> None:
        if pool.owed:  # agents owed to a cut leave as they return
            a = min(pool.owed, w)
            pool.owed -= a
            pool.area_present += pool.present * (now - pool.plast)
            pool.plast = now
            pool.present -= a
            w -= a
            if not w:
                return
        pool.area_avail += pool.avail * (now - pool.last)
        pool.last = now
        pool.avail += w
        self.pending |= pool.mask

    def _restaff(self, pool: PoolState, staff: int, now: float) -> None:
        diff = staff - pool.target
        pool.target = staff
        pool.area_present += pool.present * (now - pool.plast)
        pool.plast = now
        pool.area_avail += pool.avail * (now - pool.last)
        pool.last = now
        if diff > 0:
            keep = min(pool.owed, diff)  # busy agents due to leave stay on instead
            pool.owed -= keep
            diff -= keep
            pool.present += diff
            pool.avail += diff
            if diff:
                self.pending |= pool.mask
        elif diff < 0:
            cut = -diff
            idle = min(pool.avail, cut)
            pool.avail -= idle
            pool.present -= idle
            pool.owed += cut - idle

    def _end(self, job: _Job, now: float, completed: bool, where: str) -> None:
        self.alive -= 1
        src = job.source
        if completed:
            src.completed += 1
            self.completed += 1
        else:
            src.abandoned += 1
            self.abandoned += 1
        src.wait_sum += job.waited
        if self.records is not None:
            outcome = ("completed:" if completed else "abandoned:") + where
            self.records.append((job.id, src.name, job.arrival, now, outcome))

    # --- firing ----------------------------------------------------------------------------------------

    def _settle(self, now: float) -> None:
        """Fire enabled transitions, one firing at a time, lowest rank first, until none is."""
        trans = self.trans
        while self.pending:
            p = self.pending
            low = p & -p
            t = trans[low.bit_length() - 1]
            enabled = t.fifo.live > 0
            if enabled:
                for pool, w in t.takes:
                    if pool.avail < w:
                        enabled = False
                        break
            if enabled:
                self._fire(t, now)
            else:
                self.pending &= ~low

    def _fire(self, t, now: float) -> None:
        fifo = t.fifo
        dq = fifo.dq
        entry = dq.popleft()
        while entry[2].stamp != entry[1]:
            fifo.dead -= 1
            entry = dq.popleft()
        job = entry[2]
        fifo.live -= 1
        place = fifo.place
        place.area += place.n_avail * (now - place.last)
        place.last = now
        place.n_avail -= 1
        w = now - job.avail
        place.left += 1
        place.wait_sum += w
        job.waited += w
        if w <= place.within:
            place.taken_within += 1
        if place.heap is not None:
            place.heap_dead += 1
            if place.heap_dead > 2 * (len(place.heap) - place.heap_dead) + 32:
                place.compact_heap()
        if place.waits_taken is not None and now >= self.warmup:
            place.waits_taken.append(w)
        job.stamp = -1
        for pool, k in t.takes:
            pool.area_avail += pool.avail * (now - pool.last)
            pool.last = now
            pool.avail -= k
        t.firings += 1
        if self.trace is not None:
            self.trace.append((now, "fire", t.name, job.id))
        for pool, k in t.gives:
            self._give(pool, k, now)
        if t.out_place is not None:
            self._enter(t.out_place, job, now)
        else:
            self._end(job, now, True, t.name)

    # --- bookkeeping -----------------------------------------------------------------------------------

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
