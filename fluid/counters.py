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

All times are in the scenario's time unit. The fluid model ignores patience (abandonment is
applied later by Whitt's fluid model in ``compare``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction
from functools import reduce
from typing import Mapping

import numpy as np

from .scenario import Scenario
from .structure import inflow, outflow, route_share

__all__ = ["CounterSolution", "integrate_counters", "choose_step", "default_horizon"]

MAX_POINTS = 200_000
MIN_POINTS = 2_000
MAX_SWEEPS = 50
ROUNDING_TARGET = 1e-4  # accepted worst relative rounding of a hold when no step divides them all
_NICE = sorted({2**a * 5**b for a in range(12) for b in range(6)})
_INF = math.inf


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
    grid steps whose same-time sweeps hit the cap (0 when the zero-delay graph is acyclic).
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
    """The scenario's run horizon; for nets without time variation at least 50 times the sum of
    all holding times, so that the long-run regime is reached well before the end."""
    h = scenario.run.horizon
    if not scenario.has_time_variation:
        h = max(h, 50.0 * sum(_holds(scenario)))
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


def _shift(a: np.ndarray, d: int) -> np.ndarray:
    """``a`` delayed by ``d`` steps (zero before the start)."""
    if d == 0:
        return a
    out = np.zeros_like(a)
    if d < len(a):
        out[d:] = a[:-d]
    return out


# --- order of evaluation within a step -----------------------------------------------------------


def _order(names: list[str], edges: dict[str, set[str]]) -> tuple[list[str], bool]:
    """Kahn's topological order of ``names`` (edge j -> q: q reads j at the same step); on a
    cycle, continue with the remaining node of fewest unresolved inputs and report ``True``."""
    indeg = {q: 0 for q in names}
    for j, succ in edges.items():
        for q in succ:
            if q != j:
                indeg[q] += 1
    cyclic = any(j in succ for j, succ in edges.items())
    pos = {q: i for i, q in enumerate(names)}
    done: list[str] = []
    left = set(names)
    while left:
        ready = [q for q in left if indeg[q] == 0]
        if not ready:
            cyclic = True
            ready = [min(left, key=lambda q: (indeg[q], pos[q]))]
        q = min(ready, key=pos.__getitem__)
        left.remove(q)
        done.append(q)
        for s in edges.get(q, ()):
            if s in left and s != q:
                indeg[s] -= 1
    return done, cyclic


# --- the integration -----------------------------------------------------------------------------


def integrate_counters(
    scenario: Scenario,
    *,
    dt: float | None = None,
    horizon: float | None = None,
    staff: Mapping[str, float] | None = None,
    extra_staff: Mapping[str, float] | None = None,
    max_points: int = MAX_POINTS,
) -> CounterSolution:
    """Integrate the counter equations of ``scenario`` on ``[0, horizon]``.

    ``horizon`` defaults to :func:`default_horizon`; for a net with constant inputs whose
    increments have not become periodic by then (slow transients, e.g. agents piling up behind a
    hand-over) it is extended up to 16-fold within ``max_points``. ``dt`` defaults to
    :func:`choose_step`. ``staff`` replaces a pool's staff (or schedule) by a constant;
    ``extra_staff`` adds agents to a pool in every interval (used to test whether a pool is a
    bottleneck).
    """
    if horizon is not None:
        if dt is None:
            dt = choose_step(scenario, horizon, max_points=max_points)
        return _integrate(scenario, dt, horizon, staff, extra_staff, max_points)
    base = scenario.run.horizon
    if dt is None:
        dt = choose_step(scenario, base, max_points=max_points)
    limit = max(base, dt * (max_points - 1))
    horizon = max(base, min(default_horizon(scenario), limit))
    sol = _integrate(scenario, dt, horizon, staff, extra_staff, max_points)
    if scenario.has_time_variation:
        return sol
    for factor in (4, 16):
        if sol.period is not None or horizon >= limit:
            break
        horizon = min(horizon * factor, limit)
        sol = _integrate(scenario, dt, horizon, staff, extra_staff, max_points)
    return sol


