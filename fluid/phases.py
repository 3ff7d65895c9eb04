"""Exact fluid phase diagrams over the staff of one or two pools (design.md §4.1).

Without priorities and with constant rates the long-run fluid rate of a set of transitions (by
default those that end jobs) is the optimum ``V(M)`` of the throughput LP, whose staff ``M`` only
appears in the right-hand sides; so ``V`` is concave and piecewise affine in the staff vector, and
every optimal dual solution at one staff point ``M⁰`` gives an affine function that bounds ``V``
from above everywhere (LP duality):

    V(M) ≤ V(M⁰) + Σ_p y_p (M_p − M⁰_p),    y_p = d V / d M_p (the marking duals).

With the other pools at the scenario's staff each dual solution is one *piece*
``const + Σ_i coef_i x_i`` over the staff ``x`` of the axis pools (one or two). Pieces are
collected by a cutting-plane loop: the lower envelope ``E`` of the pieces found so far is an
upper bound of ``V``; wherever ``E`` exceeds the LP value at a test point, the LP's own piece
there is added. The test points are the vertices of the envelope over all non-negative staff
(see :func:`_vertices`), plus a coarse grid. The loop stops when ``E = V`` at every
vertex, which proves ``E = V`` for all non-negative staff: on each cell of ``E`` (where one piece
is smallest) ``V`` is concave and equal to the affine ``E`` at the cell's vertices, hence
``V ≥ E`` on their convex hull; along the cell's unbounded directions (non-negative, since the
cells live in the orthant) ``E`` is flat (the envelope contains a piece without axis
coefficients, found at a staff beyond every pool's offered work) and ``V`` does not decrease
(more staff never lowers the LP optimum).

A piece is labelled by its *limiting pools*: the axis pools with a positive coefficient, and the
other pools whose one more agent raises the rate at a point inside the piece's cell (a one-agent
difference, the bottleneck test of :func:`fluid.structure.output_rises`); "inflow" when there are
none.
Pieces whose cell has no interior among the non-negative staff are dropped (they never decide
the minimum).

With priorities, arrival profiles or traces, or schedules, the LP does not apply
(:func:`fluid.structure.lp_applies`): the counter equations are integrated at the integer staff
points of a grid (:mod:`fluid.phase_grid`), each point labelled by one-agent differences; no
exact pieces are given. The result types are in :mod:`fluid.phase_results`.

Staff in agents (real numbers for the LP); rates per the scenario's time unit.
"""

from __future__ import annotations

import itertools
import math
from typing import Iterable, Mapping, Sequence

import numpy as np

from .lp import ThroughputModel, linprog
from .offered import offered_rates, offered_work
from .phase_grid import grid_diagram
from .phase_results import INFLOW, GridPoint, PhaseDiagram, Piece
from .scenario import Scenario
from .structure import lp_applies, output_rises, output_transitions

__all__ = ["Piece", "GridPoint", "PhaseDiagram", "INFLOW", "phase_diagram", "MATCH_TOLERANCE"]

#: Relative tolerance within which the envelope must match the LP at every test point.
MATCH_TOLERANCE = 1e-9


# --- inputs --------------------------------------------------------------------------------------


def _check_axes(scenario: Scenario, axes: str | Sequence[str]) -> tuple[str, ...]:
    axes = (axes,) if isinstance(axes, str) else tuple(axes)
    if len(axes) not in (1, 2) or len(set(axes)) != len(axes):
        raise ValueError(f"axes must be one pool or two different pools (got {list(axes)})")
    for p in axes:
        if p not in scenario.pools:
            raise ValueError(f"axis {p!r} is not a pool (pools: {', '.join(scenario.pools)})")
    return axes


def _check_of(scenario: Scenario, of: str | Iterable[str] | None) -> tuple[str, ...]:
    if of is None:
        return output_transitions(scenario)
    names = (of,) if isinstance(of, str) else tuple(of)
    if not names:
        raise ValueError("of must name at least one transition")
    for q in names:
        if q not in scenario.transitions:
            raise ValueError(f"{q!r} is not a transition (transitions: "
                             f"{', '.join(scenario.transitions)})")
    return names


