"""Exact fluid phase diagrams over the staff of two pools (design.md §4.1).

Without priorities and with constant rates the long-run fluid rate of a set of transitions (by
default those that end jobs) is the optimum ``V(M)`` of the throughput LP, whose staff ``M`` only
appears in the right-hand sides; so ``V`` is concave and piecewise affine in the staff vector, and
every optimal dual solution at one staff point ``M⁰`` gives an affine function that bounds ``V``
from above everywhere (LP duality):

    V(M) ≤ V(M⁰) + Σ_p y_p (M_p − M⁰_p),    y_p = d V / d M_p (the marking duals).

With the other pools at the scenario's staff each dual solution is one *piece*
``const + coef_a a + coef_b b``. Pieces are collected by a cutting-plane loop: the lower envelope
``E`` of the pieces found so far is an upper bound of ``V``; wherever ``E`` exceeds the LP value
at a test point, the LP's own piece there is added. The test points are the vertices of the
envelope over the whole quadrant of non-negative staff (points where three pieces meet, or two on
an axis), plus a coarse grid. The loop stops when ``E = V`` at every vertex, which proves
``E = V`` on the whole quadrant: on each cell of ``E`` (where one piece is smallest) ``V`` is
concave and equal to the affine ``E`` at the cell's vertices, hence ``V ≥ E`` on their convex
hull; along the cell's unbounded directions (non-negative, since the cells live in the quadrant)
``E`` is flat (the envelope contains a piece without axis coefficients, found at a staff beyond
every pool's offered work) and ``V`` does not decrease (more staff never lowers the LP optimum).

A piece is labelled by its *limiting pools*: the axis pools with a positive coefficient, and the
other pools whose one more agent raises the rate at a point inside the piece's cell (a one-agent
difference, as :func:`fluid.analysis.throughput` finds bottlenecks); "inflow" when there are none.
Pieces whose cell has no interior in the quadrant are dropped (they never decide the minimum).

With priorities, arrival profiles or traces, or schedules, the LP does not apply: the counter
equations are integrated at the integer staff points of a grid (:func:`fluid.counters.
integrate_counters`), each point labelled by one-agent differences; no exact pieces are given.

Staff in agents (real numbers for the LP); rates per the scenario's time unit.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass
from typing import Iterable, Mapping, Sequence

import numpy as np
import pandas as pd
from scipy.optimize import linprog

from .analysis import offered_rates
from .counters import integrate_counters
from .lp import places_without_exit, throughput_lp
from .scenario import Scenario
from .staffing import offered_work

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
    """One affine piece: rate = ``const + coef[a]·a + coef[b]·b`` (per time unit) with the other
    pools at the scenario's staff (their terms are inside ``const``). ``coef_all``: the LP dual
    of every pool's staff (d rate / d staff, per agent) at the point the piece came from;
    ``limiting``: limiting pools in the piece's cell (empty: inflow-limited); ``witness``: a
    staff point (a, b) inside the cell."""

    const: float
    coef: dict[str, float]
    coef_all: dict[str, float]
    limiting: tuple[str, ...]
    witness: tuple[float, float]

    @property
    def label(self) -> str:
        return "+".join(self.limiting) if self.limiting else INFLOW

    def value(self, a, b):
        ca, cb = self.coef.values()
        return self.const + ca * np.asarray(a, dtype=float) + cb * np.asarray(b, dtype=float)

    def to_json(self) -> dict:
        return {"const": self.const, "coef": dict(self.coef), "limiting": list(self.limiting),
                "label": self.label, "coef_all": dict(self.coef_all),
                "witness": list(self.witness)}


@dataclass(frozen=True)
class GridPoint:
    """Counter-equation rate (per time unit) at integer staff (a, b) and its limiting pools."""

    a: int
    b: int
    rate: float
    limiting: tuple[str, ...]

    @property
    def label(self) -> str:
        return "+".join(self.limiting) if self.limiting else INFLOW


@dataclass(frozen=True)
class PhaseDiagram:
    """Fluid rate of ``of`` (transitions summed) over the staff of the two ``axes`` pools.

    ``method``: "lp" (exact ``pieces``, valid for all non-negative staff) or "counters-grid"
    (``grid`` of integer points, no pieces). ``ranges``: pool -> (low, high) staff drawn;
    ``staff``: the scenario's staff per pool (mean staff with a schedule); ``inflow_rate``: the
    rate of ``of`` when no pool limits; ``of_label``: what ``of`` is, in words; ``lp_solves``:
    LPs (or counter integrations) used;
    ``max_mismatch``: largest relative excess of the envelope over the LP at the test points
    (≤ :data:`MATCH_TOLERANCE` when ``exact``)."""

    scenario_name: str
    time_unit: str
    of: tuple[str, ...]
    axes: tuple[str, str]
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

    def rate_at(self, a, b):
        """Fluid rate at staff (a, b) (scalars or arrays). Exact for the LP method; for the
        counters grid, bilinear interpolation between grid points (exact on them)."""
        if self.method == "lp":
            return self._envelope(a, b)[0]
        return self._interpolate(a, b)

    def piece_at(self, a, b):
        """Index of the piece that decides the rate at (a, b) (LP method only)."""
        if self.method != "lp":
            raise ValueError("a counters-grid diagram has no pieces")
        return self._envelope(a, b)[1]

    def label_at(self, a: float, b: float) -> str:
        """Limiting pools at (a, b) joined by "+", or "inflow"."""
        if self.method == "lp":
            return self.pieces[int(self.piece_at(a, b))].label
        p = min(self.grid, key=lambda g: (g.a - a) ** 2 + (g.b - b) ** 2)
        return p.label

    def _envelope(self, a, b):
        a, b = np.broadcast_arrays(np.asarray(a, dtype=float), np.asarray(b, dtype=float))
        values = np.stack([p.value(a, b) for p in self.pieces])
        idx = np.argmin(values, axis=0)
        out = np.take_along_axis(values, idx[None, ...], axis=0)[0]
        if out.ndim == 0:
            return float(out), int(idx)
        return out, idx

    def _interpolate(self, a, b):
        from scipy.interpolate import RegularGridInterpolator

        # the grid is a full rectangle listed a-major (see _grid_diagram)
        a_vals = np.array(sorted({g.a for g in self.grid}), dtype=float)
        b_vals = np.array(sorted({g.b for g in self.grid}), dtype=float)
        if a_vals.size < 2 or b_vals.size < 2:
            raise ValueError("the grid needs two values on each axis to interpolate")
        table = np.array([g.rate for g in self.grid]).reshape(a_vals.size, b_vals.size)
        f = RegularGridInterpolator((a_vals, b_vals), table, bounds_error=True)
        a, b = np.broadcast_arrays(np.asarray(a, dtype=float), np.asarray(b, dtype=float))
        out = f(np.stack([a.ravel(), b.ravel()], axis=-1)).reshape(a.shape)
        return float(out) if out.ndim == 0 else out

    def box(self) -> tuple[float, float, float, float]:
        """(a low, a high, b low, b high): the drawn ranges of the two axes."""
        (a0, a1), (b0, b1) = (self.ranges[x] for x in self.axes)
        return a0, a1, b0, b1

    # --- output ----------------------------------------------------------------------------------

    def to_json(self) -> dict:
        """``{"of", "axes", "pieces": [{"const", "coef": {pool: x}, "limiting": [pools], ...}],
        "method", "ranges", "notes", ...}``: the rate at staff (a, b), other pools as in the
        scenario, is the minimum over pieces of const + Σ coef × staff, for every non-negative
        staff (method "lp"). "limiting" is empty for the inflow-limited piece (its "label" is
        "inflow"). With method "counters-grid" "pieces" is empty and "grid" lists the points."""
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
            "grid": [{"a": g.a, "b": g.b, "rate": g.rate, "limiting": list(g.limiting),
                      "label": g.label} for g in self.grid],
            "notes": list(self.notes),
        }

    def to_frame(self) -> pd.DataFrame:
        """LP method: one row per piece (piece, const, coef_<a>, coef_<b>, label). Counters grid:
        one row per point (a, b, rate, label), with the axis pools as column names."""
        a, b = self.axes
        if self.method == "lp":
            rows = [(i, p.const, p.coef[a], p.coef[b], p.label) for i, p in enumerate(self.pieces)]
            return pd.DataFrame(rows, columns=["piece", "const", f"coef_{a}", f"coef_{b}",
                                               "label"])
        rows = [(g.a, g.b, g.rate, g.label) for g in self.grid]
        return pd.DataFrame(rows, columns=[a, b, "rate", "label"])


# --- inputs --------------------------------------------------------------------------------------


def _check_axes(scenario: Scenario, axes: Sequence[str]) -> tuple[str, str]:
    axes = tuple(axes)
    if len(axes) != 2 or axes[0] == axes[1]:
        raise ValueError(f"axes must be two different pools (got {list(axes)})")
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
    axes: Sequence[str],
    *,
    of: str | Iterable[str] | None = None,
    ranges: Mapping[str, tuple[float, float]] | None = None,
    max_solves: int = 2000,
    max_grid: int = 300,
) -> PhaseDiagram:
    """Fluid phase diagram of ``scenario`` over the staff of the two pools ``axes``.

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
    return _grid_diagram(scenario, axes, of, box, max_grid, common)


