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

The constraint matrix has a few entries per row (one per arc and feeder); :class:`ThroughputModel`
builds it once as a sparse matrix, and since the staff only enters the right-hand sides it is
re-solved at other staff without being built again. :func:`lp_bottlenecks` reads the limiting
pools off the marking duals, with a one-agent LP only where a dual leaves the answer open.

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
from .structure import (LP_RISE, bottlenecks, output_transitions, places_without_exit,
                        route_share)

__all__ = [
    "LPSolution",
    "LPBottlenecks",
    "ThroughputModel",
    "throughput_lp",
    "lp_bottlenecks",
    "RESIDUAL_TOLERANCE",
    "DUAL_CERTAIN",
]


def linprog(*args, **kwargs):
    """:func:`scipy.optimize.linprog`, imported at the first solve: importing scipy.optimize
    takes longer than loading a scenario, and most commands never solve an LP."""
    from scipy.optimize import linprog as scipy_linprog

    return scipy_linprog(*args, **kwargs)

# Relative tolerance of the residual re-check; HiGHS's own primal feasibility tolerance is 1e-7.
RESIDUAL_TOLERANCE = 1e-6

#: A marking dual at most this times max(1, |output|) proves that one more agent does not raise
#: the output (see :func:`lp_bottlenecks`): half the one-agent threshold
#: :data:`fluid.structure.LP_RISE`, so that solver noise in the dual cannot decide a case the
#: one-agent difference would decide the other way.
DUAL_CERTAIN = 0.5 * LP_RISE


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


