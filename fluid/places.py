"""Fluid figures of the waiting places: inflow, served rate, abandonment, queue, waits and the
service level, in steady state or over a window.

Three ways, each exact for the fluid model it reads:

* **stationary, one place at a time** (constant rates, rates from the throughput LP or from the
  counters without patience, no ``abandon_to``): a place whose served rate c keeps up with its
  inflow lambda has no queue; an overloaded place with patience (CDF F) settles as in Whitt
  (2006): P(Ab) = 1 - c/lambda, the wait w of served jobs solves lambda (1 - F(w)) = c, the
  queue q = lambda * integral_0^w (1 - F); one without patience grows without bound. The rates
  are those of the fluid with abandonment too: patience only removes what would have queued.
* **from the dynamics with abandonment** (:data:`fluid.flat_net.WITH_ABANDONMENT`) over a
  window: time-varying nets over the statistics window, and constant nets over the last part of
  a run long enough to be stationary (priorities, ``abandon_to`` feeding back).
* **from the counters without patience** over a window (time-varying nets with no patience):
  time-average queue, Little's law, first-in first-out service level along the counter curves.

``served_within`` is the share of the jobs becoming available that are taken within the target,
under the target's abandoner convention (:class:`fluid.scenario.ServiceTarget`): abandoners
counted against (the default), excluded, or excluded when they abandon within
``excluded_within`` (later ones counted against); see :func:`convention_share`. ``wait`` is the mean over all jobs leaving (served or abandoning),
by Little's law (queue / inflow); ``wait_served`` that of the served jobs. Times in the
scenario's time unit, rates per that unit.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from .json_values import json_number
from .scenario import Scenario
from .service_level import fifo_service_level, place_curves
from .structure import inflow, outflow, waiting_places

__all__ = ["PLACE_TOLERANCE", "FluidPlace", "stationary_place", "window_place", "place_figures",
           "convention_share", "cohort_service_level", "place_cohorts", "queue_average"]

#: Relative tolerance below which a place's fluid outflow counts as keeping up with its inflow
#: (the LP is exact to ~1e-9, the counters' long-run slopes to ~1e-6).
PLACE_TOLERANCE = 1e-5


_num = json_number


@dataclass(frozen=True)
class FluidPlace:
    """Fluid figures of one waiting place (see the module docstring). ``inflow`` and
    ``capacity`` (the served rate) in jobs per time unit; ``wait`` (all leaving jobs) and
    ``wait_served`` (time units); ``abandoned`` share of the inflow; ``queue`` jobs waiting;
    ``served_within`` share taken within ``within`` (None without a target); ``state``: "idle",
    "underloaded", "overloaded", "unstable" or "time-varying"."""

    place: str
    inflow: float
    capacity: float
    state: str
    wait: float
    wait_served: float
    abandoned: float
    queue: float
    served_within: float | None = None
    within: float | None = None
    convention: str | None = None  # what served_within measures (ServiceTarget.describe)

    @property
    def no_wait(self) -> bool:
        """True when the fluid model says jobs here do not wait."""
        return self.wait <= 1e-9 * max(1.0, self.wait_served if math.isfinite(self.wait_served)
                                       else 1.0)

    def to_json(self) -> dict:
        return {"state": self.state, "inflow": _num(self.inflow), "capacity": _num(self.capacity),
                "wait": _num(self.wait), "wait_served": _num(self.wait_served),
                "abandoned": _num(self.abandoned), "queue": _num(self.queue),
                "served_within": _num(self.served_within), "within": _num(self.within),
                "convention": self.convention}


# --- Whitt (2006), one place -----------------------------------------------------------------------


def _whitt(lam: float, c: float, patience) -> tuple[float, float, float]:
    """(P(Ab), wait of served jobs, queue) of an overloaded place (lambda > c) whose patience
    has CDF ``patience.cdf``: Whitt (2006), Operations Research 54(1)."""
    from scipy import integrate, optimize

    p_ab = 1.0 - c / lam
    target = 1.0 - c / lam  # F(w) = 1 - c / lambda
    if patience.cdf(0.0) >= target:
        return p_ab, 0.0, 0.0
    hi = max(patience.mean, 1e-12)
    while patience.cdf(hi) < target:
        hi *= 2.0
        if hi > 1e300:
            return p_ab, math.inf, math.inf
    w = optimize.brentq(lambda x: patience.cdf(x) - target, 0.0, hi, xtol=1e-14, rtol=1e-14)
    q, _ = integrate.quad(lambda x: 1.0 - patience.cdf(x), 0.0, w, epsabs=1e-13, epsrel=1e-12,
                          limit=200)
    return p_ab, w, lam * q


def convention_share(target, within_mass: float, taken_mass: float, left_mass: float,
                     late_mass: float) -> float:
    """The service level under ``target``'s convention from fluid masses of the same jobs:
    ``within_mass`` taken within the target, ``taken_mass`` taken, ``left_mass`` all of them
    (the "against" denominator), ``late_mass`` the abandoners that waited more than the
    target's ``excluded_within``. nan when the denominator is 0."""
    convention = getattr(target, "abandoned", "against")
    if convention == "excluded":
        base = taken_mass
    elif convention == "excluded_within":
        base = taken_mass + late_mass
    else:
        base = left_mass
    return within_mass / base if base > 0 else math.nan