# --- the LP method -------------------------------------------------------------------------------


class _Oracle:
    """LP value and dual piece at staff points (cached), with the other pools fixed."""

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

    def at(self, a: float, b: float):
        key = (round(a, 12), round(b, 12))
        if key not in self.cache:
            staff = self.base | {self.axes[0]: a, self.axes[1]: b}
            value, duals = self.value_at(staff)
            ca, cb = duals[self.axes[0]], duals[self.axes[1]]
            self.cache[key] = (value, (value - ca * a - cb * b, ca, cb, duals))
        return self.cache[key]


def _same(p, q, scale: float) -> bool:
    return (abs(p[0] - q[0]) <= MATCH_TOLERANCE * scale
            and abs(p[1] - q[1]) <= MATCH_TOLERANCE * max(1.0, abs(p[1]))
            and abs(p[2] - q[2]) <= MATCH_TOLERANCE * max(1.0, abs(p[2])))


def _envelope(pieces: list, pts: np.ndarray) -> np.ndarray:
    arr = np.array([p[:3] for p in pieces])
    return (arr[:, :1] + arr[:, 1:2] * pts[None, :, 0] + arr[:, 2:3] * pts[None, :, 1]).min(axis=0)


def _vertices(pieces: list, scale: float) -> np.ndarray:
    """Vertices of the lower envelope of ``pieces`` over the quadrant a, b ≥ 0: the origin, the
    points of an axis where two pieces tie, and the points where three pieces tie, kept when the
    pieces that tie there are the smallest."""
    arr = np.array([p[:3] for p in pieces])
    cands = [(0.0, 0.0)]
    n = len(arr)
    for i, j in itertools.combinations(range(n), 2):
        dc, da, db = arr[i] - arr[j]
        if abs(db) > 1e-15:
            cands.append((0.0, -dc / db))  # on the axis a = 0
        if abs(da) > 1e-15:
            cands.append((-dc / da, 0.0))
    for i, j, k in itertools.combinations(range(n), 3):
        m = np.array([arr[i, 1:] - arr[j, 1:], arr[i, 1:] - arr[k, 1:]])
        det = np.linalg.det(m)
        if abs(det) < 1e-14:
            continue
        rhs = -np.array([arr[i, 0] - arr[j, 0], arr[i, 0] - arr[k, 0]])
        cands.append(tuple(np.linalg.solve(m, rhs)))
    pts = np.array([c for c in cands if c[0] >= -1e-9 and c[1] >= -1e-9 and np.isfinite(c).all()])
    pts = np.clip(pts, 0.0, None)
    values = arr[:, :1] + arr[:, 1:2] * pts[None, :, 0] + arr[:, 2:3] * pts[None, :, 1]
    low = values.min(axis=0)
    ties = (values <= low[None, :] + 1e-9 * scale).sum(axis=0)
    on_axis = (pts[:, 0] == 0) | (pts[:, 1] == 0)
    keep = (ties >= 3) | (on_axis & (ties >= 2)) | ((pts[:, 0] == 0) & (pts[:, 1] == 0))
    return np.unique(np.round(pts[keep], 12), axis=0)


