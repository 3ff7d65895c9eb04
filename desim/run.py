"""One replication: build the net, run the engine, turn its counters into statistics.

Statistics are taken over the window [warmup, end] (end = horizon, or the time an unstable run
was stopped) from cumulative counters snapshotted at the warm-up and at the end, so nothing per
job is kept unless asked for (design.md §4.2):

* place ``wait``: mean time from becoming available to leaving, over tokens that left in the window;
* place ``served_within`` (places with a service target): taken within ``within`` / jobs with
  an outcome; ``abandoned``: abandoned / jobs with an outcome. Both sides of both shares count
  the same jobs: those that became available in the window and left the place (taken or
  abandoned) by its end. A job that became available before the warm-up is in neither side, nor
  is a job still waiting at the end (it has no outcome yet), so no share exceeds 1 and a pool
  with no staff shows an abandoned share of exactly 1. ``abandoned_count`` is every abandonment
  in the window, whenever the job became available. ``queue``: time-average number
  available and waiting; ``delayed``: not taken the instant they became available (they waited,
  or abandoned, or still wait at the end) / became available, Erlang C's P(W > 0) at a queue;
* place ``waiting_at_warmup``, ``waiting_at_end``: jobs available and waiting at the warm-up
  instant and at the end; ``waited_at_warmup``, ``waited_at_end``: how long those jobs had waited
  so far, summed. They close Little's law exactly, per run and place:
  ``queue × (end − warmup) = wait × left + waited_at_end − waited_at_warmup`` (the area under
  the number waiting is the waiting time inside the window of every job that waited there);
* waiting place (:func:`fluid.structure.waiting_places`) ``wait_p50``, ``wait_p80``, ... (one
  per percentile asked for, default
  :data:`DEFAULT_PERCENTILES`): that percentile of the waits of the jobs that left the place in
  the window, taken and abandoning together (the jobs ``wait`` averages over; numpy's linear
  percentile); ``asa``, the average speed of answer: the mean wait of the jobs TAKEN in the window
  (abandoners left out); ``served_wait_p50``, ... the percentiles of the taken jobs' waits and
  ``abandoned_wait_p50``, ... those of the abandoners' times to abandon, apart. These need the
  window's waits, so every run keeps them while it runs
  (one float per job leaving a place in the window: 8 bytes each, some MB for a day of calls)
  and drops them afterwards unless ``record_waits``;
* transition ``rate``: firings per time unit;
* pool ``busy``: busy agent-time / on-duty agent-time (with a fixed staff: the time-average
  fraction of staff not available);
* source ``arrivals``, ``completed`` (jobs that ended served), ``abandoned`` (jobs that ended
  unserved: by patience with no ``abandon_to``, or at a transition marked ``outcome: abandoned``
  or ``lost``), ``lost`` (of those, the lost ones: patience 0, or marked lost) (counts in the
  window), ``abandoned_share`` (abandoned / jobs that ended in the window), ``total_wait`` (mean
  total waiting time of the jobs that ended in the window, over all the places they waited in);
* source per-caller outcomes (however many visits a caller made, e.g. through a redial loop):
  ``callers_ended``, the jobs that arrived in the window and ended by its end, and
  ``callers_served``, ``callers_abandoned``, ``callers_lost``, the shares of them that ended
  each way (they sum to 1); ``rate_factor``, for a source with a ``random_rate``, the day
  factor this run drew for its rates.

All times are in the scenario's time unit.
"""

from __future__ import annotations

import math
import sys
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from fluid.scenario import OUTCOMES, Limits, Scenario
from fluid.structure import waiting_places

from .by_arrival import attach_tallies, inside_by_interval
from .engine import EVENTS_AT_ONE_INSTANT, Engine
from .net import Net, build_net
from .warmup import MserResult, mser5

if TYPE_CHECKING:  # pandas is imported where a table is built (importing it is slow)
    import pandas as pd