def _late_share(target, patience_cdf, waited: float) -> float:
    """Share of a cohort that abandons after more than the target's ``excluded_within`` and
    before ``waited``: (F(waited) - F(T2))+ (0 for other conventions)."""
    if getattr(target, "abandoned", "against") != "excluded_within":
        return 0.0
    return max(0.0, patience_cdf(waited) - patience_cdf(float(target.excluded_within)))


def _described(scenario: Scenario, fp: FluidPlace) -> FluidPlace:
    """``fp`` with its target's convention in words (unchanged without a target)."""
    target = scenario.targets.service.get(fp.place)
    if target is None:
        return fp
    return dataclasses.replace(fp, convention=target.describe(scenario.time_unit))


def stationary_place(scenario: Scenario, rates, source_rates, place: str) -> FluidPlace:
    """Steady-state figures of ``place`` from constant fluid rates (one place at a time; see
    the module docstring)."""
    return _described(scenario, _stationary_place(scenario, rates, source_rates, place))


def _stationary_place(scenario: Scenario, rates, source_rates, place: str) -> FluidPlace:
    target = scenario.targets.service.get(place)
    within = None if target is None else float(target.within)
    lam = float(inflow(scenario, place, rates, source_rates))
    rho = float(outflow(scenario, place, rates))
    full = None if target is None else 1.0
    if lam <= 0:
        return FluidPlace(place, lam, rho, "idle", 0.0, 0.0, 0.0, 0.0, full, within)
    if rho >= lam * (1 - PLACE_TOLERANCE):
        return FluidPlace(place, lam, rho, "underloaded", 0.0, 0.0, 0.0, 0.0, full, within)
    patience = scenario.places[place].patience
    if patience is None:
        return FluidPlace(place, lam, rho, "unstable", math.inf, math.inf, 0.0, math.inf,
                          None if target is None else 0.0, within)
    p_ab, w, q = _whitt(lam, rho, patience)
    served = None
    if target is not None:
        # every served job waits w; the abandoners' patience is below w (Whitt 2006)
        taken = 1.0 - p_ab
        ok = taken if w <= within * (1 + 1e-12) else 0.0
        served = convention_share(target, ok, taken, 1.0, _late_share(target, patience.cdf, w))
    return FluidPlace(place, lam, rho, "overloaded", q / lam, w, p_ab, q, served, within)


# --- over a window of an integrated solution ---------------------------------------------------------


def _at(sol, curve: np.ndarray, t: float) -> float:
    return float(np.interp(t, sol.times, curve))


def queue_average(sol, place: str, start: float, end: float) -> float:
    """Time-average fluid jobs available and waiting in ``place`` over ``[start, end]``."""
    if end <= start:
        return math.nan
    t = sol.times
    inside = (t > start) & (t < end)
    ts = np.concatenate([[start], t[inside], [end]])
    ys = np.concatenate([[_at(sol, sol.waiting[place], start)], sol.waiting[place][inside],
                         [_at(sol, sol.waiting[place], end)]])
    return float(np.trapezoid(ys, ts) / (end - start))


def place_cohorts(scenario: Scenario, sol, place: str, start: float, end: float):
    """The cohorts of the fluid becoming available in an impatient ``place`` during ``(start,
    end]`` on the grid of the dynamics with abandonment: ``(mass, step, served_at, wait)`` per
    cohort (its amount, the grid step it became available in, the step the head of the queue
    passes it, first come first served, or the number of steps when never, and its wait until
    then), or None when nothing becomes available."""
    avail = place_curves(scenario, sol, place)[0] + sol.abandoned[place]
    dt = sol.dt
    n = len(sol.times)
    k = np.arange(n)
    age = sol.head_wait[place]
    head = np.where(np.isnan(age), k + 1,
                    k - np.rint(np.nan_to_num(age) / dt) + 1).astype(np.int64)
    head = np.maximum.accumulate(head)
    new = np.diff(avail, prepend=0.0)
    sel = (sol.times > start) & (sol.times <= end + 1e-12 * dt) & (new > 0)
    if new[sel].sum() <= 0:
        return None
    j = k[sel]
    served_at = np.searchsorted(head, j, side="right")  # first step whose head is past j
    served_at = np.minimum(served_at, n)
    # served at its own step: no wait; later: the whole steps between (the grid serves a
    # step's queued fluid at its end, which is its midpoint in continuous time, as the queue's
    # mid-step content in fluid.counters says, and the cohort became available mid-step)
    waits = np.where(served_at > j, (served_at - j) * dt, 0.0)
    return new[sel], j, served_at, waits