class ThroughputModel:
    """The throughput LP of ``scenario`` (design.md §4.1), built once as a sparse matrix.

    The staff only enters the right-hand sides of the pools' marking constraints, so
    :meth:`solve` answers at any staff without building the LP again (the phase diagrams and
    the one-more-agent test solve it many times). ``weights``: objective weight per transition
    or source (default 1); ``arrival_rates``: source -> rate overriding the scenario's. Rates
    per the scenario's time unit.

    Raises ValueError for nets with priorities or whose jobs cannot all end (the counter
    equations answer those, see :mod:`fluid.counters`).
    """

    def __init__(
        self,
        scenario: Scenario,
        *,
        weights: Mapping[str, float] | None = None,
        arrival_rates: Mapping[str, float] | None = None,
    ):
        for name in (*scenario.places, *scenario.pools):
            if scenario.priority_order(name):
                raise ValueError(
                    f"{name!r} has a priority: the throughput LP holds for priority-free nets "
                    "(use the counter equations)"
                )
        trapped = places_without_exit(scenario)
        if trapped:
            raise ValueError(
                f"jobs in {', '.join(trapped)} can never end (no path to a transition that ends "
                "the job): the throughput LP does not hold (use the counter equations)"
            )
        self.scenario = scenario
        self._arrival_rates = arrival_rates
        self._bounds: list | None = None
        trans = list(scenario.transitions)
        srcs = list(scenario.sources)
        nt, ns = len(trans), len(srcs)
        n = 2 * (nt + ns)
        rho = {q: i for i, q in enumerate(trans)} | {s: nt + k for k, s in enumerate(srcs)}
        u = {name: i + nt + ns for name, i in rho.items()}
        self._trans, self._srcs, self._rho, self._u = trans, srcs, rho, u

        net = scenario.transitions
        into: dict[str, list[str]] = {}
        for s in srcs:
            into.setdefault(scenario.sources[s].into, []).append(s)
        feeders_of: dict[str, list[tuple[str, float]]] = {}

        def feeders(p: str) -> list[tuple[str, float]]:
            # what feeds p (transitions by arc weight, then sources), looked up once per place
            if p not in feeders_of:
                feeders_of[p] = [(c, float(net[c].outputs[p])) for c in scenario.inputs_of(p)]
                feeders_of[p] += [(s, 1.0) for s in into.get(p, ())]
            return feeders_of[p]

        row_of, col_of, value_of = [], [], []
        names: list[str] = []
        pool_rows: list[tuple[int, str, float]] = []  # (row, pool, π) of each pool marking row

        def add(coeffs: dict[int, float], name: str) -> int:
            i = len(names)
            for j, v in coeffs.items():
                if v:  # an exact zero is no entry (as a dense matrix would give the solver)
                    row_of.append(i)
                    col_of.append(j)
                    value_of.append(v)
            names.append(name)
            return i

        for q in trans:
            for p, a in net[q].inputs.items():
                pi = route_share(scenario, p, q)
                is_pool = scenario.is_pool(p)
                tau = 0.0 if is_pool else scenario.places[p].hold_mean
                flow: dict[int, float] = {rho[q]: float(a)}
                marking: dict[int, float] = {u[q]: float(a)}
                for c, b in feeders(p):
                    flow[rho[c]] = flow.get(rho[c], 0.0) - pi * b
                    marking[u[c]] = marking.get(u[c], 0.0) - pi * b
                    if tau:
                        marking[rho[c]] = marking.get(rho[c], 0.0) + pi * b * tau
                add(flow, f"flow of {p} into {q}")
                i = add(marking, f"marking of {p} at {q}")
                if is_pool:
                    pool_rows.append((i, p, pi))

        from scipy.sparse import csr_array

        # 32-bit indices when they fit, as scipy would choose for a dense matrix
        index = np.int32 if max(len(value_of), len(names), n) < 2**31 else np.int64
        self._a = csr_array((np.asarray(value_of, dtype=float),
                             (np.asarray(row_of, dtype=index), np.asarray(col_of, dtype=index))),
                            shape=(len(names), n))
        self._abs_a = abs(self._a)
        self._names = names
        self._pool_rows = pool_rows
        self._cost = np.zeros(n)
        for name, j in rho.items():
            self._cost[j] = -float((weights or {}).get(name, 1.0))

    def _rhs(self, staff: Mapping[str, float] | None) -> np.ndarray:
        """Right-hand sides: 0 except ``π · M_p`` in the marking rows of pool ``p``."""
        b = np.zeros(len(self._names))
        for i, p, pi in self._pool_rows:
            b[i] = pi * _staff(self.scenario, p, staff)
        return b

    def bounds(self) -> list[tuple[float | None, float | None]]:
        """Variable bounds: ``ρ ≥ 0``, ``0 ≤ ρ_s ≤ λ_s``, ``u`` free, ``u_s ≤ 0``."""
        if self._bounds is None:
            nt = len(self._trans)
            rates = [_arrival_rate(self.scenario, s, self._arrival_rates) for s in self._srcs]
            self._bounds = ([(0.0, None)] * nt + [(0.0, lam) for lam in rates]
                            + [(None, None)] * nt + [(None, 0.0)] * len(self._srcs))
        return self._bounds

    def solve(self, staff: Mapping[str, float] | None = None) -> LPSolution:
        """Solve at ``staff`` (pool -> staff overriding the scenario's; real numbers allowed).

        Raises ValueError for pools with a schedule or sources with a profile not overridden,
        and :class:`~fluid.errors.SolverError` when HiGHS fails or its answer fails the
        residual re-check."""
        b_ub = self._rhs(staff)
        bounds = self.bounds()
        res = linprog(self._cost, A_ub=self._a, b_ub=b_ub, bounds=bounds, method="highs")
        if res.status != 0:
            raise SolverError(
                f"{self.scenario.file}: throughput LP: HiGHS status {res.status}: {res.message}"
            )
        x = res.x
        worst = self._recheck(b_ub, x, bounds)
        duals: dict[str, float] = {p: 0.0 for p in self.scenario.pools}
        marginals = res.ineqlin.marginals
        for i, pool, pi in self._pool_rows:
            # linprog minimises −objective; its marginal is d(min)/d(b_i) and b_i = π·M_p
            duals[pool] += -pi * float(marginals[i])
        rho = self._rho
        return LPSolution(
            rates={q: _nonnegative(x[rho[q]]) for q in self._trans},
            source_rates={s: _nonnegative(x[rho[s]]) for s in self._srcs},
            objective=float(-res.fun),
            marking_duals=duals,
            offsets={name: float(x[j]) for name, j in self._u.items()},
            status=str(res.message),
            max_residual=worst,
        )

    def _recheck(self, b_ub, x, bounds) -> float:
        """Scaled worst violation of ``A x ≤ b`` and the bounds; raise if above tolerance."""
        scale = 1.0 + np.abs(b_ub) + self._abs_a @ np.abs(x)
        viol = (self._a @ x - b_ub) / scale
        lo = np.array([-np.inf if lb is None else lb for lb, _ in bounds])
        hi = np.array([np.inf if ub is None else ub for _, ub in bounds])
        bviol = np.maximum(lo - x, x - hi) / (1.0 + np.abs(x))
        allv = np.concatenate([viol, bviol])
        i = int(np.argmax(allv))
        worst = float(max(allv[i], 0.0))
        if worst > RESIDUAL_TOLERANCE:
            if i < len(viol):
                name = self._names[i]
            else:
                k = i - len(viol)
                n_rho = len(self._rho)
                name = (f"bounds of the rate of {list(self._rho)[k]}" if k < n_rho
                        else f"bound of the offset of {list(self._u)[k - n_rho]}")
            raise SolverError(
                f"throughput LP: the solver's answer violates {name} by {worst:.3g} "
                f"(relative; tolerance {RESIDUAL_TOLERANCE:g})"
            )
        return worst


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
    model = ThroughputModel(scenario, weights=weights, arrival_rates=arrival_rates)
    return model.solve(staff)