__all__ = ["RunResult", "run_replication", "DEFAULT_MAX_JOBS", "DEFAULT_SAMPLES", "check_settings",
           "waiting_places", "DEFAULT_PERCENTILES", "percentile_metric", "check_percentiles",
           "SERVED_PREFIX", "ABANDONED_PREFIX"]

#: Jobs allowed inside at once before a run is declared unstable (about 0.3 GB per run).
DEFAULT_MAX_JOBS = 1_000_000
#: Points of the total-queue series per run (the MSER-5 input).
DEFAULT_SAMPLES = 1000

#: Wait percentiles reported per place unless others are asked for.
DEFAULT_PERCENTILES = (50.0, 80.0, 90.0, 95.0)


def percentile_metric(q: float) -> str:
    """The place metric of wait percentile ``q`` (in percent): ``wait_p50``, ``wait_p99.5``."""
    return f"wait_p{float(q):g}"


def check_percentiles(percentiles) -> tuple[float, ...]:
    """``percentiles`` as a tuple of floats, each in [0, 100] (else :class:`ValueError` naming
    the value)."""
    out = []
    for q in percentiles:
        q = float(q)
        if not 0.0 <= q <= 100.0:
            raise ValueError(f"a wait percentile must lie in [0, 100] (got {q:g})")
        out.append(q)
    return tuple(dict.fromkeys(out))


#: Prefixes of the percentiles of the served jobs' waits and of the abandoners' times to
#: abandon, drawn apart (``served_wait_p50``, ``abandoned_wait_p50``, ...).
SERVED_PREFIX = "served_wait_p"
ABANDONED_PREFIX = "abandoned_wait_p"


def _percentiles(values: np.ndarray, percentiles: tuple[float, ...], prefix: str) -> dict:
    names = [prefix + percentile_metric(q).removeprefix("wait_p") for q in percentiles]
    if not values.size:
        return dict.fromkeys(names, math.nan)
    return dict(zip(names, np.percentile(values, percentiles).tolist()))


def _wait_figures(taken: list[float], abandoned: list[float],
                  percentiles: tuple[float, ...]) -> dict[str, float]:
    """Per place and run: the wait percentiles over every job that left in the window (taken
    or abandoning), the same over the taken jobs alone (``served_wait_pNN``) and over the
    abandoners alone (``abandoned_wait_pNN``, their times to abandon), and the average speed of
    answer (mean wait of the taken ones); nan where nothing (of that kind) left."""
    taken_a = np.asarray(taken, dtype=float)
    abandoned_a = np.asarray(abandoned, dtype=float)
    out = _percentiles(np.concatenate([taken_a, abandoned_a]), percentiles, "wait_p")
    out["asa"] = float(np.mean(taken_a)) if taken_a.size else math.nan
    out.update(_percentiles(taken_a, percentiles, SERVED_PREFIX))
    out.update(_percentiles(abandoned_a, percentiles, ABANDONED_PREFIX))
    return out


_PLACE_FIELDS = ("became", "left", "wait_sum", "abandoned", "taken_within", "area",
                 "taken_at_once", "left_early", "abandoned_early", "within_early", "at_once",
                 "late", "late_early")
_SOURCE_FIELDS = ("arrived", "completed", "abandoned", "wait_sum", "lost", "served_new",
                  "abandoned_new", "lost_new")


