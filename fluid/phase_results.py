"""A fluid phase diagram and its parts: the result of :func:`fluid.phases.phase_diagram`.

A :class:`PhaseDiagram` holds either exact affine :class:`Piece` objects (the throughput LP
method of :mod:`fluid.phases`) or a grid of :class:`GridPoint` objects (the counter equations at
integer staff, :mod:`fluid.phase_grid`); it evaluates the rate and the limiting pools at any
staff and gives JSON and tables. Staff in agents; rates per the scenario's time unit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:  # pandas is imported by the table methods only (importing it is slow)
    import pandas as pd

__all__ = ["INFLOW", "GridPoint", "PhaseDiagram", "Piece"]

#: The label of a piece or point where no pool limits.
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
    envelope over the LP at the test points (≤ :data:`fluid.phases.MATCH_TOLERANCE` when
    ``exact``)."""

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
