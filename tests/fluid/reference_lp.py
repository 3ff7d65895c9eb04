"""The throughput LP, its bottleneck test and the semiflow enumeration as they were before the
sparse rewrite (dense constraint matrix, one LP per pool, a scan of every row at every step),
kept verbatim as the references that :mod:`fluid.lp`, :func:`fluid.lp.lp_bottlenecks` and
:mod:`fluid.invariants` must reproduce (tests/fluid/test_lp_references.py)."""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import reduce
from typing import Mapping

import numpy as np

from fluid.errors import SolverError
from fluid.lp import RESIDUAL_TOLERANCE, LPSolution, _nonnegative, linprog
from fluid.scenario import Scenario
from fluid.structure import bottlenecks, output_transitions, places_without_exit, route_share


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


def dense_throughput_lp(
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


def one_agent_bottlenecks(scenario: Scenario):
    """``(solution, output, limiting pools)`` by one LP per pool: a pool limits when one more
    agent raises the output (the former ``fluid.analysis._lp_answer``)."""
    sol = dense_throughput_lp(scenario)
    ending = output_transitions(scenario)
    base = sum(sol.rates[q] for q in ending)

    def with_one_more(pool: str) -> float:
        more = dense_throughput_lp(scenario, staff={pool: scenario.pools[pool].staff + 1})
        return sum(more.rates[q] for q in ending)

    return sol, base, bottlenecks(scenario.pools, base, with_one_more, "lp")


def _normalise(values: list[int]) -> list[int]:
    g = reduce(math.gcd, (abs(v) for v in values if v), 0)
    return values if g <= 1 else [v // g for v in values]


def _support(y: list[int]) -> int:
    mask = 0
    for i, v in enumerate(y):
        if v:
            mask |= 1 << i
    return mask


def _keep_minimal(rows: list[tuple[list[int], list[int], int]]) -> list:
    """Drop rows whose support contains another row's support (and duplicates of a support)."""
    rows = sorted(rows, key=lambda r: bin(r[2]).count("1"))
    kept: list = []
    for row in rows:
        mask = row[2]
        if any((k[2] & mask) == k[2] for k in kept):
            continue
        kept.append(row)
    return kept


def reference_farkas(c: np.ndarray, max_rows: int) -> list[list[int]] | None:
    """Minimal-support semiflows of ``c`` (rows × columns), or None when the cap is exceeded."""
    n_rows, n_cols = c.shape
    # each row: (remaining columns of C as ints, the y part, support mask of y)
    rows = []
    for i in range(n_rows):
        y = [0] * n_rows
        y[i] = 1
        rows.append(([int(v) for v in c[i]], y, 1 << i))
    remaining = list(range(n_cols))
    while remaining:
        # eliminate first the column that creates the fewest new rows (Martínez–Silva heuristic)
        def cost(j: int) -> int:
            pos = sum(1 for r in rows if r[0][j] > 0)
            neg = sum(1 for r in rows if r[0][j] < 0)
            return pos * neg - pos - neg

        j = min(remaining, key=cost)
        remaining.remove(j)
        zero = [r for r in rows if r[0][j] == 0]
        pos = [r for r in rows if r[0][j] > 0]
        neg = [r for r in rows if r[0][j] < 0]
        new = list(zero)
        for cp, yp, mp in pos:
            for cn, yn, mn in neg:
                mask = mp | mn
                # a combination whose support contains a zero-row's support is never minimal
                if any((z[2] & mask) == z[2] for z in zero):
                    continue
                fp, fn = -cn[j], cp[j]
                merged = _normalise([fp * a + fn * b for a, b in zip(cp + yp, cn + yn)])
                new.append((merged[: len(cp)], merged[len(cp):], mask))
                if len(new) > max_rows:
                    return None
        rows = _keep_minimal(new)
    return [r[1] for r in rows]