def _ranges(scenario, axes, ranges, staff, work) -> dict[str, tuple[float, float]]:
    out = {}
    for p in axes:
        if ranges and p in ranges:
            lo, hi = (float(x) for x in ranges[p])
            if not (math.isfinite(lo) and math.isfinite(hi) and 0 <= lo < hi):
                raise ValueError(f"range of {p} must satisfy 0 <= low < high (got {lo:g}:{hi:g})")
        else:
            w = work.get(p, math.nan)
            reach = math.ceil(1.25 * w) if math.isfinite(w) else 0
            lo, hi = 0.0, float(max(2 * staff[p], reach, 2))
        out[p] = (lo, hi)
    for p in ranges or {}:
        if p not in axes:
            raise ValueError(f"a range is given for {p!r}, which is not an axis")
    return out


def phase_diagram(
    scenario: Scenario,
    axes: str | Sequence[str],
    *,
    of: str | Iterable[str] | None = None,
    ranges: Mapping[str, tuple[float, float]] | None = None,
    max_solves: int = 2000,
    max_grid: int = 300,
) -> PhaseDiagram:
    """Fluid phase diagram of ``scenario`` over the staff of the pools ``axes`` (one pool, or
    two different pools); the other pools keep the scenario's staff.

    ``of``: a transition or several (their rates are summed; default: the transitions that end
    jobs); ``ranges``: pool -> (low, high) staff to draw (default 0 to the larger of twice the
    scenario's staff and 1.25 × the pool's offered work). The exact pieces do not depend on the
    ranges. ``max_solves``: LPs allowed for the cutting-plane loop; ``max_grid``: grid points
    allowed for the counters grid (a coarser integer step is used beyond that).
    Rates per the scenario's time unit."""
    axes = _check_axes(scenario, axes)
    of_label = ("output rate (transitions that end jobs)" if of is None
                else f"rate of {of}" if isinstance(of, str) else None)
    of = _check_of(scenario, of)
    of_label = of_label or "total rate of " + ", ".join(of)
    h = scenario.run.horizon
    staff = {p: pool.mean_staff(h) for p, pool in scenario.pools.items()}
    work = offered_work(scenario)
    box = _ranges(scenario, axes, ranges, staff, work)
    common = dict(scenario_name=scenario.name, time_unit=scenario.time_unit, of=of, axes=axes,
                  ranges=box, staff=staff, of_label=of_label)
    if lp_applies(scenario):
        return _lp_diagram(scenario, axes, of, work, max_solves, common)
    return grid_diagram(scenario, axes, of, box, max_grid, common)


# --- the LP method -------------------------------------------------------------------------------
# Inside the loop a piece is a tuple (const, coef of each axis..., duals of every pool).


def _key(point) -> tuple[float, ...]:
    return tuple(round(float(x), 12) for x in point)


class _Oracle:
    """LP value and dual piece at staff points of the axes (cached), other pools fixed."""

    def __init__(self, scenario: Scenario, axes, of, scale: float):
        self.scenario = scenario
        self.axes = axes
        weights = {q: (1.0 if q in of else 0.0) for q in scenario.transitions}
        weights |= {s: 0.0 for s in scenario.sources}
        # built once: the staff only changes the LP's right-hand sides
        self.model = ThroughputModel(scenario, weights=weights)
        self.base = {p: float(pool.staff) for p, pool in scenario.pools.items()}
        self.scale = scale
        self.cache: dict = {}
        self.solves = 0

    def value_at(self, staff: Mapping[str, float]) -> tuple[float, dict[str, float]]:
        sol = self.model.solve(staff)
        self.solves += 1
        duals = {p: (0.0 if abs(y) <= 1e-12 * max(1.0, self.scale) else float(y))
                 for p, y in sol.marking_duals.items()}
        return float(sol.objective), duals

    def at(self, *point: float):
        key = _key(point)
        if key not in self.cache:
            value, duals = self.value_at(self.base | dict(zip(self.axes, point)))
            coefs = tuple(duals[p] for p in self.axes)
            const = value - sum(c * x for c, x in zip(coefs, point))
            self.cache[key] = (value, (const, *coefs, duals))
        return self.cache[key]


