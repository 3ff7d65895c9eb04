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
difference, as :func:`fluid.analysis.throughput` finds bottlenecks); "inflow" when there are none.
Pieces whose cell has no interior among the non-negative staff are dropped (they never decide
the minimum).

With priorities, arrival profiles or traces, or schedules, the LP does not apply: the counter
equations are integrated at the integer staff points of a grid (:func:`fluid.counters.
integrate_counters`), each point labelled by one-agent differences; no exact pieces are given.

Staff in agents (real numbers for the LP); rates per the scenario's time unit.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Iterable, Mapping, Sequence

import numpy as np

from .analysis import offered_rates
from .lp import linprog, places_without_exit, throughput_lp
from .scenario import Scenario
from .staffing import offered_work

if TYPE_CHECKING:  # pandas is imported by the table methods only (importing it is slow)
    import pandas as pd

__all__ = ["Piece", "GridPoint", "PhaseDiagram", "phase_diagram", "MATCH_TOLERANCE"]

#: Relative tolerance within which the envelope must match the LP at every test point.
MATCH_TOLERANCE = 1e-9
# A one-agent rise counts (relative) above this: the LP is exact to about 1e-9, the counters'
# long-run slopes to about 1e-6 (as in fluid.analysis)
LP_RISE = 1e-7
COUNTER_RISE = 1e-6
INFLOW = "inflow"


@dataclass(frozen=True)
class Piece:
    """One affine piece: rate = ``const + Σ coef[x]·x`` over the axis pools x (per time unit)
    with the other pools at the scenario's staff (their terms are inside ``const``).
    ``coef_all``: the LP dual of every pool's staff (d rate / d staff, per agent) at the point
    the piece came from; ``limiting``: limiting pools in the piece's cell (empty:
    inflow-limited); ``witness``: a staff point inside the cell (one value per axis)."""

    const: float
    coef: dict[str, float]
    coef_all: dict[str, float]
    limiting: tuple[str, ...]
    witness: tuple[float, ...]

    @property
    def label(self) -> str:
        return "+".join(self.limiting) if self.limiting else INFLOW

    def value(self, *staff):
        """The piece at ``staff`` (one scalar or array per axis, in axis order)."""
        if len(staff) != len(self.coef):
            raise TypeError(f"the piece has {len(self.coef)} axis pool(s), got {len(staff)} "
                            "staff values")
        return sum((c * np.asarray(x, dtype=float) for c, x in zip(self.coef.values(), staff)),
                   np.asarray(self.const, dtype=float))

    def to_json(self) -> dict:
        return {"const": self.const, "coef": dict(self.coef), "limiting": list(self.limiting),
                "label": self.label, "coef_all": dict(self.coef_all),
                "witness": list(self.witness)}


@dataclass(frozen=True)
class GridPoint:
    """Counter-equation rate (per time unit) at integer staff ``a`` (first axis) and ``b``
    (second axis; None with one axis), and its limiting pools."""

    a: int
    b: int | None
    rate: float
    limiting: tuple[str, ...]

    @property
    def point(self) -> tuple[int, ...]:
        return (self.a,) if self.b is None else (self.a, self.b)

    @property
    def label(self) -> str:
        return "+".join(self.limiting) if self.limiting else INFLOW