def _integrate(scenario, dt, horizon, staff, extra_staff, max_points) -> CounterSolution:
    if dt <= 0 or horizon <= 0:
        raise ValueError("dt and horizon must be positive")
    n = int(math.floor(horizon / dt + 1e-9)) + 1
    if n > max_points:
        raise ValueError(f"{n} grid points exceed max_points={max_points}; give a larger dt")
    t = dt * np.arange(n)

    trans = list(scenario.transitions)
    delay = {p: (max(1, round(pl.hold_mean / dt)) if pl.hold_mean > 0 else 0)
             for p, pl in scenario.places.items()}
    delay.update({p: 0 for p in scenario.pools})
    rounding = _worst_rounding(_holds(scenario), dt)
    pad = max(delay.values(), default=0) + 1

    src_z = {s: _source_counter(scenario, s, t) for s in scenario.sources}
    level = {p: _staff_on_grid(scenario, p, t, staff, extra_staff) for p in scenario.pools}
    # M_p(t_k) plus what sources put into p by t_k − τ_p: everything known before the loop
    base = {}
    for p in (*scenario.places, *scenario.pools):
        b = level[p].copy() if p in level else np.zeros(n)
        for s in scenario.sources_into(p):
            b += _shift(src_z[s], delay[p])
        base[p] = b.tolist()

    Z = {q: [0.0] * (n + pad) for q in trans}
    edges: dict[str, set[str]] = {q: set() for q in trans}
    specs: dict[str, list] = {}
    job_specs: dict[str, tuple] = {}
    for q in trans:
        specs[q] = []
        for p, a in scenario.transitions[q].inputs.items():
            d = delay[p]
            terms = [(Z[c], float(scenario.transitions[c].outputs[p]), pad - d)
                     for c in scenario.inputs_of(p)]
            if d == 0:
                for c in scenario.inputs_of(p):
                    edges[c].add(q)
            plain = tuple(terms)
            order = scenario.priority_order(p)
            if order:
                i = order.index(q)
                for j, other in enumerate(order):
                    if j == i:
                        continue
                    w = -float(scenario.transitions[other].inputs[p])
                    terms.append((Z[other], w, pad if j < i else pad - 1))
                    if j < i:
                        edges[other].add(q)
            spec = (base[p], route_share(scenario, p, q) / float(a), tuple(terms))
            specs[q].append(spec)
            if scenario.is_job_place(p):
                job_specs[q] = (base[p], spec[1], plain)
    order, cyclic = _order(trans, edges)
    plan = [(Z[q], specs[q]) for q in order]
    unconverged = 0

    if not cyclic:
        for k in range(n):
            kk = k + pad
            for zq, qspecs in plan:
                best = _INF
                for bl, scale, terms in qspecs:
                    s = bl[k]
                    for zl, c, off in terms:
                        s += c * zl[k + off]
                    v = s * scale
                    if v < best:
                        best = v
                prev = zq[kk - 1]
                zq[kk] = best if best > prev else prev
    else:
        # feeders of a job place without hold come first (such places form no circuit)
        job_edges = {c: set() for c in trans}
        for q in trans:
            p = scenario.job_input(q)
            if delay[p] == 0:
                for c in scenario.inputs_of(p):
                    job_edges[c].add(q)
        job_order, job_cyclic = _order(trans, job_edges)
        if job_cyclic:
            raise ValueError("zero-time circuit of job places: the counters have no solution")
        job_plan = [(Z[q], job_specs[q]) for q in job_order]
        unconverged = _integrate_cyclic(n, pad, plan, job_plan)

    counters = {q: np.asarray(Z[q][pad:]) for q in trans}
    markings, waiting = _markings(scenario, counters, src_z, level, delay, n)
    rates, srates, period = _long_run(counters, src_z, dt)
    return CounterSolution(
        times=t,
        dt=float(dt),
        counters=counters,
        source_counters=src_z,
        markings=markings,
        waiting=waiting,
        rates=rates,
        source_rates=srates,
        rounding=rounding,
        period=period,
        unconverged_steps=unconverged,
    )


def _integrate_cyclic(n: int, pad: int, plan: list, job_plan: list) -> int:
    """Step loop when same-time dependencies form a cycle: start each step from an upper bound
    (each transition limited by its job place alone, fed by upper bounds) and sweep until no
    value changes. Returns the number of steps that hit the sweep cap."""
    unconverged = 0
    for k in range(n):
        kk = k + pad
        for zq, (bl, scale, terms) in job_plan:
            s = bl[k]
            for zl, c, off in terms:
                s += c * zl[k + off]
            v = s * scale
            prev = zq[kk - 1]
            zq[kk] = v if v > prev else prev
        for _ in range(MAX_SWEEPS):
            changed = False
            for zq, qspecs in plan:
                best = _INF
                for bl, scale, terms in qspecs:
                    s = bl[k]
                    for zl, c, off in terms:
                        s += c * zl[k + off]
                    v = s * scale
                    if v < best:
                        best = v
                prev = zq[kk - 1]
                new = best if best > prev else prev
                old = zq[kk]
                if abs(new - old) > 1e-12 * (1.0 + abs(old)):
                    changed = True
                zq[kk] = new
            if not changed:
                break
        else:
            unconverged += 1
    return unconverged


def _markings(scenario, counters, src_z, level, delay, n):
    markings: dict[str, np.ndarray] = {}
    waiting: dict[str, np.ndarray] = {}
    for p in (*scenario.pools, *scenario.places):
        into = np.zeros(n) + inflow(scenario, p, counters, src_z)
        out = np.zeros(n) + outflow(scenario, p, counters)
        if p in level:
            markings[p] = level[p] + into - out
        else:
            markings[p] = into - out
            waiting[p] = _shift(into, delay[p]) - out
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