def _same(p, q, scale: float) -> bool:
    return (abs(p[0] - q[0]) <= MATCH_TOLERANCE * scale
            and all(abs(x - y) <= MATCH_TOLERANCE * max(1.0, abs(x))
                    for x, y in zip(p[1:-1], q[1:-1])))


def _table(pieces: list) -> np.ndarray:
    """(pieces, 1 + axes) array: const, then the coefficient of each axis."""
    return np.array([p[:-1] for p in pieces], dtype=float)


def _values(arr: np.ndarray, pts: np.ndarray) -> np.ndarray:
    """Every piece at every point: (pieces, points)."""
    return arr[:, :1] + arr[:, 1:] @ pts.T


def _envelope(pieces: list, pts: np.ndarray) -> np.ndarray:
    return _values(_table(pieces), pts).min(axis=0)


def _vertices(pieces: list, scale: float) -> np.ndarray:
    """Vertices of the lower envelope of ``pieces`` over the non-negative staff: points where
    the pieces that tie, plus the axes held at 0, fix a point (two axes: three pieces, two on an
    axis, or the origin; one axis: two pieces, or 0), kept when those pieces are the smallest."""
    arr = _table(pieces)
    n = arr.shape[1] - 1
    cands = [np.zeros(n)]
    for zero_count in range(n):
        for zero in itertools.combinations(range(n), zero_count):
            free = [j for j in range(n) if j not in zero]
            for first, *rest in itertools.combinations(range(len(arr)), len(free) + 1):
                # `first` ties with each j of `rest`: (coef_first − coef_j)·x = const_j − const_first
                m = np.array([arr[first, 1:][free] - arr[j, 1:][free] for j in rest])
                if abs(np.linalg.det(m)) < 1e-14:
                    continue
                x = np.zeros(n)
                x[free] = np.linalg.solve(m, arr[rest, 0] - arr[first, 0])
                cands.append(x)
    pts = np.array([c for c in cands if (c >= -1e-9).all() and np.isfinite(c).all()])
    pts = np.clip(pts, 0.0, None)
    values = _values(arr, pts)
    low = values.min(axis=0)
    ties = (values <= low[None, :] + 1e-9 * scale).sum(axis=0)
    keep = ties + (pts == 0).sum(axis=1) >= n + 1
    return np.unique(np.round(pts[keep], 12), axis=0)


def _lp_diagram(scenario, axes, of, work, max_solves, common) -> PhaseDiagram:
    rates, _ = offered_rates(scenario)
    inflow = float(sum(rates[q] for q in of))
    scale = max(inflow, 1e-12)
    oracle = _Oracle(scenario, axes, of, scale)
    tol = MATCH_TOLERANCE * scale
    pieces: list = [(inflow, *(0.0 for _ in axes), {p: 0.0 for p in scenario.pools})]

    def add(piece) -> bool:
        if any(_same(piece, q, scale) for q in pieces):
            return False
        pieces.append(piece)
        return True

    notes = []
    ranges = common["ranges"]
    # a staff beyond every axis pool's offered work: its piece has no axis coefficient (the
    # plateau that makes the envelope flat along every unbounded direction)
    far = [max(2 * work[p] + 1 if math.isfinite(work[p]) else 0.0, 2 * ranges[p][1] + 1)
           for p in axes]
    flat = False
    for _ in range(60):
        _, piece = oracle.at(*far)
        add(piece)
        if not any(piece[1:-1]):
            flat = True
            break
        far = [2 * x for x in far]
    if not flat:
        notes.append("no staff level was found at which no axis pool limits: the pieces are "
                     "exact within the drawn ranges only")
    seeds = [tuple(float(common["staff"][p]) for p in axes)]
    seeds += list(itertools.product(*(np.linspace(*ranges[p], 5) for p in axes)))
    checked: dict = {}
    converged = False
    while oracle.solves < max_solves:
        pts = np.vstack([_vertices(pieces, scale), np.array(seeds, dtype=float)])
        todo = [tuple(x) for x in pts if _key(x) not in checked]
        if not todo:
            converged = True
            break
        envelope = _envelope(pieces, np.array(todo))
        grew = False
        for point, e in zip(todo, envelope):
            value, piece = oracle.at(*point)
            checked[_key(point)] = value
            if e - value > tol:
                # (when the LP's piece is already known the excess is rounding; it is reported
                # in max_mismatch below)
                grew |= add(piece)
        if not grew and all(_key(x) in checked for x in _vertices(pieces, scale)):
            converged = True
            break
    if not converged:
        notes.append(f"the cutting-plane loop stopped after {oracle.solves} LPs without "
                     "matching the LP at every vertex")
    # the envelope must equal the LP at every test point (above it: a piece found later was
    # missing; below it: a piece that is not an upper bound, i.e. an inexact dual)
    where = np.array(list(checked), dtype=float).reshape(-1, len(axes))
    values = np.array(list(checked.values()), dtype=float)
    worst = (float(np.max(np.abs(_envelope(pieces, where) - values)) / scale) if checked
             else math.inf)
    final = _labelled(oracle, axes, _needed(pieces, scale))
    exact = bool(converged and flat and worst <= MATCH_TOLERANCE)
    which = "axis pool" if len(axes) == 1 else "two axis pools"
    if exact:
        notes.append("exact: the envelope of the pieces equals the throughput LP at every vertex, "
                     f"hence for every non-negative staff of the {which} (other pools at the "
                     "scenario's staff)")
    else:
        notes.append(f"not proven exact (largest relative mismatch with the LP at a test point: "
                     f"{worst:.3g})")
    if scenario.has_patience:
        notes.append("patience is ignored by the fluid model")
    return PhaseDiagram(method="lp", pieces=tuple(final), grid=(), inflow_rate=inflow,
                        lp_solves=oracle.solves, max_mismatch=worst, exact=exact,
                        notes=tuple(notes), **common)