@dataclass(frozen=True)
class RunResult:
    """Figures of one replication. Metric dictionaries map a node name to ``{metric: value}``
    (nan where there was nothing to measure). ``end`` is when the run stopped: the horizon, or
    earlier when ``unstable`` (too many jobs inside). ``totals`` are whole-run counts
    (arrivals, completed, abandoned, inside). ``queue_series`` is the time-average total number
    of jobs available and waiting over each ``sample_step``; ``mser`` its MSER-5 analysis.
    ``intervals`` (when asked for) is a tidy table with columns interval, start, end, metric,
    name, value. ``waits`` (when asked for) maps a place to ``{"taken": array, "abandoned":
    array}`` of the waits of tokens that left in the window. ``jobs`` (when asked for) lists job
    records ``(id, source, arrival, end, outcome)``. ``events``: arrivals + ends of holds +
    firings + abandonments over the whole run."""

    replication: int
    seed: int
    horizon: float
    warmup: float
    end: float
    unstable: bool
    transitions: dict
    places: dict
    pools: dict
    sources: dict
    totals: dict
    queue_series: np.ndarray = field(repr=False)
    sample_step: float
    mser: MserResult = field(repr=False)
    intervals: pd.DataFrame | None = field(default=None, repr=False)
    waits: dict | None = field(default=None, repr=False)
    jobs: list | None = field(default=None, repr=False)
    events: int = 0

    def values(self) -> dict[tuple[str, str, str], float]:
        """Every figure as ``{(kind, name, metric): value}`` with kind transition, place, pool or
        source."""
        out = {}
        for kind, table in (("transition", self.transitions), ("place", self.places),
                            ("pool", self.pools), ("source", self.sources)):
            for name, metrics in table.items():
                for metric, value in metrics.items():
                    out[(kind, name, metric)] = value
        return out


#: No bound on intervals: one run checks only that its settings make sense (the limits are the
#: caller's, checked once by :func:`desim.resolve_settings`).
_ANY_INTERVALS = Limits(intervals=sys.maxsize)


def check_settings(horizon: float, warmup: float, interval: float | None = None,
                   max_jobs: int | None = None) -> None:
    """Raise :class:`desim.SettingsError` (a ValueError) for settings no run can use (the
    checks of :func:`desim.resolve_settings`, without its limits)."""
    from .settings import SimulationSettings

    SimulationSettings(replications=1, horizon=horizon, warmup=warmup, seed=0,
                       interval=interval, max_jobs=max_jobs,
                       limits=_ANY_INTERVALS).with_changes()


def _snapshot(net: Net, now: float) -> np.ndarray:
    """Cumulative counters of every node at ``now``, in a fixed layout (see :func:`_split`)."""
    values: list[float] = []
    for p in net.places.values():
        values += (p.became, p.left, p.wait_sum, p.abandoned, p.taken_within, p.area_at(now),
                   p.taken_at_once, p.left_early, p.abandoned_early, p.within_early, p.at_once,
                   p.late_q, p.late_early)
    for r in net.pools.values():
        values += r.areas_at(now)
    values += (t.firings for t in net.transitions)
    for s in net.sources.values():
        values += (s.arrived, s.completed, s.abandoned, s.wait_sum, s.lost, *s.ended_new)
    return np.array(values, dtype=float)


def _split(net: Net, snap: np.ndarray) -> tuple[dict, dict, dict, dict]:
    snap = snap.tolist()  # plain floats in the results, not numpy scalars
    i = 0
    places, pools, trans, sources = {}, {}, {}, {}
    for name in net.places:
        places[name] = dict(zip(_PLACE_FIELDS, snap[i:i + len(_PLACE_FIELDS)]))
        i += len(_PLACE_FIELDS)
    for name in net.pools:
        pools[name] = {"busy_area": snap[i], "duty_area": snap[i + 1]}
        i += 2
    for t in net.transitions:
        trans[t.name] = snap[i]
        i += 1
    for name in net.sources:
        sources[name] = dict(zip(_SOURCE_FIELDS, snap[i:i + len(_SOURCE_FIELDS)]))
        i += len(_SOURCE_FIELDS)
    return places, pools, trans, sources


def _backlog(net: Net, now: float) -> dict[str, tuple[int, float]]:
    """Per place: (jobs available and waiting at ``now``, how long they have waited so far)."""
    return {name: p.waiting_at(now) for name, p in net.places.items()}


def _ratio(a: float, b: float) -> float:
    return a / b if b > 0 else math.nan


