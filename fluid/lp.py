"""The throughput LP of design.md §4.1 for priority-free nets with constant rates.

The long-run firing rates ``ρ`` (firings per time unit of the scenario) of the fluid counter
equations are the optimal gain of a semi-Markov decision process written on the net, found with
the multichain average-reward LP of Denardo and Fox (1968) and Puterman (1994, ch. 9). On the net
it reads: maximise ``Σ w_q ρ_q`` subject to, for every transition ``q`` and input place or pool
``p`` (arc weight ``a``, routing proportion ``π``, holding time ``τ_p``, marking ``M_p``; ``q'``
runs over the transitions and sources putting ``b`` tokens into ``p``)::

    a ρ_q ≤ π Σ b ρ_{q'}                           (flow)
    a u_q ≤ π (M_p + Σ b (u_{q'} − τ_p ρ_{q'}))     (marking)

with ``ρ_s ≤ λ_s``, ``u_s ≤ 0`` for sources, ``ρ ≥ 0`` and ``u`` free. Asymptotically
``z_q(t) ≈ ρ_q t + u_q``. Every feasible ``ρ`` is at most the true one, so the optimum is the true
``ρ`` for any positive weights ``w``. The LP is solved with HiGHS (scipy.optimize.linprog) and the
solution's residuals are re-checked here before it is returned.

The LP needs every job to be able to end: around a circuit of places that jobs cannot leave
(every output leads back into it) fed jobs pile up and circulate, the counters are no longer
asymptotically affine, and the pinned source offsets make the LP answer 0 there. Such nets are
refused (:func:`fluid.structure.places_without_exit`); their counters can still be integrated.

The fluid model ignores patience (abandonment is added later by Whitt's fluid model in
``compare``).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping

import numpy as np

from .errors import SolverError
from .scenario import Scenario
from .structure import places_without_exit, route_share

__all__ = ["LPSolution", "throughput_lp", "RESIDUAL_TOLERANCE"]


def linprog(*args, **kwargs):
    """:func:`scipy.optimize.linprog`, imported at the first solve: importing scipy.optimize
    takes longer than loading a scenario, and most commands never solve an LP."""
    from scipy.optimize import linprog as scipy_linprog

    return scipy_linprog(*args, **kwargs)

# Relative tolerance of the residual re-check; HiGHS's own primal feasibility tolerance is 1e-7.
RESIDUAL_TOLERANCE = 1e-6


@dataclass(frozen=True)
class LPSolution:
    """Optimal solution of the throughput LP.

    ``rates``: transition -> firings per time unit; ``source_rates``: source -> arrivals per time
    unit; ``objective``: ``Σ w ρ``; ``marking_duals``: pool -> d objective / d staff (per agent)
    from the HiGHS marginals of the marking constraints; ``offsets``: the ``u`` part (``z(t) ≈ ρ t
    + u``); ``status``: the solver's message; ``max_residual``: the worst scaled constraint
    violation found by the re-check.
    """

    rates: dict[str, float]
    source_rates: dict[str, float]
    objective: float
    marking_duals: dict[str, float]
    offsets: dict[str, float]
    status: str
    max_residual: float


@dataclass
class _Rows:
    a: list[dict[int, float]]
    b: list[float]
    names: list[str]
    marking_of: list[tuple[str, float] | None]  # (pool, π) for pool marking rows

    def add(self, coeffs: dict[int, float], rhs: float, name: str, pool=None) -> None:
        self.a.append(coeffs)
        self.b.append(rhs)
        self.names.append(name)
        self.marking_of.append(pool)


def _arrival_rate(scenario: Scenario, source: str, arrival_rates: Mapping[str, float] | None):
    if arrival_rates is not None and source in arrival_rates:
        return float(arrival_rates[source])
    arrivals = scenario.sources[source].arrivals
    if not arrivals.is_constant:
        raise ValueError(
            f"source {source!r} has a {arrivals.kind}: the throughput LP needs constant rates "
            "(give arrival_rates or use the counter equations)"
        )
    return float(arrivals.rate_at(0.0))


def _staff(scenario: Scenario, pool: str, staff: Mapping[str, float] | None) -> float:
    if staff is not None and pool in staff:
        return float(staff[pool])
    p = scenario.pools[pool]
    if p.schedule is not None:
        raise ValueError(
            f"pool {pool!r} has a schedule: the throughput LP needs constant staff "
            "(give staff or use the counter equations)"
        )
    return float(p.staff)


def throughput_lp(
    scenario: Scenario,
    *,
    weights: Mapping[str, float] | None = None,
    staff: Mapping[str, float] | None = None,
    arrival_rates: Mapping[str, float] | None = None,
) -> LPSolution:
    """Solve the throughput LP of ``scenario`` (rates per the scenario's time unit).

    ``weights``: objective weight per transition or source (default 1; any positive weights give
    the same rates, zero weights give a rate vector that is optimal only for the weighted sum);
    ``staff``: pool -> staff overriding the scenario's (real numbers allowed, e.g. for phase
    diagrams); ``arrival_rates``: source -> rate overriding the scenario's.

    Raises ValueError for nets with priorities (their rates come from the counter equations, see
    :mod:`fluid.counters`) or with profiles/schedules not overridden, and
    :class:`~fluid.errors.SolverError` when HiGHS fails or its answer fails the residual re-check.
    """
    for name in (*scenario.places, *scenario.pools):
        if scenario.priority_order(name):
            raise ValueError(
                f"{name!r} has a priority: the throughput LP holds for priority-free nets "
                "(use the counter equations)"
            )
    trapped = places_without_exit(scenario)
    if trapped:
        raise ValueError(
            f"jobs in {', '.join(trapped)} can never end (no path to a transition that ends the "
            "job): the throughput LP does not hold (use the counter equations)"
        )
    trans = list(scenario.transitions)
    srcs = list(scenario.sources)
    nt, ns = len(trans), len(srcs)
    n = 2 * (nt + ns)
    rho = {q: i for i, q in enumerate(trans)} | {s: nt + k for k, s in enumerate(srcs)}
    u = {name: i + nt + ns for name, i in rho.items()}

    rows = _Rows([], [], [], [])
    net = scenario.transitions
    for q in trans:
        for p, a in net[q].inputs.items():
            pi = route_share(scenario, p, q)
            feeders = [(c, float(net[c].outputs[p])) for c in scenario.inputs_of(p)]
            feeders += [(s, 1.0) for s in scenario.sources_into(p)]
            is_pool = scenario.is_pool(p)
            tau = 0.0 if is_pool else scenario.places[p].hold_mean
            mark = _staff(scenario, p, staff) if is_pool else 0.0
            flow: dict[int, float] = {rho[q]: float(a)}
            marking: dict[int, float] = {u[q]: float(a)}
            for c, b in feeders:
                flow[rho[c]] = flow.get(rho[c], 0.0) - pi * b
                marking[u[c]] = marking.get(u[c], 0.0) - pi * b
                if tau:
                    marking[rho[c]] = marking.get(rho[c], 0.0) + pi * b * tau
            rows.add(flow, 0.0, f"flow of {p} into {q}")
            rows.add(marking, pi * mark, f"marking of {p} at {q}", (p, pi) if is_pool else None)

    a_ub = np.zeros((len(rows.b), n))
    for i, coeffs in enumerate(rows.a):
        for j, v in coeffs.items():
            a_ub[i, j] += v
    b_ub = np.asarray(rows.b, dtype=float)
    cost = np.zeros(n)
    for name, j in rho.items():
        cost[j] = -float((weights or {}).get(name, 1.0))
    bounds = [(0.0, None)] * nt
    bounds += [(0.0, _arrival_rate(scenario, s, arrival_rates)) for s in srcs]
    bounds += [(None, None)] * nt + [(None, 0.0)] * ns

    res = linprog(cost, A_ub=a_ub, b_ub=b_ub, bounds=bounds, method="highs")
    if res.status != 0:
        raise SolverError(
            f"{scenario.file}: throughput LP: HiGHS status {res.status}: {res.message}"
        )
    x = res.x
    names = rows.names + [f"bounds of the rate of {v}" for v in rho]
    names += [f"bound of the offset of {v}" for v in u]
    worst = _recheck(a_ub, b_ub, x, bounds, names)

    duals: dict[str, float] = {p: 0.0 for p in scenario.pools}
    marginals = res.ineqlin.marginals
    for i, tag in enumerate(rows.marking_of):
        if tag is not None:
            pool, pi = tag
            # linprog minimises −objective; its marginal is d(min)/d(b_i) and b_i = π·M_p
            duals[pool] += -pi * float(marginals[i])
    return LPSolution(
        rates={q: _nonnegative(x[rho[q]]) for q in trans},
        source_rates={s: _nonnegative(x[rho[s]]) for s in srcs},
        objective=float(-res.fun),
        marking_duals=duals,
        offsets={name: float(x[j]) for name, j in u.items()},
        status=str(res.message),
        max_residual=worst,
    )


def _nonnegative(v) -> float:
    """The solver may return −0.0 or −1e-12 for a rate that is zero."""
    v = float(v)
    return v if v > 0 else 0.0


def _recheck(a_ub, b_ub, x, bounds, names) -> float:
    """Scaled worst violation of ``a_ub x ≤ b_ub`` and the bounds; raise if above tolerance."""
    terms = np.abs(a_ub * x[None, :]).sum(axis=1)
    scale = 1.0 + np.abs(b_ub) + terms
    viol = (a_ub @ x - b_ub) / scale
    lo = np.array([-np.inf if lb is None else lb for lb, _ in bounds])
    hi = np.array([np.inf if ub is None else ub for _, ub in bounds])
    bscale = 1.0 + np.abs(x)
    bviol = np.maximum(lo - x, x - hi) / bscale
    allv = np.concatenate([viol, bviol])
    i = int(np.argmax(allv))
    worst = float(max(allv[i], 0.0))
    if worst > RESIDUAL_TOLERANCE:
        raise SolverError(
            f"throughput LP: the solver's answer violates {names[i]} by {worst:.3g} "
            f"(relative; tolerance {RESIDUAL_TOLERANCE:g})"
        )
    return worst