@dataclass(frozen=True)
class LPBottlenecks:
    """The throughput LP's answer with its limiting pools.

    ``solution``: the LP at the scenario's staff (weights 1); ``output``: the summed rate of the
    output transitions (:func:`fluid.structure.output_transitions`, per time unit);
    ``limiting``: pools whose one more agent raises the output (declaration order);
    ``confirmed``: the pools whose marking dual left the question open, settled by a one-agent
    LP (every other pool was settled by its dual alone)."""

    solution: LPSolution
    output: float
    limiting: tuple[str, ...]
    confirmed: tuple[str, ...]


def lp_bottlenecks(
    scenario: Scenario,
    *,
    staff: Mapping[str, float] | None = None,
    arrival_rates: Mapping[str, float] | None = None,
) -> LPBottlenecks:
    """Throughput LP and limiting pools of ``scenario``: exactly the pools whose one more agent
    raises the output (:func:`fluid.structure.bottlenecks`), found with one LP and the marking
    duals instead of one LP per pool.

    Why the duals decide: the LP value ``V(M) = Σ ρ`` (weights 1) is concave in the staff ``M``
    and any optimal dual solution ``y`` bounds it from above (weak duality; ``M`` only enters
    the right-hand sides): ``V(M + e_p) ≤ V(M) + y_p``. Every rate is non-decreasing in the staff
    (the counter equations are monotone), so the output's rise with one more agent is at most
    the rise of ``V``, hence at most ``y_p``. A pool whose dual is at most
    :data:`DUAL_CERTAIN` × max(1, |output|) (half the one-agent threshold) therefore does not
    limit, without a further LP. A larger dual is not proof of a rise: at a degenerate optimum
    (a kink of ``V``, e.g. a pool exactly at capacity) a dual may be positive while one more
    agent changes nothing, and the slope may fall before a whole agent is added. Those pools
    are settled by the one-agent LP (same model, one right-hand side changed).
    ``staff``/``arrival_rates`` as for :func:`throughput_lp`."""
    model = ThroughputModel(scenario, arrival_rates=arrival_rates)
    sol = model.solve(staff)
    ending = output_transitions(scenario)
    base = sum(sol.rates[q] for q in ending)
    certain = DUAL_CERTAIN * max(1.0, abs(base))
    open_ = [p for p in scenario.pools if sol.marking_duals[p] > certain]

    def with_one_more(pool: str) -> float:
        more = model.solve(dict(staff or {}) | {pool: _staff(scenario, pool, staff) + 1})
        return sum(more.rates[q] for q in ending)

    limiting = bottlenecks(open_, base, with_one_more, "lp")
    return LPBottlenecks(solution=sol, output=base, limiting=limiting, confirmed=tuple(open_))


def _nonnegative(v) -> float:
    """The solver may return −0.0 or −1e-12 for a rate that is zero."""
    v = float(v)
    return v if v > 0 else 0.0