def cohort_service_level(scenario: Scenario, sol, place: str, within: float, start: float,
                         end: float, target=None) -> float:
    """Share of the fluid becoming available in an impatient ``place`` during ``(start, end]``
    that is served within ``within``, from the age-structured queue of the dynamics with
    abandonment: the cohort of step j is served when the head of the queue has moved past it
    (first come, first served), after waiting w_j, and what of it is still there then is its
    survival F^c(w_j) (patience). Abandoners are counted by ``target``'s convention (None:
    counted against, over every cohort; "excluded": over what is taken; "excluded_within" T2:
    over what is taken and what abandons after waiting more than T2, F(w_j) - F(T2), up to
    the end of the grid for a cohort never served). nan when nothing becomes available."""
    cohorts = place_cohorts(scenario, sol, place, start, end)
    if cohorts is None:
        return math.nan
    mass, j, served_at, waits = cohorts
    dt, n = sol.dt, len(sol.times)
    patience = scenario.places[place].patience
    survive = np.array([1.0 - patience.cdf(w) if w > 0 else 1.0 for w in waits])
    ok = (waits <= within * (1 + 1e-9) + 1e-12) & (served_at < n)
    within_mass = float((mass * survive * ok).sum())
    if getattr(target, "abandoned", "against") == "against":
        return within_mass / float(mass.sum())
    taken = float((mass * survive * (served_at < n)).sum())
    # (a cohort never served has waited until the end of the grid)
    waited = np.where(served_at < n, waits, (n - 1 - j + 0.5) * dt)
    late = float(sum(m * _late_share(target, patience.cdf, w) for m, w in zip(mass, waited)))
    return float(convention_share(target, within_mass, taken, float(mass.sum()), late))


def window_place(scenario: Scenario, sol, place: str, window, *, state: str) -> FluidPlace:
    """Figures of ``place`` over ``window`` = (start, end) of the integrated solution ``sol``:
    rates as means over the window, the time-average queue, waits by Little's law (all jobs)
    and from the head of the queue (served jobs, with abandonment), the service level by
    cohorts (impatient places) or first-in first-out along the counter curves."""
    target = scenario.targets.service.get(place)
    within = None if target is None else float(target.within)
    start, end = float(window[0]), float(window[1])
    length = end - start
    avail, taken = place_curves(scenario, sol, place)
    lost = sol.abandoned.get(place)
    if lost is not None:
        avail = avail + lost
    lam = (_at(sol, avail, end) - _at(sol, avail, start)) / length
    rho = (_at(sol, taken, end) - _at(sol, taken, start)) / length
    ab = 0.0 if lost is None else (_at(sol, lost, end) - _at(sol, lost, start)) / length
    queue = queue_average(sol, place, start, end)
    wait = queue / lam if lam > 0 else 0.0
    wait_served = wait
    if place in sol.head_wait:
        sel = (sol.times >= start) & (sol.times <= end)
        heads = np.nan_to_num(sol.head_wait[place][sel])
        served = np.diff(taken[sel], prepend=taken[sel][0])
        wait_served = (float((heads * served).sum() / served.sum()) if served.sum() > 0
                       else 0.0)
    share = ab / lam if lam > 0 else 0.0
    served_within = None
    if within is not None:
        if place in sol.head_wait:
            served_within = cohort_service_level(scenario, sol, place, within, start, end,
                                                 target)
        else:  # (no abandonment in this fluid: every convention gives the same share)
            served_within = fifo_service_level(scenario, sol, place, within, start, end)
    if state != "time-varying":
        state = ("idle" if lam <= 0 else "overloaded" if share > PLACE_TOLERANCE
                 else "underloaded")
    return _described(scenario, FluidPlace(place, lam, rho, state, wait, wait_served, share,
                                           queue, served_within, within))


def place_figures(scenario: Scenario, rates, source_rates, sol=None,
                  window=None) -> dict[str, FluidPlace]:
    """The :class:`FluidPlace` of every waiting place (:func:`fluid.structure.waiting_places`):
    over ``window`` of ``sol`` when given (time-varying nets: state "time-varying"), from the
    stationary regime at the end of ``sol`` when it carries abandonment (constant nets run with
    the dynamics with abandonment), else one place at a time from the constant ``rates``."""
    places = waiting_places(scenario)
    if sol is not None and window is not None:
        return {p: window_place(scenario, sol, p, window, state="time-varying") for p in places}
    if sol is not None and sol.abandoned:
        last = (sol.horizon * 0.75, sol.horizon)
        return {p: window_place(scenario, sol, p, last, state="steady") for p in places}
    return {p: stationary_place(scenario, rates, source_rates, p) for p in places}