def _lp_diagram(scenario, axes, of, work, max_solves, common) -> PhaseDiagram:
    rates, _ = offered_rates(scenario)
    inflow = float(sum(rates[q] for q in of))
    scale = max(inflow, 1e-12)
    oracle = _Oracle(scenario, axes, of, scale)
    tol = MATCH_TOLERANCE * scale
    no_pool = {p: 0.0 for p in scenario.pools}
    pieces: list = [(inflow, 0.0, 0.0, no_pool)]

    def add(piece) -> bool:
        if any(_same(piece, q, scale) for q in pieces):
            return False
        pieces.append(piece)
        return True

    notes = []
    # a staff beyond every axis pool's offered work: its piece has no axis coefficient (the
    # plateau that makes the envelope flat along every unbounded direction)
    a0, a1, b0, b1 = (x for p in axes for x in common["ranges"][p])
    far = [max(2 * w + 1 if math.isfinite(w) else 0.0, 2 * hi + 1)
           for w, hi in ((work[axes[0]], a1), (work[axes[1]], b1))]
    flat = False
    for _ in range(60):
        _, piece = oracle.at(*far)
        add(piece)
        if piece[1] == 0 and piece[2] == 0:
            flat = True
            break
        far = [2 * x for x in far]
    if not flat:
        notes.append("no staff level was found at which neither axis pool limits: the pieces "
                     "are exact within the drawn ranges only")
    seeds = [(float(common["staff"][axes[0]]), float(common["staff"][axes[1]]))]
    seeds += [(a, b) for a in np.linspace(a0, a1, 5) for b in np.linspace(b0, b1, 5)]
    checked: dict = {}
    converged = False
    while oracle.solves < max_solves:
        pts = np.vstack([_vertices(pieces, scale), np.array(seeds)])
        todo = [tuple(x) for x in pts if (round(x[0], 12), round(x[1], 12)) not in checked]
        if not todo:
            converged = True
            break
        envelope = _envelope(pieces, np.array(todo))
        grew = False
        for (a, b), e in zip(todo, envelope):
            value, piece = oracle.at(a, b)
            checked[(round(a, 12), round(b, 12))] = value
            if e - value > tol:
                # (when the LP's piece is already known the excess is rounding; it is reported
                # in max_mismatch below)
                grew |= add(piece)
        if not grew and all(
            (round(a, 12), round(b, 12)) in checked for a, b in _vertices(pieces, scale)
        ):
            converged = True
            break
    if not converged:
        notes.append(f"the cutting-plane loop stopped after {oracle.solves} LPs without "
                     "matching the LP at every vertex")
    # the envelope must equal the LP at every test point (above it: a piece found later was
    # missing; below it: a piece that is not an upper bound, i.e. an inexact dual)
    where = np.array(list(checked))
    values = np.array(list(checked.values()))
    worst = float(np.max(np.abs(_envelope(pieces, where) - values)) / scale)
    final = _labelled(oracle, axes, _needed(pieces, scale), scale)
    exact = bool(converged and flat and worst <= MATCH_TOLERANCE)
    if exact:
        notes.append("exact: the envelope of the pieces equals the throughput LP at every vertex, "
                     "hence for every non-negative staff of the two axis pools (other pools at "
                     "the scenario's staff)")
    else:
        notes.append(f"not proven exact (largest relative mismatch with the LP at a test point: "
                     f"{worst:.3g})")
    if scenario.has_patience:
        notes.append("patience is ignored by the fluid model")
    return PhaseDiagram(method="lp", pieces=tuple(final), grid=(), inflow_rate=inflow,
                        lp_solves=oracle.solves, max_mismatch=worst, exact=exact,
                        notes=tuple(notes), **common)


