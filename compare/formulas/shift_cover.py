"""The cheapest whole-agent mix of shifts covering a staff requirement per interval.

Set covering as Dantzig (1954, "A comment on Edie's traffic delays at toll booths", Operations
Research 2) wrote shift scheduling: with ``A[i, j] = 1`` when a shift of column ``j`` has an
agent on duty in interval ``i``, requirement ``r_i`` and cost ``c_j`` per agent,

    minimise  Σ_j c_j x_j   subject to   Σ_j A[i, j] x_j ≥ r_i  (every i),   x_j ≥ 0 whole,

solved with HiGHS through :func:`scipy.optimize.milp`. Pure: arrays in, counts out.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["CoverSolution", "cheapest_cover", "CoverError"]

# HiGHS solves to a relative gap; covering costs are sums of a few given costs, so ask for an
# exact optimum (gap 0) and take counts that are whole up to this tolerance
_WHOLE = 1e-6


class CoverError(ValueError):
    """The requirement cannot be covered (an interval no column covers), or the solver failed."""


@dataclass(frozen=True)
class CoverSolution:
    """``counts[j]``: agents on column ``j`` (whole); ``cost``: Σ c_j counts_j; ``staff[i]``:
    agents on duty in interval ``i`` (Σ_j A[i, j] counts_j, at least the requirement);
    ``lp_bound``: the optimum of the linear relaxation (a lower bound on any cover's cost)."""

    counts: tuple[int, ...]
    cost: float
    staff: tuple[int, ...]
    lp_bound: float


def _arrays(coverage, required, costs):
    a = np.asarray(coverage, dtype=float)
    r = np.asarray(required, dtype=float)
    c = np.asarray(costs, dtype=float)
    if a.ndim != 2 or r.shape != (a.shape[0],) or c.shape != (a.shape[1],):
        raise ValueError(f"coverage must be intervals x columns {a.shape} with one requirement "
                         f"per interval ({r.shape}) and one cost per column ({c.shape})")
    if not (np.isfinite(a).all() and np.isfinite(r).all() and np.isfinite(c).all()):
        raise ValueError("coverage, requirements and costs must be finite")
    if (a < 0).any() or (r < 0).any() or (c < 0).any():
        raise ValueError("coverage, requirements and costs must be >= 0")
    return a, r, c


def cheapest_cover(coverage, required, costs) -> CoverSolution:
    """The cheapest whole counts ``x`` with ``coverage @ x >= required`` (see module docstring).
    ``coverage``: intervals × columns (0/1, or agents on duty per shift), ``required``: agents
    per interval, ``costs``: per column. Raises :class:`CoverError` when an interval with a
    positive requirement has no covering column."""
    from scipy.optimize import Bounds, LinearConstraint, milp

    a, r, c = _arrays(coverage, required, costs)
    need = r > 0
    uncovered = np.flatnonzero(need & (a.sum(axis=1) <= 0))
    if uncovered.size:
        raise CoverError(f"no column covers interval {int(uncovered[0])} "
                         f"(requirement {r[uncovered[0]]:g})")
    n = a.shape[1]
    if not need.any() or n == 0:
        return CoverSolution(counts=(0,) * n, cost=0.0, staff=(0,) * a.shape[0], lp_bound=0.0)
    cons = LinearConstraint(a[need], lb=r[need], ub=np.inf)
    bounds = Bounds(0, np.inf)
    res = milp(c, constraints=cons, integrality=np.ones(n), bounds=bounds,
               options={"mip_rel_gap": 0.0})
    if res.status != 0 or res.x is None:
        raise CoverError(f"the covering program was not solved: {res.message}")
    x = np.round(res.x)
    if np.abs(res.x - x).max() > _WHOLE or ((a @ x) < r - _WHOLE).any():
        raise CoverError("the covering program returned counts that are not a whole cover")
    relaxed = milp(c, constraints=cons, integrality=np.zeros(n), bounds=bounds)
    lp_bound = float(relaxed.fun) if relaxed.status == 0 else float("nan")
    counts = tuple(int(v) for v in x)
    return CoverSolution(counts=counts, cost=round(float(c @ x), 9),
                         staff=tuple(int(round(v)) for v in a @ x), lp_bound=lp_bound)