def _needed(pieces: list, scale: float) -> list[tuple]:
    """Pieces whose cell has an interior among the non-negative staff, each with the centre of
    the largest ball inside its cell (Chebyshev centre, by an LP) as a witness point. The search
    stays in a box twice as wide as the envelope's vertices reach: every cell has a vertex, and
    an interior near it, there."""
    verts = _vertices(pieces, scale)
    reach = 2 * float(verts.max()) + 1 if verts.size else 1.0
    arr = _table(pieces)
    n = arr.shape[1] - 1
    box = np.column_stack([np.vstack([-np.eye(n), np.eye(n)]), np.ones(2 * n)])
    box_rhs = np.concatenate([np.zeros(n), np.full(n, reach)])
    out = []
    for i in range(len(pieces)):
        others = np.delete(arr, i, axis=0)
        # variables (x..., r): the ball of radius r about x lies where piece i is the smallest
        # and inside [0, reach]^n
        k = arr[i, 1:] - others[:, 1:]
        rows = np.vstack([np.column_stack([k, np.linalg.norm(k, axis=1)]), box])
        rhs = np.concatenate([others[:, 0] - arr[i, 0], box_rhs])
        res = linprog([0] * n + [-1], A_ub=rows, b_ub=rhs,
                      bounds=[(None, None)] * n + [(0, None)], method="highs")
        if res.status == 0 and -res.fun > 1e-9 * reach:
            out.append((pieces[i], tuple(float(x) for x in res.x[:n])))
    return out


def _labelled(oracle: _Oracle, axes, found: list) -> list[Piece]:
    out = []
    for piece, witness in found:
        duals = piece[-1]
        limiting = []
        for p in oracle.scenario.pools:
            if duals[p] <= 0:
                continue
            if p in axes:
                limiting.append(p)
                continue
            # a dual of a pool off the axes may be positive at a degenerate point: confirm that
            # one more agent raises the rate at the witness
            staff = oracle.base | dict(zip(axes, witness))
            base, _ = oracle.value_at(staff)
            more, _ = oracle.value_at(staff | {p: staff[p] + 1})
            if output_rises(base, more, "lp"):
                limiting.append(p)
        out.append(Piece(const=float(piece[0]) + 0.0,
                         coef={x: float(c) for x, c in zip(axes, piece[1:-1])},
                         coef_all=dict(duals), limiting=tuple(limiting), witness=witness))
    out.sort(key=lambda p: (len(p.limiting), p.label, p.const))
    return out