def _needed(pieces: list, scale: float) -> list[tuple]:
    """Pieces whose cell has an interior in the quadrant, each with the centre of the largest
    disc inside its cell (Chebyshev centre, by an LP) as a witness point. The search stays in a
    square twice as wide as the envelope's vertices reach: every cell has a vertex, and an
    interior near it, there."""
    verts = _vertices(pieces, scale)
    reach = 2 * float(verts.max()) + 1 if verts.size else 1.0
    arr = np.array([p[:3] for p in pieces])
    out = []
    for i in range(len(pieces)):
        others = np.delete(arr, i, axis=0)
        # variables (a, b, r): the disc of radius r about (a, b) lies where piece i is the
        # smallest and inside [0, reach]²
        k = arr[i, 1:] - others[:, 1:]
        rows = [np.column_stack([k, np.hypot(k[:, 0], k[:, 1])])]
        rhs = [others[:, 0] - arr[i, 0]]
        rows.append(np.array([[-1, 0, 1], [0, -1, 1], [1, 0, 1], [0, 1, 1]], dtype=float))
        rhs.append(np.array([0.0, 0.0, reach, reach]))
        res = linprog([0, 0, -1], A_ub=np.vstack(rows), b_ub=np.concatenate(rhs),
                      bounds=[(None, None), (None, None), (0, None)], method="highs")
        if res.status == 0 and -res.fun > 1e-9 * reach:
            out.append((pieces[i], (float(res.x[0]), float(res.x[1]))))
    return out


