"""Per-interval counts by arrival interval: each job counted in the interval it became available
(at a place) or arrived (a caller), whenever it leaves.

A run asked for intervals (``interval=STEP``) gives each waiting place and each place with a
service target a :class:`PlaceTally`, and every source one shared :class:`CallerTally`. The
engine calls them where a job leaves a place through its general path (:meth:`PlaceTally.taken`
from ``Engine._fire``, :meth:`PlaceTally.abandoned` from ``Engine._abandon``) and where a caller
ends unserved (:meth:`CallerTally.unserved` from ``Engine._end``). Tokens the engine's shortcuts
take the instant they become available never reach them: they become available and leave at the
same instant, so the snapshot differences of the interval table count them in the right interval
(a wait of 0, taken within any target). Served callers are not counted one by one either: the
callers of an interval that ended served are its arrivals, less those still inside at the end
(:func:`inside_by_interval`), less those that ended unserved. So nothing is kept per job, and a
run without intervals pays nothing.

The interval of a time is found by bisection on the boundary times the run has recorded so far
(the same times its snapshots were taken at), so a job at a boundary instant is counted in the
interval that starts there, as the snapshots count it. All times in the scenario's time unit.
"""

from __future__ import annotations

from bisect import bisect_right

__all__ = ["PlaceTally", "CallerTally", "attach_tallies", "inside_by_interval"]


def _grow(counts: list, k: int) -> None:
    if k >= len(counts):
        counts.extend([0] * (k + 1 - len(counts)))


class PlaceTally:
    """Counts, by the interval a job became available in, of the jobs that left the place
    through the engine's general path: ``left`` (taken or abandoned), ``within`` (taken with a
    wait of at most ``within``), ``abandoned``, ``late`` (abandoned after waiting more than
    ``late_after``), and ``wait_sum`` (their waits summed)."""

    __slots__ = ("times", "within_limit", "late_after", "left", "within", "abandoned", "late",
                 "wait_sum")

    def __init__(self, times: list, within: float, late_after: float):
        self.times = times  # boundary times recorded so far (shared with the run)
        self.within_limit = within  # negative: no target
        self.late_after = late_after
        self.left: list[int] = []
        self.within: list[int] = []
        self.abandoned: list[int] = []
        self.late: list[int] = []
        self.wait_sum: list[float] = []

    def _slot(self, avail: float) -> int:
        k = bisect_right(self.times, avail) - 1
        if k >= len(self.left):
            for counts in (self.left, self.within, self.abandoned, self.late, self.wait_sum):
                _grow(counts, k)
        return k

    def taken(self, avail: float, wait: float) -> None:
        k = self._slot(avail)
        self.left[k] += 1
        self.wait_sum[k] += wait
        if wait <= self.within_limit:
            self.within[k] += 1

    def abandoned_after(self, avail: float, wait: float) -> None:
        k = self._slot(avail)
        self.left[k] += 1
        self.wait_sum[k] += wait
        self.abandoned[k] += 1
        if wait > self.late_after:
            self.late[k] += 1

    def count(self, field: str, k: int) -> float:
        """Interval ``k``'s count of ``field`` (0 where nothing was counted)."""
        counts = getattr(self, field)
        return counts[k] if k < len(counts) else 0


class CallerTally:
    """Counts, by the interval a caller arrived in, of the callers that ended unserved
    (abandoned or lost), every source together."""

    __slots__ = ("times", "unserved_by")

    def __init__(self, times: list):
        self.times = times
        self.unserved_by: list[int] = []

    def unserved(self, arrival: float) -> None:
        k = bisect_right(self.times, arrival) - 1
        _grow(self.unserved_by, k)
        self.unserved_by[k] += 1

    def count(self, k: int) -> int:
        return self.unserved_by[k] if k < len(self.unserved_by) else 0


def attach_tallies(net, places, times: list) -> CallerTally:
    """Give each place named in ``places`` a :class:`PlaceTally` and every source of ``net``
    one shared :class:`CallerTally` (returned), all reading the boundary list ``times``."""
    for name in places:
        p = net.places[name]
        p.tally = PlaceTally(times, p.within, p.late_after)
    callers = CallerTally(times)
    for s in net.sources.values():
        s.tally = callers
    return callers


def inside_by_interval(engine, times: list) -> list[int]:
    """The jobs still inside at the end of a run, by the interval they arrived in: those
    available and waiting in a place and those in a hold (the engine's queue holds a job
    object for each hold under way)."""
    from .net import Job

    counts: list[int] = []
    jobs = [j for p in engine.net.places.values() for f in p.fifos for j in f.waiting()]
    jobs += [e[3] for e in engine.queue if e[3].__class__ is Job]
    for job in jobs:
        k = bisect_right(times, job.arrival) - 1
        _grow(counts, k)
        counts[k] += 1
    return counts
