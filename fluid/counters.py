"""The fluid counter equations of design.md §4.1, integrated on a time grid.

For a transition ``q`` its counter ``z_q(t)`` is the (fluid) amount fired up to time ``t``::

    z_q(t) = min over input nodes p of  π_pq · (M_p(t) + Σ_{q'} b_{q'p} z_{q'}(t − τ_p)) / a_pq

and ``z_s(t) = ∫₀ᵗ λ_s`` for a source (a trace counts its recorded arrivals). The greatest solution
is taken (every transition fires as early as it can). On the grid ``t_k = k·dt``:

- holding times are rounded to whole steps (at least one step when positive); the worst relative
  rounding is reported as ``rounding``;
- a pool with a schedule uses ``M_p(t_k)``, and counters never decrease
  (``z_q(t_k) = max(z_q(t_{k−1}), bound)``): a staff cut takes effect as agents finish;
- at a node with ``priority`` q1 ≻ q2 ≻ …, the transitions fire in priority order within a step:
  ``q_i`` subtracts what higher ones took at ``t_k`` and what lower ones took by ``t_{k−1}``;
- same-time dependencies (through pools and places without hold, and priorities) are resolved
  in a topological order of the zero-delay graph; when that graph has a cycle, Gauss–Seidel
  sweeps start from an upper bound and repeat until nothing changes (capped; the number of steps
  that hit the cap is reported).

With ``model=WITH_ABANDONMENT`` (see :mod:`fluid.flat_net`) the same equations carry the fluid
model with abandonment: a hold that is not deterministic releases its jobs as its distribution
says, and a waiting place with patience loses content by age (Liu and Whitt 2011, 2012); the
default ``COUNTERS`` is §4.1 as written (holds as delays of their means, patience ignored). The
step loop runs in :mod:`fluid.kernel` (compiled with numba when installed).

All times are in the scenario's time unit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from fractions import Fraction
from functools import reduce
from typing import Mapping

import numpy as np

from .flat_net import COUNTERS, WITH_ABANDONMENT, FluidModel, _shift, build
from .scenario import Scenario
from .structure import inflow, longest_hold_path, outflow

__all__ = ["CounterSolution", "integrate_counters", "one_more_agent_levels", "choose_step",
           "default_horizon", "COUNTERS", "WITH_ABANDONMENT", "FluidModel"]

MAX_POINTS = 200_000
MIN_POINTS = 2_000
ROUNDING_TARGET = 1e-4  # accepted worst relative rounding of a hold when no step divides them all
_NICE = sorted({2**a * 5**b for a in range(12) for b in range(6)})


@dataclass(frozen=True)
class CounterSolution:
    """Counters on the grid ``times`` (length n, step ``dt``, in the scenario's time unit).

    ``counters``: transition -> z(t) (cumulative firings); ``source_counters``: source -> z(t);
    ``markings``: place or pool -> tokens in it (for a job place: jobs held or waiting; for a pool:
    idle agents, negative while a staff cut waits for busy agents to finish); ``waiting``: job
    place -> jobs available but not yet taken; ``rates`` / ``source_rates``: long-run firing rates
    (per time unit) read from the last part of the horizon, exact over a whole number of periods
    when the increments have become periodic (``period``, else None and a smoothed slope);
    ``rounding``: worst relative rounding of a holding time to the grid; ``unconverged_steps``:
    grid steps whose same-time sweeps hit the cap (0 when the zero-delay graph is acyclic);
    ``model``: which fluid equations (:data:`fluid.flat_net.COUNTERS` or ``WITH_ABANDONMENT``),
    in words. With abandonment: ``abandoned``: impatient place -> cumulative amount that
    abandoned there; ``abandonment_rates``: their long-run rates; ``head_wait``: impatient place
    -> age of the oldest job still waiting (time units; nan when nobody waits), the fluid wait
    of a job taken at that time (first come, first served). ``waiting`` is then net of
    abandonment.
    """

    times: np.ndarray
    dt: float
    counters: dict[str, np.ndarray]
    source_counters: dict[str, np.ndarray]
    markings: dict[str, np.ndarray]
    waiting: dict[str, np.ndarray]
    rates: dict[str, float]
    source_rates: dict[str, float]
    rounding: float
    period: float | None
    unconverged_steps: int
    model: str = COUNTERS.name
    abandoned: dict[str, np.ndarray] = field(default_factory=dict)
    abandonment_rates: dict[str, float] = field(default_factory=dict)
    head_wait: dict[str, np.ndarray] = field(default_factory=dict)
    # the flat equations and the staff on the grid, for one-more-agent variants
    flat: object = field(default=None, repr=False, compare=False)
    levels: dict = field(default_factory=dict, repr=False, compare=False)

    @property
    def horizon(self) -> float:
        return float(self.times[-1])

    def rates_between(self, start: float, end: float) -> dict[str, float]:
        """Mean firing rate of every transition and source over ``[start, end]`` (grid points
        nearest to both ends)."""
        i = int(round(start / self.dt))
        j = int(round(min(end, self.horizon) / self.dt))
        if j <= i:
            raise ValueError(f"empty window [{start}, {end}] on a grid of step {self.dt}")
        span = (j - i) * self.dt
        allz = {**self.counters, **self.source_counters}
        return {k: float(z[j] - z[i]) / span for k, z in allz.items()}


# --- grid ----------------------------------------------------------------------------------------


def _holds(scenario: Scenario) -> list[float]:
    return [p.hold_mean for p in scenario.places.values() if p.hold_mean > 0]


def _grid_times(scenario: Scenario) -> list[float]:
    """Times the step should divide: holds, schedule steps and profile steps."""
    times = _holds(scenario)
    times += [p.schedule.step for p in scenario.pools.values() if p.schedule is not None]
    times += [step for s in scenario.sources.values() for step in s.arrivals.steps]
    return times


def _exact_gcd(times: list[float]) -> Fraction | None:
    fracs = []
    for t in times:
        f = Fraction(t).limit_denominator(10_000)
        if abs(float(f) - t) > 1e-9 * t:
            return None
        fracs.append(f)
    if not fracs:
        return None
    return reduce(
        lambda a, b: Fraction(
            math.gcd(a.numerator * b.denominator, b.numerator * a.denominator),
            a.denominator * b.denominator,
        ),
        fracs,
    )


def _worst_rounding(holds: list[float], dt: float) -> float:
    worst = 0.0
    for h in holds:
        steps = max(1, round(h / dt))
        worst = max(worst, abs(steps * dt - h) / h)
    return worst


def choose_step(
    scenario: Scenario,
    horizon: float,
    *,
    max_points: int = MAX_POINTS,
    min_points: int = MIN_POINTS,
) -> float:
    """Grid step for ``horizon``: the greatest common divisor of the holding times (and schedule
    and profile steps), divided by the smallest 2^a·5^b that gives at least ``min_points`` points
    (or the largest that keeps at most ``max_points``); otherwise, among candidate steps (a hold
    over a whole number, round decimals) giving between ``min_points`` and ``max_points`` points,
    the largest whose worst relative rounding of a hold is at most ``ROUNDING_TARGET``, else the
    one of smallest rounding."""
    times = _grid_times(scenario)
    max_points -= 1  # intervals, not points
    g = _exact_gcd(times)
    if g is not None and horizon / float(g) <= max_points:
        # divide by a "decimal-friendly" whole number (2^a 5^b) so that dt stays readable
        need = min_points * float(g) / horizon
        fits = [m for m in _NICE if horizon * m / float(g) <= max_points]
        return float(g / min([m for m in fits if m >= need] or [max(fits)]))
    if not times:
        return horizon / min_points
    floor = horizon / max_points
    cands = {t / m for t in times for m in range(1, 400)}
    cands |= {f * 10.0**e for f in (1.0, 0.5, 0.25, 0.2) for e in range(-4, 4)}
    ceiling = max(floor, min(min(times), horizon / min_points))
    cands = [c for c in cands if floor <= c <= ceiling]
    if not cands:
        return floor
    holds = _holds(scenario)
    good = [c for c in cands if _worst_rounding(holds, c) <= ROUNDING_TARGET]
    if good:
        return max(good)
    return min(cands, key=lambda c: (round(_worst_rounding(holds, c), 12), -c))


def default_horizon(scenario: Scenario) -> float:
    """The scenario's run horizon; for nets without time variation at least 50 times the total
    hold along the longest path of a job (:func:`fluid.structure.longest_hold_path`), so that the
    long-run regime is reached well before the end (:func:`integrate_counters` runs longer when
    the increments have not become periodic by then)."""
    h = scenario.run.horizon
    if not scenario.has_time_variation:
        h = max(h, 50.0 * longest_hold_path(scenario))
    return float(h)


# --- inputs on the grid --------------------------------------------------------------------------


def _source_counter(scenario: Scenario, name: str, t: np.ndarray) -> np.ndarray:
    return scenario.sources[name].arrivals.cumulative_grid(t)


def _staff_on_grid(scenario, pool, t, staff, extra_staff) -> np.ndarray:
    extra = float((extra_staff or {}).get(pool, 0.0))
    if staff is not None and pool in staff:
        return np.full(t.shape, float(staff[pool]) + extra)
    p = scenario.pools[pool]
    if p.schedule is None:
        return np.full(t.shape, float(p.staff) + extra)
    sched = p.schedule
    idx = np.minimum(np.floor(t / sched.step + 1e-9).astype(int), len(sched.staff) - 1)
    return np.asarray(sched.staff, dtype=float)[idx] + extra


def integrate_counters(
    scenario: Scenario,
    *,
    dt: float | None = None,
    horizon: float | None = None,
    staff: Mapping[str, float] | None = None,
    extra_staff: Mapping[str, float] | None = None,
    max_points: int = MAX_POINTS,
    model: FluidModel = COUNTERS,
) -> CounterSolution:
    """Integrate the counter equations of ``scenario`` on ``[0, horizon]``.

    ``horizon`` defaults to :func:`default_horizon`; for a net with constant inputs whose
    increments have not become periodic by then (slow transients, e.g. agents piling up behind a
    hand-over) it is extended up to 16-fold within ``max_points``. ``dt`` defaults to
    :func:`choose_step`. ``staff`` replaces a pool's staff (or schedule) by a constant;
    ``extra_staff`` adds agents to a pool in every interval (used to test whether a pool is a
    bottleneck). ``model``: :data:`fluid.flat_net.COUNTERS` (design.md §4.1 as written) or
    :data:`fluid.flat_net.WITH_ABANDONMENT`.
    """
    if horizon is not None:
        if dt is None:
            dt = choose_step(scenario, horizon, max_points=max_points)
        return _integrate(scenario, dt, horizon, staff, extra_staff, max_points, model)
    base = scenario.run.horizon
    if dt is None:
        dt = choose_step(scenario, base, max_points=max_points)
    limit = max(base, dt * (max_points - 1))
    horizon = max(base, min(default_horizon(scenario), limit))
    sol = _integrate(scenario, dt, horizon, staff, extra_staff, max_points, model)
    if scenario.has_time_variation:
        return sol
    for factor in (4, 16):
        if sol.period is not None or horizon >= limit:
            break
        horizon = min(horizon * factor, limit)
        sol = _integrate(scenario, dt, horizon, staff, extra_staff, max_points, model)
    return sol


def _integrate(scenario, dt, horizon, staff, extra_staff, max_points,
               model: FluidModel = COUNTERS) -> CounterSolution:
    if not (dt > 0 and horizon > 0 and math.isfinite(dt) and math.isfinite(horizon)):
        raise ValueError("dt and horizon must be positive")
    n = int(math.floor(horizon / dt + 1e-9)) + 1
    if n > max_points:
        raise ValueError(f"{n} grid points exceed max_points={max_points}; give a larger dt")
    t = dt * np.arange(n)
    src_z = {s: _source_counter(scenario, s, t) for s in scenario.sources}
    level = {p: _staff_on_grid(scenario, p, t, staff, extra_staff) for p in scenario.pools}
    flat = build(scenario, dt, t, sources=src_z, levels=level, model=model)
    unconverged = flat.run()
    counters = {q: flat.row(r).copy() for q, r in flat.rows.items()}
    abandoned = {p: flat.row(r).copy() for p, r in flat.abandon_rows.items()}
    markings, waiting = _markings(scenario, flat, counters, src_z, level, abandoned, n)
    hol = {}
    for i, p in enumerate(flat.waiting_places):
        # the oldest cohort still waiting entered a steps ago: the one just served is a step
        # older, and at the step's midpoint (a + 1) dt has passed since it became available
        age = flat.arrays["hol_age"][i]
        hol[p] = np.where(age >= 0, (age + 1.0) * dt, np.nan)
    rates, srates, period = _long_run({**counters, **{f"\0{p}": a for p, a in abandoned.items()}},
                                      src_z, dt)
    ab_rates = {p: rates.pop(f"\0{p}") for p in abandoned}
    return CounterSolution(
        times=t,
        dt=float(dt),
        counters=counters,
        source_counters=src_z,
        markings=markings,
        waiting=waiting,
        rates=rates,
        source_rates=srates,
        rounding=_worst_rounding(_holds(scenario), dt),
        period=period,
        unconverged_steps=unconverged,
        model=model.name,
        abandoned=abandoned,
        abandonment_rates=ab_rates,
        head_wait=hol,
        flat=flat,
        levels=level,
    )


def one_more_agent_levels(sol: CounterSolution, extras: list[Mapping[str, float]],
                          transitions, window: tuple[float, float] | None,
                          workers: int | None = None) -> list[float]:
    """For each ``extra`` (pool -> agents added in every interval), the level of
    ``transitions`` that :func:`fluid.structure.counter_output_level` reads on ``sol``, but
    with those agents: without a window the long-run rate summed (per time unit), with a window
    the mean of the summed counters over it. Every variant runs on ``sol``'s grid from the flat
    equations already built (in parallel threads when the kernel is compiled). A variant of a
    constant net whose increments have not become periodic by the horizon while ``sol``'s have
    reports nan: the caller integrates it on a longer horizon."""
    from concurrent.futures import ThreadPoolExecutor

    from .kernel import COMPILED

    flat = sol.flat
    rows = [flat.rows[q] for q in transitions]

    def level(extra) -> float:
        v = flat.with_levels({p: sol.levels[p] + float(a) for p, a in extra.items()})
        v.run()
        z = {q: v.row(r) for q, r in zip(transitions, rows)}
        if window is None:
            rates, _, period = _long_run(z, {}, sol.dt)
            settled = period is not None or sol.period is None  # like with like
            return sum(rates.values()) if settled else math.nan
        i, j = (int(round(t / sol.dt)) for t in window)
        return float(sum(z[q][i: j + 1].mean() for q in transitions))

    n = workers or (2 if COMPILED else 1)
    if n <= 1 or len(extras) <= 1:
        return [level(e) for e in extras]
    with ThreadPoolExecutor(max_workers=n) as pool:
        return list(pool.map(level, extras))


def _markings(scenario, flat, counters, src_z, level, abandoned, n):
    """Tokens in every place and pool, and jobs available but not yet taken in every job place
    (for an impatient place: net of what abandoned)."""
    markings: dict[str, np.ndarray] = {}
    waiting: dict[str, np.ndarray] = {}
    lost_into: dict[str, np.ndarray] = {}
    for p, a in abandoned.items():
        to = scenario.places[p].abandon_to
        if to is not None:
            lost_into[to] = lost_into.get(to, 0.0) + a
    for p in (*scenario.pools, *scenario.places):
        into = np.zeros(n) + inflow(scenario, p, counters, src_z)
        out = np.zeros(n) + outflow(scenario, p, counters)
        if p in level:
            markings[p] = level[p] + into - out
            continue
        into = into + lost_into.get(p, 0.0)
        taken = out
        if p in abandoned:
            out = out + abandoned[p]
        markings[p] = into - out
        if p in flat.avail_rows:
            # the content at mid-step: the grid serves a step's fluid at its end, so the content
            # just after is low by half of what it served from the queue that was there when the
            # step began (and just before high by half); the mean over the step, which a time
            # average needs, lies between (exact to O(dt^2) when smooth). Fluid that becomes
            # available and is taken within one step never queued (an underloaded place holds
            # no fluid queue: its content stays 0, not half a step of inflow)
            after = flat.row(flat.avail_rows[p]) - out
            served = np.diff(taken, prepend=taken[:1])
            queued = np.maximum(np.concatenate([[0.0], after[:-1]]), 0.0)
            waiting[p] = after + 0.5 * np.minimum(served, queued)
        elif p in flat.distributed:
            waiting[p] = flat.row(flat.hold_rows[p]) - out
        else:
            waiting[p] = _shift(into, flat.delay[p]) - out
    return markings, waiting


def _long_run(counters, src_z, dt):
    """Long-run slopes from the last half of the horizon.

    The fluid counters of a net with constant inputs become periodic-affine (increments repeat
    with some period, e.g. a saturated pool with a deterministic hold releases its agents in
    bursts), so a slope over an arbitrary window is off by up to an amplitude over the window.
    Here the smallest period of the increments over the last quarter is searched; the slope over
    a whole number of periods is then exact. Without a period (still converging), a difference of
    two window means is used, whose error falls with the square of the window length.
    """
    names = [*counters, *src_z]
    z = np.vstack([*counters.values(), *src_z.values()]) if names else np.zeros((0, 1))
    n = z.shape[1]
    if n < 16:
        span = (n - 1) * dt
        slopes = (z[:, -1] - z[:, 0]) / span if span > 0 else np.zeros(len(names))
        return _split(names, slopes, counters), _split_src(names, slopes, counters), None
    window, p_max = n // 4, n // 4
    d = np.diff(z[:, n - 1 - (window + p_max):], axis=1)
    tol = 1e-12 * max(1.0, float(np.abs(z[:, -1]).max()))
    weights = 1.0 + 0.5 * np.sin(np.arange(len(names)) + 1.0)
    signal = weights @ d
    tail = signal[-window:]
    period = None
    for per in range(1, p_max + 1):
        if np.max(np.abs(tail - signal[-window - per: len(signal) - per])) > tol * weights.sum():
            continue
        if np.max(np.abs(d[:, -window:] - d[:, -window - per: d.shape[1] - per])) <= tol:
            period = per
            break
    if period is not None:
        span = (window // period) * period  # the part where the period was verified
        slopes = d[:, -span:].sum(axis=1) / (span * dt)
    else:
        w = n // 4
        slopes = (z[:, -w:].mean(axis=1) - z[:, -2 * w: -w].mean(axis=1)) / (w * dt)
    return (
        _split(names, slopes, counters),
        _split_src(names, slopes, counters),
        None if period is None else period * dt,
    )


def _split(names, slopes, counters):
    return {k: float(v) for k, v in zip(names, slopes) if k in counters}


def _split_src(names, slopes, counters):
    return {k: float(v) for k, v in zip(names, slopes) if k not in counters}