def _labelled(oracle: _Oracle, axes, found: list, scale: float) -> list[Piece]:
    pools = list(oracle.scenario.pools)
    out = []
    for (const, ca, cb, duals), (wa, wb) in found:
        limiting = []
        for p in pools:
            if duals[p] <= 0:
                continue
            if p in axes:
                limiting.append(p)
                continue
            # a dual of a pool off the axes may be positive at a degenerate point: confirm that
            # one more agent raises the rate at the witness
            staff = oracle.base | {axes[0]: wa, axes[1]: wb}
            base, _ = oracle.value_at(staff)
            more, _ = oracle.value_at(staff | {p: staff[p] + 1})
            if more - base > LP_RISE * max(1.0, abs(base)):
                limiting.append(p)
        out.append(Piece(const=float(const) + 0.0, coef={axes[0]: float(ca), axes[1]: float(cb)},
                         coef_all=dict(duals), limiting=tuple(limiting),
                         witness=(float(wa), float(wb))))
    out.sort(key=lambda p: (len(p.limiting), p.label, p.const))
    return out


# --- the counters grid ---------------------------------------------------------------------------


def _integer_axis(lo: float, hi: float, count: int) -> list[int]:
    start, stop = math.ceil(lo), math.floor(hi)
    if stop < start:
        raise ValueError(f"the range {lo:g}:{hi:g} holds no whole staff level")
    step = max(1, math.ceil((stop - start) / max(count - 1, 1)))
    vals = list(range(start, stop + 1, step))
    if vals[-1] != stop:
        vals.append(stop)
    return vals