def _served_within(target, within: float, left: float, abandoned: float, late: float) -> float:
    """The service level under ``target``'s abandoner convention, from counts of the same jobs:
    ``within`` taken within the target, ``left`` taken or abandoned, ``abandoned``, and
    ``late`` the abandoners that count against it (all of them for "against", none for
    "excluded", those that waited more than ``excluded_within`` otherwise): taken within /
    (taken + abandoners counted against)."""
    if getattr(target, "abandoned", "against") == "against":
        return _ratio(within, left)  # (late == abandoned: the same figure, as it always was)
    return _ratio(within, left - abandoned + late)


def _window_stats(scenario: Scenario, net: Net, delta: np.ndarray, length: float):
    places_d, pools_d, trans_d, sources_d = _split(net, delta)
    transitions = {
        t: {"rate": _ratio(trans_d[t], length), "firings": int(trans_d[t])}
        for t in scenario.transitions
    }
    places = {}
    for name, d in places_d.items():
        # (the shares count the same jobs on both sides: those that became available in the
        # window and left it, taken or abandoned, by its end)
        outcomes = d["left"] - d["left_early"]
        m = {
            "wait": _ratio(d["wait_sum"], d["left"]),
            "abandoned": _ratio(d["abandoned"] - d["abandoned_early"], outcomes),
            "queue": _ratio(d["area"], length),
        }
        target = scenario.targets.service.get(name)
        if target is not None:
            m["served_within"] = _served_within(
                target, d["taken_within"] - d["within_early"], outcomes,
                d["abandoned"] - d["abandoned_early"], d["late"] - d["late_early"])
        m["delayed"] = _ratio(d["became"] - d["taken_at_once"], d["became"])
        m.update(became=int(d["became"]), left=int(d["left"]), abandoned_count=int(d["abandoned"]))
        places[name] = m
    pools = {name: {"busy": _ratio(d["busy_area"], d["duty_area"])} for name, d in pools_d.items()}
    sources = {}
    for name, d in sources_d.items():
        ended = d["completed"] + d["abandoned"]
        sources[name] = {
            "arrivals": int(d["arrived"]),
            "completed": int(d["completed"]),
            "abandoned": int(d["abandoned"]),
            "abandoned_share": _ratio(d["abandoned"], ended),
            "total_wait": _ratio(d["wait_sum"], ended),
            "lost": int(d["lost"]),
        }
        # per caller: the callers that arrived in the window and ended by its end, however many
        # visits they made, by how they ended (the same callers on both sides of each share)
        callers = d["served_new"] + d["abandoned_new"] + d["lost_new"]
        sources[name].update(callers_ended=int(callers),
                             **{f"callers_{k}": _ratio(d[f"{k}_new"], callers) for k in OUTCOMES})
    return transitions, places, pools, sources