@dataclass(frozen=True)
class PhaseDiagram:
    """Fluid rate of ``of`` (transitions summed) over the staff of the ``axes`` pools (one or
    two).

    ``method``: "lp" (exact ``pieces``, valid for all non-negative staff) or "counters-grid"
    (``grid`` of integer points, no pieces). ``ranges``: pool -> (low, high) staff drawn;
    ``staff``: the scenario's staff per pool (mean staff with a schedule); ``inflow_rate``: the
    rate of ``of`` when no pool limits; ``of_label``: what ``of`` is, in words; ``lp_solves``:
    LPs (or counter integrations) used; ``max_mismatch``: largest relative excess of the
    envelope over the LP at the test points (≤ :data:`MATCH_TOLERANCE` when ``exact``)."""

    scenario_name: str
    time_unit: str
    of: tuple[str, ...]
    axes: tuple[str, ...]
    ranges: dict[str, tuple[float, float]]
    staff: dict[str, float]
    method: str
    pieces: tuple[Piece, ...]
    grid: tuple[GridPoint, ...]
    inflow_rate: float
    lp_solves: int
    max_mismatch: float
    exact: bool
    notes: tuple[str, ...] = ()
    of_label: str = ""

    # --- evaluation ------------------------------------------------------------------------------

    def rate_at(self, *staff):
        """Fluid rate at ``staff`` (one scalar or array per axis). Exact for the LP method; for
        the counters grid, linear (one axis) or bilinear (two) interpolation between grid points
        (exact on them)."""
        self._check_point(staff)
        if self.method == "lp":
            return self._envelope(*staff)[0]
        return self._interpolate(*staff)

    def piece_at(self, *staff):
        """Index of the piece that decides the rate at ``staff`` (LP method only)."""
        if self.method != "lp":
            raise ValueError("a counters-grid diagram has no pieces")
        self._check_point(staff)
        return self._envelope(*staff)[1]

    def label_at(self, *staff: float) -> str:
        """Limiting pools at ``staff`` joined by "+", or "inflow"."""
        if self.method == "lp":
            return self.pieces[int(self.piece_at(*staff))].label
        self._check_point(staff)
        p = min(self.grid, key=lambda g: sum((u - v) ** 2 for u, v in zip(g.point, staff)))
        return p.label

    def _check_point(self, staff) -> None:
        if len(staff) != len(self.axes):
            raise TypeError(f"the diagram has {len(self.axes)} axis pool(s), got {len(staff)} "
                            "staff values")

    def _envelope(self, *staff):
        staff = np.broadcast_arrays(*(np.asarray(x, dtype=float) for x in staff))
        values = np.stack([np.broadcast_to(p.value(*staff), staff[0].shape)
                           for p in self.pieces])
        idx = np.argmin(values, axis=0)
        out = np.take_along_axis(values, idx[None, ...], axis=0)[0]
        if out.ndim == 0:
            return float(out), int(idx)
        return out, idx

    def _interpolate(self, *staff):
        from scipy.interpolate import RegularGridInterpolator

        # the grid is a full rectangle listed in axis-major order (see _grid_diagram)
        values = [np.array(sorted({g.point[i] for g in self.grid}), dtype=float)
                  for i in range(len(self.axes))]
        if any(v.size < 2 for v in values):
            raise ValueError("the grid needs two values on each axis to interpolate")
        table = np.array([g.rate for g in self.grid]).reshape([v.size for v in values])
        f = RegularGridInterpolator(tuple(values), table, bounds_error=True)
        staff = np.broadcast_arrays(*(np.asarray(x, dtype=float) for x in staff))
        out = f(np.stack([x.ravel() for x in staff], axis=-1)).reshape(staff[0].shape)
        return float(out) if out.ndim == 0 else out

    def box(self) -> tuple[float, ...]:
        """(low, high) of each axis in turn: (a low, a high, b low, b high) with two axes."""
        return tuple(x for p in self.axes for x in self.ranges[p])

    # --- output ----------------------------------------------------------------------------------

    def to_json(self) -> dict:
        """``{"of", "axes", "pieces": [{"const", "coef": {pool: x}, "limiting": [pools], ...}],
        "method", "ranges", "notes", ...}``: the rate at the axis pools' staff, other pools as
        in the scenario, is the minimum over pieces of const + Σ coef × staff, for every
        non-negative staff (method "lp"). "limiting" is empty for the inflow-limited piece (its
        "label" is "inflow"). With method "counters-grid" "pieces" is empty and "grid" lists the
        points ("a": staff of the first axis, "b" of the second when there are two)."""
        grid = [{"a": g.a, **({} if g.b is None else {"b": g.b}), "rate": g.rate,
                 "limiting": list(g.limiting), "label": g.label} for g in self.grid]
        return {
            "scenario": self.scenario_name,
            "time_unit": self.time_unit,
            "of": list(self.of),
            "of_label": self.of_label,
            "axes": list(self.axes),
            "pieces": [p.to_json() for p in self.pieces],
            "method": self.method,
            "ranges": {k: list(v) for k, v in self.ranges.items()},
            "staff": dict(self.staff),
            "inflow_rate": self.inflow_rate,
            "exact": self.exact,
            "lp_solves": self.lp_solves,
            "max_mismatch": (self.max_mismatch if math.isfinite(self.max_mismatch) else None),
            "grid": grid,
            "notes": list(self.notes),
        }

    def to_frame(self) -> pd.DataFrame:
        """Tidy table, one row per figure: columns kind, name, metric, value, label.

        kind "diagram" (name: the scenario): ``inflow_rate`` (per time unit), ``lp_solves``,
        ``max_mismatch``, ``exact`` (1 or 0); kind "pool" (name: an axis pool): ``range_low``,
        ``range_high`` and ``staff`` (the scenario's; agents). Method "lp": kind "piece" (name:
        its index "0", "1", ...): ``const`` (per time unit), ``coef_<pool>`` for each axis pool
        (per agent) and ``witness_<pool>`` (a staff point inside its cell). Method
        "counters-grid": kind "point" (name like "front_desk=3, supervisors=2"): ``rate`` and
        ``staff_<pool>`` for each axis pool. ``label``: the limiting pools of the piece or point
        ("inflow" when none), empty on the other rows. One row per piece or point instead:
        :meth:`wide_frame`."""
        import pandas as pd

        rows = [("diagram", self.scenario_name, "inflow_rate", float(self.inflow_rate), ""),
                ("diagram", self.scenario_name, "lp_solves", float(self.lp_solves), ""),
                ("diagram", self.scenario_name, "max_mismatch", float(self.max_mismatch), ""),
                ("diagram", self.scenario_name, "exact", float(self.exact), "")]
        for p in self.axes:
            low, high = self.ranges[p]
            rows += [("pool", p, "range_low", float(low), ""),
                     ("pool", p, "range_high", float(high), ""),
                     ("pool", p, "staff", float(self.staff[p]), "")]
        for i, piece in enumerate(self.pieces):
            rows.append(("piece", str(i), "const", piece.const, piece.label))
            rows += [("piece", str(i), f"coef_{p}", piece.coef[p], piece.label) for p in self.axes]
            rows += [("piece", str(i), f"witness_{p}", float(w), piece.label)
                     for p, w in zip(self.axes, piece.witness)]
        for g in self.grid:
            name = ", ".join(f"{p}={x}" for p, x in zip(self.axes, g.point))
            rows.append(("point", name, "rate", g.rate, g.label))
            rows += [("point", name, f"staff_{p}", float(x), g.label)
                     for p, x in zip(self.axes, g.point)]
        return pd.DataFrame(rows, columns=["kind", "name", "metric", "value", "label"])

    def wide_frame(self) -> pd.DataFrame:
        """LP method: one row per piece (piece, const, coef_<axis> per axis, label). Counters
        grid: one row per point (the axis pools as column names, rate, label)."""
        import pandas as pd

        if self.method == "lp":
            rows = [(i, p.const, *(p.coef[x] for x in self.axes), p.label)
                    for i, p in enumerate(self.pieces)]
            return pd.DataFrame(rows, columns=["piece", "const",
                                               *(f"coef_{x}" for x in self.axes), "label"])
        rows = [(*g.point, g.rate, g.label) for g in self.grid]
        return pd.DataFrame(rows, columns=[*self.axes, "rate", "label"])


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
        return tuple(scenario.ending_transitions or scenario.transitions)
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
    lp_holds = (not scenario.has_priorities and not scenario.has_time_variation
                and not places_without_exit(scenario))
    if lp_holds:
        return _lp_diagram(scenario, axes, of, work, max_solves, common)
    from .phase_grid import grid_diagram  # (it builds on this module's result types)

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
        self.weights = {q: (1.0 if q in of else 0.0) for q in scenario.transitions}
        self.weights |= {s: 0.0 for s in scenario.sources}
        self.base = {p: float(pool.staff) for p, pool in scenario.pools.items()}
        self.scale = scale
        self.cache: dict = {}
        self.solves = 0

    def value_at(self, staff: Mapping[str, float]) -> tuple[float, dict[str, float]]:
        sol = throughput_lp(self.scenario, weights=self.weights, staff=staff)
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
            if more - base > LP_RISE * max(1.0, abs(base)):
                limiting.append(p)
        out.append(Piece(const=float(piece[0]) + 0.0,
                         coef={x: float(c) for x, c in zip(axes, piece[1:-1])},
                         coef_all=dict(duals), limiting=tuple(limiting), witness=witness))
    out.sort(key=lambda p: (len(p.limiting), p.label, p.const))
    return out


# --- the counters grid ---------------------------------------------------------------------------