def _grid_diagram(scenario, axes, of, box, max_grid, common) -> PhaseDiagram:
    side = max(2, int(math.isqrt(max_grid)))
    a_vals = _integer_axis(*box[axes[0]], side)
    b_vals = _integer_axis(*box[axes[1]], side)
    constant = not scenario.has_time_variation
    horizon = None if constant else scenario.run.horizon
    dt = integrate_counters(scenario, horizon=horizon).dt
    window = None
    if not constant:
        end = scenario.run.horizon
        window = (scenario.run.warmup if scenario.run.warmup < end else 0.0, end)
    runs = 0

    def solve(staff, extra=None, grid=None):
        nonlocal runs
        runs += 1
        if grid is None:
            return integrate_counters(scenario, dt=dt, horizon=horizon, staff=staff,
                                      extra_staff=extra)
        return integrate_counters(scenario, dt=grid[0], horizon=grid[1], staff=staff,
                                  extra_staff=extra)

    def measures(sol):
        """(rate of ``of`` per time unit, level used to detect a rise)."""
        if window is None:
            r = sum(sol.rates[q] for q in of)
            return r, r
        r = sum(sol.rates_between(*window)[q] for q in of)
        i, j = (int(round(t / sol.dt)) for t in window)
        return r, float(sum(sol.counters[q][i: j + 1].mean() for q in of))

    rates, _ = offered_rates(scenario)
    inflow = float(sum(rates[q] for q in of))

    # every grid point first, so that a neighbour one agent up can stand in for "one more agent"
    # in an axis pool (same time grid: the difference is then exact, as the counters' own)
    base = {}
    for a in a_vals:
        for b in b_vals:
            sol = solve({axes[0]: a, axes[1]: b})
            base[(a, b)] = ((sol.dt, sol.horizon), *measures(sol))

    def rises(a, b, pools) -> bool:
        grid, _, level = base[(a, b)]
        up = None
        if len(pools) == 1 and pools[0] in axes:
            up = (a + 1, b) if pools[0] == axes[0] else (a, b + 1)
        if up in base and base[up][0] == grid:
            more = base[up][2]
        else:
            sol = solve({axes[0]: a, axes[1]: b}, extra={p: 1 for p in pools}, grid=grid)
            more = measures(sol)[1]
        return more - level > COUNTER_RISE * max(1.0, abs(level))

    points = []
    for a in a_vals:
        for b in b_vals:
            rate = base[(a, b)][1]
            limiting = [p for p in scenario.pools if rises(a, b, (p,))]
            if not limiting and rate < inflow * (1 - COUNTER_RISE):
                # no single agent helps, yet the pools hold the rate below the inflow (e.g. front
                # agents stuck waiting for a supervisor who is not there): pools that limit
                # together, found by adding one agent to two pools at once
                for pair in itertools.combinations(scenario.pools, 2):
                    if rises(a, b, pair):
                        limiting += [p for p in pair if p not in limiting]
                limiting = [p for p in scenario.pools if p in limiting]
            points.append(GridPoint(a=a, b=b, rate=float(rate), limiting=tuple(limiting)))
    reasons = []
    if scenario.has_priorities:
        reasons.append("priorities")
    if any(s.rate is None for s in scenario.sources.values()):
        reasons.append("arrival profiles or traces")
    if any(p.schedule is not None for p in scenario.pools.values()):
        reasons.append("schedules")
    if places_without_exit(scenario):
        reasons.append("jobs that can never end")
    notes = [f"the throughput LP does not apply ({', '.join(reasons)}): rates come from the "
             f"counter equations integrated at {len(points)} integer staff points (time step "
             f"{dt:g} {scenario.time_unit}); no exact pieces; limiting pools by one-agent "
             "differences (two pools at once where no single agent helps)"]
    if window is not None:
        notes.append(f"rates are means over the window [{window[0]:g}, {window[1]:g}] "
                     f"{scenario.time_unit}")
    for p in axes:
        if scenario.pools[p].schedule is not None:
            notes.append(f"the schedule of {p} is replaced by the constant staff of each point")
    return PhaseDiagram(method="counters-grid", pieces=(), grid=tuple(points),
                        inflow_rate=inflow, lp_solves=runs,
                        max_mismatch=math.nan, exact=False, notes=tuple(notes), **common)