def _interval_table(scenario: Scenario, net: Net, times: list[float], snaps: list[np.ndarray],
                    inside: list[int]):
    """The per-interval table of one run (columns interval, start, end, metric, name, value;
    the metrics of :func:`desim.replicate`'s ``intervals``). Counts of arrivals, ends and
    abandonments are those that happened in the interval; service level, abandonment per
    caller and wait count each job in the interval it became available (arrived), from the
    tallies of :mod:`desim.by_arrival`; ``inside``: jobs still inside at the end by arrival
    interval."""
    import pandas as pd

    targets = scenario.targets.service
    waiting = waiting_places(scenario)
    callers = next(iter(net.sources.values())).tally if net.sources else None
    rows = []
    for i in range(len(times) - 1):
        start, end = times[i], times[i + 1]
        places_d, pools_d, _, sources_d = _split(net, snaps[i + 1] - snaps[i])
        length = end - start
        arrivals = sum(d["arrived"] for d in sources_d.values())
        completed = sum(d["completed"] for d in sources_d.values())
        abandoned = sum(d["abandoned"] for d in sources_d.values())
        rows += [(i, start, end, "arrivals", "", arrivals),
                 (i, start, end, "completed", "", completed),
                 (i, start, end, "abandoned", "", abandoned)]
        for p, target in targets.items():
            d, tally = places_d[p], net.places[p].tally
            # (tokens taken the instant they became available are counted by the snapshots)
            left = d["at_once"] + tally.count("left", i)
            within = d["at_once"] + tally.count("within", i)
            rows.append((i, start, end, "service_level", p, _served_within(
                target, within, left, tally.count("abandoned", i), tally.count("late", i))))
        ended = arrivals - (inside[i] if i < len(inside) else 0)
        unserved = callers.count(i) if callers is not None else 0
        rows.append((i, start, end, "abandonment", "", _ratio(unserved, ended)))
        for p in waiting:
            d, tally = places_d[p], net.places[p].tally
            rows.append((i, start, end, "wait", p, _ratio(
                tally.count("wait_sum", i), d["at_once"] + tally.count("left", i))))
            rows.append((i, start, end, "queue", p, _ratio(d["area"], length)))
        for r, d in pools_d.items():
            rows.append((i, start, end, "busy", r, _ratio(d["busy_area"], d["duty_area"])))
            rows.append((i, start, end, "staff", r, _ratio(d["duty_area"], length)))
    return pd.DataFrame(rows, columns=["interval", "start", "end", "metric", "name", "value"])


def _events_at_one_instant(scenario: Scenario) -> int:
    """Events one instant may hold before the run is stopped as stuck: the engine's bound, plus
    room for every recorded arrival to share an instant and pass through every place in it."""
    recorded = sum(len(s.arrivals.file_data or ()) for s in scenario.sources.values())
    return EVENTS_AT_ONE_INSTANT + recorded * (len(scenario.places) + 2)


def run_replication(scenario: Scenario, replication: int = 0, *, horizon: float | None = None,
                    warmup: float | None = None, seed: int | None = None,
                    interval: float | None = None, max_jobs: int | None = None,
                    record_waits: bool = False, record_jobs: bool = False,
                    trace: list | None = None, samples: int = DEFAULT_SAMPLES,
                    shortcuts: bool = True,
                    percentiles=DEFAULT_PERCENTILES) -> RunResult:
    """Run replication ``replication`` of ``scenario`` over [0, horizon] and measure it over
    [warmup, horizon] (times in the scenario's time unit; None takes ``scenario.run``).

    ``interval``: also tabulate each interval of that length (from time 0). ``max_jobs``: jobs
    allowed inside at once (default :data:`DEFAULT_MAX_JOBS`); beyond it the run stops there and is
    flagged unstable. ``record_waits`` keeps per-token waits, ``record_jobs`` the job records.
    ``trace``: a list that receives ``(time, what, name, job_id)`` for every arrival, firing and
    abandonment (see :class:`desim.engine.Engine`). ``shortcuts``: let the engine use its
    shortcuts (the default); False runs the general firing logic alone, with identical results
    and trace, only slower (see :func:`desim.net.build_net`). Raises
    :class:`desim.engine.ConservationError` if the run's job count does not balance, and
    :class:`desim.engine.ClockStopped` if its clock stops advancing (more events at one instant
    than the net can need). ``percentiles``: the wait percentiles (in percent) to report per
    place (see the module docstring).
    """
    run = scenario.run
    horizon = float(run.horizon if horizon is None else horizon)
    warmup = float(run.warmup if warmup is None else warmup)
    seed = int(run.seed if seed is None else seed)
    max_jobs = DEFAULT_MAX_JOBS if max_jobs is None else int(max_jobs)
    check_settings(horizon, warmup, interval, max_jobs)
    percentiles = check_percentiles(percentiles)

    # (the waits are always kept while the run lasts: the percentiles need them; they draw no
    # random number, so no other figure changes)
    net = build_net(scenario, seed, replication, record_waits=True, shortcuts=shortcuts)
    jobs: list | None = [] if record_jobs else None
    engine = Engine(net, max_jobs=max_jobs, trace=trace, records=jobs, warmup=warmup,
                    events_at_one_instant=_events_at_one_instant(scenario))
    engine.start()

    snaps: dict[str, np.ndarray] = {}
    backlog: dict[str, dict] = {}

    def open_window(now: float) -> None:
        snaps["warmup"] = _snapshot(net, now)
        backlog["warmup"] = _backlog(net, now)

    if warmup == 0:
        open_window(0.0)
    else:
        engine.at(warmup, lambda e: open_window(e.env.now))

    step = horizon / samples
    areas = [0.0]

    def total_area(now: float) -> float:
        return sum(p.area_at(now) for p in net.places.values())

    def sample(e: Engine) -> None:
        areas.append(total_area(e.env.now))
        k = len(areas)
        if k < samples:  # the last point, at the horizon, is taken after the run
            e.at(k * step, sample)

    if samples > 1:
        engine.at(step, sample)

    times: list[float] = []
    interval_snaps: list[np.ndarray] = []
    if interval is not None:
        attach_tallies(net, dict.fromkeys((*scenario.targets.service, *waiting_places(scenario))),
                       times)
        def boundary(e: Engine) -> None:
            now = float(e.env.now)
            times.append(now)
            interval_snaps.append(_snapshot(net, now))
            nxt = len(times) * interval
            if nxt < horizon * (1 - 1e-12):
                e.at(nxt, boundary)

        boundary(engine)

    end = engine.run(horizon)
    final = _snapshot(net, end)
    engine.check_conservation()

    length = end - warmup
    if "warmup" in snaps and length > 0:
        stats = _window_stats(scenario, net, final - snaps["warmup"], length)
    else:  # stopped before the window opened: nothing to measure
        stats = _window_stats(scenario, net, np.zeros_like(final), 0.0)
    transitions, places, pools, sources = stats
    for name, src in net.sources.items():  # (only sources with a day factor have one)
        if src.rate_factor is not None:
            sources[name]["rate_factor"] = src.rate_factor
    at_end = _backlog(net, end)
    waiting = set(waiting_places(scenario))
    for name, m in places.items():
        n0, w0 = backlog["warmup"][name] if "warmup" in backlog else (math.nan, math.nan)
        n1, w1 = at_end[name]
        m.update(waiting_at_warmup=n0, waiting_at_end=n1, waited_at_warmup=w0, waited_at_end=w1)
        if name in waiting:
            p = net.places[name]
            m.update(_wait_figures(p.waits_taken, p.waits_abandoned, percentiles))

    intervals = None
    if interval is not None:
        if times[-1] < end:
            times.append(end)
            interval_snaps.append(final)
        intervals = _interval_table(scenario, net, times, interval_snaps,
                                    inside_by_interval(engine, times))

    if not engine.unstable:
        areas.append(total_area(end))
    series = np.diff(np.array(areas)) / step

    waits = None
    if record_waits:
        waits = {p.name: {"taken": np.array(p.waits_taken), "abandoned": np.array(p.waits_abandoned)}
                 for p in net.places.values()}
    arrivals = sum(s.arrived for s in net.sources.values())
    firings = sum(t.firings for t in net.transitions)
    holds = sum(p.became for p in net.places.values() if p.hold is not None)
    events = arrivals + firings + engine.abandoned + holds
    return RunResult(
        replication=replication, seed=seed, horizon=horizon, warmup=warmup, end=end,
        unstable=engine.unstable, transitions=transitions, places=places, pools=pools,
        sources=sources,
        totals={"arrivals": arrivals, "completed": engine.completed,
                "abandoned": engine.abandoned, "inside": engine.inside()},
        queue_series=series, sample_step=step, mser=mser5(series), intervals=intervals,
        waits=waits, jobs=jobs, events=events,
    )
