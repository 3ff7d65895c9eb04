"""Phase diagrams drawn, and the simulation laid over them.

:func:`phase_figure` draws a :class:`fluid.phases.PhaseDiagram`: the cell of every exact piece
filled with the colour of its limiting pools and named in place, the boundaries between cells,
dotted lines of equal fluid rate, and the scenario's own staff. For a diagram from the counters
grid (nets with priorities, profiles or schedules) each grid point's square is coloured instead.
:func:`phase_regions` and :func:`phase_boundaries` give the exact cells (convex polygons) and
their edges within the drawn ranges. :func:`phase_overlay` simulates the integer staff points of the diagram (the same seed at every
point, so the points differ by their staff and not by their random numbers: common random
numbers) and returns a tidy table of the gaps, which :func:`phase_figure` can draw on top.

Figures are :class:`matplotlib.figure.Figure` objects built without pyplot, in the Okabe–Ito
colours of :mod:`compare.figures`; every colour is doubled by a text label or a marker shape.
Rates are per the scenario's time unit; staff in agents.
"""

from __future__ import annotations

import itertools
import math
import textwrap

import matplotlib as mpl
import numpy as np
import pandas as pd
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch, Polygon, Rectangle

from fluid.phases import INFLOW, Piece, PhaseDiagram

from .figures import _STYLE, OPTIMISTIC, PESSIMISTIC, REFERENCE, SERIES, SIMULATED, TARGET

__all__ = ["phase_figure", "phase_regions", "phase_boundaries",
           "phase_intervals"]

# region fills: grey for the inflow, then the Okabe–Ito colours (yellow last: pale on white)
_REGION_COLOURS = ("#56B4E9", "#E69F00", "#009E73", "#CC79A7", "#0072B2", "#D55E00", "#F0E442")
_INFLOW_COLOUR = "#BBBBBB"


def _colours(labels: list[str]) -> dict[str, str]:
    out, k = {}, 0
    for lab in labels:
        if lab in out:
            continue
        if lab == INFLOW:
            out[lab] = _INFLOW_COLOUR
        else:
            out[lab] = _REGION_COLOURS[k % len(_REGION_COLOURS)]
            k += 1
    return out



# --- exact regions and boundaries (LP method) ----------------------------------------------------


def phase_regions(diagram: PhaseDiagram) -> list[tuple[int, np.ndarray]]:
    """(piece index, polygon vertices as an (n, 2) array) of every piece's cell within the
    diagram's drawn ranges (cells with no area there left out). LP method only."""
    if diagram.method != "lp":
        raise ValueError("a counters-grid diagram has no exact regions")
    a0, a1, b0, b1 = diagram.box()
    square = [(a0, b0), (a1, b0), (a1, b1), (a0, b1)]
    out = []
    for i, p in enumerate(diagram.pieces):
        poly = square
        for j, q in enumerate(diagram.pieces):
            if j != i:
                poly = _clip(poly, _difference(p, q))
            if len(poly) < 3:
                break
        if len(poly) >= 3 and _polygon_area(np.array(poly)) > 1e-12 * (a1 - a0) * (b1 - b0):
            out.append((i, np.array(poly)))
    return out


def phase_boundaries(diagram: PhaseDiagram) -> list[tuple[int, int, np.ndarray]]:
    """(piece i, piece j, 2×2 array of end points) of every boundary segment between two cells
    within the diagram's drawn ranges. LP method only."""
    cells = dict(phase_regions(diagram))
    a0, a1, b0, b1 = diagram.box()
    tol = 1e-9 * max(a1 - a0, b1 - b0)
    out = []
    for i, j in itertools.combinations(sorted(cells), 2):
        seg = _shared_edge(cells[i], cells[j], tol)
        if seg is not None:
            out.append((i, j, seg))
    return out


def _difference(p: Piece, q: Piece) -> tuple[float, float, float]:
    """(c, ka, kb) with p ≤ q ⇔ c + ka·a + kb·b ≤ 0."""
    (pa, pb), (qa, qb) = p.coef.values(), q.coef.values()
    return p.const - q.const, pa - qa, pb - qb


def _clip(poly, half) -> list:
    """Sutherland–Hodgman: the part of the convex polygon ``poly`` where c + ka·x + kb·y ≤ 0."""
    c, ka, kb = half
    scale = abs(c) + abs(ka) + abs(kb) + 1e-300
    tol = 1e-12 * scale

    def side(pt):
        return c + ka * pt[0] + kb * pt[1]

    out = []
    n = len(poly)
    for k in range(n):
        cur, nxt = poly[k], poly[(k + 1) % n]
        sc, sn = side(cur), side(nxt)
        if sc <= tol:
            out.append(cur)
        if (sc < -tol and sn > tol) or (sc > tol and sn < -tol):
            t = sc / (sc - sn)
            out.append((cur[0] + t * (nxt[0] - cur[0]), cur[1] + t * (nxt[1] - cur[1])))
    return out


def _shared_edge(p: np.ndarray, q: np.ndarray, tol: float):
    """The segment two convex polygons share (their boundaries meet along it), or None."""
    pts = [v for v in p if _on_boundary(v, q, tol)] + [v for v in q if _on_boundary(v, p, tol)]
    if len(pts) < 2:
        return None
    pts = np.array(pts)
    d = pts - pts[0]
    k = int(np.argmax(np.hypot(d[:, 0], d[:, 1])))
    far = pts[k]
    m = int(np.argmax(np.hypot(*(pts - far).T)))
    seg = np.array([far, pts[m]])
    if np.hypot(*(seg[1] - seg[0])) <= tol:
        return None
    return seg


def _on_boundary(v, poly: np.ndarray, tol: float) -> bool:
    n = len(poly)
    for k in range(n):
        a, b = poly[k], poly[(k + 1) % n]
        ab = b - a
        length = float(np.hypot(*ab))
        if length == 0:
            continue
        t = float(np.dot(v - a, ab)) / length**2
        if -1e-9 <= t <= 1 + 1e-9 and float(np.hypot(*(a + t * ab - v))) <= tol:
            return True
    return False


def _polygon_area(poly: np.ndarray) -> float:
    x, y = poly[:, 0], poly[:, 1]
    return 0.5 * abs(float(np.dot(x, np.roll(y, -1)) - np.dot(y, np.roll(x, -1))))


# --- the figure ----------------------------------------------------------------------------------


def phase_figure(diagram: PhaseDiagram, *, overlay: pd.DataFrame | None = None,
                 title: str | None = None) -> Figure:
    """Draw ``diagram`` (regions by limiting pools, boundaries, lines of equal fluid rate, the
    scenario's staff as a black star). ``overlay``: the table of :func:`phase_overlay`; its
    points are drawn on top, sized by the relative throughput gap |simulated − fluid| / |fluid|
    and labelled with its sign (simulated minus fluid, as every gap), as vermillion triangles where the fluid is optimistic (above the simulated
    interval of the rate) and blue circles elsewhere. When the overlay has
    service levels a second panel shows, per point, whether every target (service levels and
    abandonment) is met with confidence (green square) or not (vermillion cross), with the worst
    simulated service level written beside it.

    With one axis the figure is the rate against that pool's staff instead: see
    :func:`_profile_figure`."""
    if len(diagram.axes) == 1:
        return _profile_figure(diagram, overlay, title)
    a_name, b_name = diagram.axes
    with_sl = overlay is not None and any(c.endswith("_sl_low") for c in overlay.columns)
    ncols = 2 if with_sl else 1
    with mpl.rc_context(_STYLE):
        fig = Figure(figsize=(6.6 * ncols, 5.4), layout="constrained")
        axes = fig.subplots(1, ncols, squeeze=False)[0]
        for ax in axes:
            handles = _draw_diagram(ax, diagram)
            ax.set_xlabel(f"{a_name} (agents)")
            ax.set_ylabel(f"{b_name} (agents)")
        if overlay is not None and len(overlay):
            handles += _draw_gaps(axes[0], overlay)
            if with_sl:
                handles += _draw_service_levels(axes[1], overlay)
                axes[1].set_title("simulated targets (worst service level written)"
                                  + _conventions(overlay), pad=10)
        axes[0].set_title(f"{diagram.of_label or 'rate'} per {diagram.time_unit}"
                          + (" with simulated gaps" if overlay is not None else ""), pad=10)
        fig.legend(handles=handles, loc="outside lower center", ncols=2 * ncols, frameon=False)
        method = ("exact fluid phase diagram (LP pieces)" if diagram.method == "lp"
                  else "fluid phase diagram from the counter equations at grid points")
        # long scenario names wrap rather than run off the figure
        fig.suptitle(textwrap.fill(title or f"{diagram.scenario_name}: {method}", width=70))
    return fig


def _conventions(overlay: pd.DataFrame) -> str:
    """What each simulated service level of ``overlay`` measures, one line per target place
    (each line starting with a newline; empty for an overlay without them)."""
    out = ""
    for c in overlay.columns:
        if c.endswith("_sl_convention") and len(overlay):
            text = textwrap.fill(f"{c[: -len('_sl_convention')]}: {overlay[c].iloc[0]}", 60)
            out += "\n" + text
    return out


def _draw_diagram(ax, diagram: PhaseDiagram) -> list:
    a0, a1, b0, b1 = diagram.box()
    ax.set_xlim(a0, a1)
    ax.set_ylim(b0, b1)
    ax.grid(False)
    if diagram.method == "lp":
        regions = phase_regions(diagram)
        labels = [diagram.pieces[i].label for i, _ in regions]
        colours = _colours(labels)
        area = (a1 - a0) * (b1 - b0)
        for i, poly in regions:
            label = diagram.pieces[i].label
            ax.add_patch(Polygon(poly, closed=True, facecolor=colours[label], alpha=0.45, lw=0,
                                 zorder=0))
            if _polygon_area(poly) > 0.02 * area:
                cx, cy = poly.mean(axis=0)
                ax.text(cx, cy, label.replace("+", "+\n"), ha="center", va="center", fontsize=8,
                        color="#222222", zorder=4,
                        bbox=dict(boxstyle="round,pad=0.2", fc="white", ec="none", alpha=0.7))
        for _, _, seg in phase_boundaries(diagram):
            ax.plot(seg[:, 0], seg[:, 1], color="black", lw=1.3, zorder=2)
        aa, bb = np.meshgrid(np.linspace(a0, a1, 201), np.linspace(b0, b1, 201))
        rate = diagram.rate_at(aa, bb)
    else:
        labels = [g.label for g in diagram.grid]
        colours = _colours(labels)
        a_vals = sorted({g.a for g in diagram.grid})
        b_vals = sorted({g.b for g in diagram.grid})
        da = (a_vals[1] - a_vals[0]) if len(a_vals) > 1 else 1.0
        db = (b_vals[1] - b_vals[0]) if len(b_vals) > 1 else 1.0
        for g in diagram.grid:
            ax.add_patch(Rectangle((g.a - da / 2, g.b - db / 2), da, db,
                                   facecolor=colours[g.label], alpha=0.45, lw=0, zorder=0))
        ax.set_xlim(a0 - da / 2, a1 + da / 2)
        ax.set_ylim(b0 - db / 2, b1 + db / 2)
        for label in colours:  # name each label once, at the middle of its points
            pts = np.array([(g.a, g.b) for g in diagram.grid if g.label == label], dtype=float)
            centre = pts[np.argmin(np.hypot(*(pts - pts.mean(axis=0)).T))]
            ax.text(*centre, label.replace("+", "+\n"), ha="center", va="center", fontsize=8,
                    zorder=4, bbox=dict(boxstyle="round,pad=0.2", fc="white", ec="none",
                                        alpha=0.7))
        aa, bb, rate = None, None, None
        if len(a_vals) > 1 and len(b_vals) > 1:
            aa, bb = np.meshgrid(a_vals, b_vals)
            rate = diagram.rate_at(aa, bb)
    handles = [Patch(facecolor=c, alpha=0.45, label=f"limited by {lab}" if lab != INFLOW
                     else "limited by the inflow") for lab, c in colours.items()]
    if rate is not None and np.ptp(rate) > 1e-9 * max(1.0, float(np.max(np.abs(rate)))):
        cs = ax.contour(aa, bb, rate, levels=6, colors=REFERENCE, linewidths=0.7,
                        linestyles=":", zorder=1)
        ax.clabel(cs, fmt="%.3g", fontsize=7)
        handles.append(Line2D([], [], color=REFERENCE, ls=":", lw=0.7,
                              label=f"equal fluid rate (per {diagram.time_unit})"))
    s = diagram.staff
    ax.scatter([s[diagram.axes[0]]], [s[diagram.axes[1]]], marker="*", s=160, color="black",
               zorder=5, clip_on=False)
    handles.append(Line2D([], [], marker="*", color="black", ls="", ms=11,
                          label="scenario's staff"))
    return handles


def _marker_size(gap):
    # area ∝ |gap|, capped at a 30 % gap so one extreme point does not hide the rest
    return 12 + 1600 * np.minimum(np.abs(np.nan_to_num(gap)), 0.3)


def _text_place(ax, a: float, b: float) -> dict:
    """Where a marker's text goes: up and right of it, but kept inside the axes at the top and
    right edges (keyword arguments for ``annotate``)."""
    (a0, a1), (b0, b1) = ax.get_xlim(), ax.get_ylim()
    right = a > a1 - 0.06 * (a1 - a0)
    top = b > b1 - 0.06 * (b1 - b0)
    return dict(xytext=(-6 if right else 5, -6 if top else 5), textcoords="offset points",
                ha="right" if right else "left", va="top" if top else "bottom")


def _draw_gaps(ax, overlay: pd.DataFrame) -> list:
    opt = overlay["optimistic"].to_numpy(bool)
    size = _marker_size(overlay["gap"].to_numpy(float))
    a, b = overlay["a"].to_numpy(float), overlay["b"].to_numpy(float)
    ax.scatter(a[~opt], b[~opt], s=size[~opt], marker="o", facecolor="none",
               edgecolor=SIMULATED, lw=1.3, zorder=6)
    ax.scatter(a[opt], b[opt], s=size[opt], marker="^", color=OPTIMISTIC, edgecolor="black",
               lw=0.5, zorder=6)
    if len(overlay) <= 36:
        for ai, bi, g in zip(a, b, overlay["gap"].to_numpy(float)):
            if math.isfinite(g):
                ax.annotate(f"{g:+.0%}", (ai, bi), fontsize=7, zorder=7,
                            **_text_place(ax, ai, bi))
    handles = [Line2D([], [], marker="^", color=OPTIMISTIC, mec="black", ls="", ms=8,
                      label="fluid optimistic (above the simulated interval)"),
               Line2D([], [], marker="o", mfc="none", mec=SIMULATED, ls="", ms=8,
                      label="fluid inside or below the simulated interval")]
    for g in (0.01, 0.05, 0.2):
        handles.append(Line2D([], [], marker="o", mfc="none", mec=REFERENCE, ls="",
                              ms=math.sqrt(_marker_size(g)), label=f"gap {g:.0%}"))
    return handles


def _draw_service_levels(ax, overlay: pd.DataFrame) -> list:
    places = [c[: -len("_sl_low")] for c in overlay.columns if c.endswith("_sl_low")]
    a, b = overlay["a"].to_numpy(float), overlay["b"].to_numpy(float)
    meets = overlay["targets_met"].to_numpy(bool)
    ax.scatter(a[meets], b[meets], marker="s", s=40, color=PESSIMISTIC, edgecolor="black",
               lw=0.5, zorder=6)
    ax.scatter(a[~meets], b[~meets], marker="X", s=45, color=OPTIMISTIC, zorder=6)
    worst = overlay[[f"{p}_sl_mean" for p in places]].min(axis=1).to_numpy(float)
    if len(overlay) <= 60:
        for ai, bi, w in zip(a, b, worst):
            if math.isfinite(w):
                ax.annotate(f"{w:.0%}", (ai, bi), fontsize=7, color=TARGET, zorder=7,
                            **_text_place(ax, ai, bi))
    return [Line2D([], [], marker="s", color=PESSIMISTIC, mec="black", ls="", ms=7,
                   label="every target met with confidence"),
            Line2D([], [], marker="X", color=OPTIMISTIC, ls="", ms=7,
                   label="some target missed (worst service level written)")]


# --- one axis: the rate against one pool's staff ------------------------------------------------


def phase_intervals(diagram: PhaseDiagram) -> list[tuple[int, float, float]]:
    """(piece index, low, high) of every piece's cell within the drawn range of a one-axis
    diagram, left to right (cells of no length there left out). LP method only."""
    if diagram.method != "lp" or len(diagram.axes) != 1:
        raise ValueError("exact intervals need a one-axis diagram from the LP")
    lo, hi = diagram.box()
    cuts = {lo, hi}
    for p, q in itertools.combinations(diagram.pieces, 2):
        (cp,), (cq,) = p.coef.values(), q.coef.values()
        if cp != cq and lo < (x := (q.const - p.const) / (cp - cq)) < hi:
            cuts.add(x)
    cuts = sorted(cuts)
    out: list[tuple[int, float, float]] = []
    for x0, x1 in zip(cuts, cuts[1:]):
        i = int(diagram.piece_at(0.5 * (x0 + x1)))
        if out and out[-1][0] == i:
            out[-1] = (i, out[-1][1], x1)
        elif x1 - x0 > 1e-12 * (hi - lo):
            out.append((i, x0, x1))
    return out


def _profile_figure(diagram: PhaseDiagram, overlay: pd.DataFrame | None,
                    title: str | None) -> Figure:
    """One axis: the fluid rate (black line; with the LP its exact pieces, kinks dotted; from the
    counters, the integer grid points) against the pool's staff, the staff range shaded by the
    limiting pools and named, the inflow-limited rate dotted, the scenario's staff a dashed line
    and a black star. ``overlay``: the simulated rate at integer staff (mean and 95 % interval;
    blue circles, vermillion triangles where the fluid is optimistic, i.e. above the interval)
    and, when there are service-level targets, a second panel with the simulated service level
    of each target against its goal (dashed)."""
    pool = diagram.axes[0]
    with_sl = overlay is not None and any(c.endswith("_sl_low") for c in overlay.columns)
    ncols = 2 if with_sl else 1
    with mpl.rc_context(_STYLE):
        fig = Figure(figsize=(6.6 * ncols, 4.8), layout="constrained")
        axes = fig.subplots(1, ncols, squeeze=False)[0]
        handles = _draw_profile(axes[0], diagram)
        top = max([diagram.inflow_rate] + [g.rate for g in diagram.grid])
        if overlay is not None and len(overlay):
            handles += _draw_profile_gaps(axes[0], overlay)
            top = max(top, float(np.nanmax(overlay["sim_high"].to_numpy(float), initial=0.0)))
            if with_sl:
                _shade(axes[1], diagram, named=False)
                handles += _draw_profile_service_levels(axes[1], overlay)
                axes[1].axvline(diagram.staff[pool], color="black", ls="--", lw=0.8, zorder=2)
        axes[0].set_ylim(0, 1.2 * top if top > 0 else 1.0)
        for ax in axes:
            ax.set_xlabel(f"{pool} (agents)")
        axes[0].set_ylabel(f"{diagram.of_label or 'rate'} per {diagram.time_unit}")
        axes[0].set_title(f"fluid rate against the staff of {pool}"
                          + (" with the simulated rate" if overlay is not None else ""), pad=10)
        fig.legend(handles=handles, loc="outside lower center", ncols=2, frameon=False)
        method = ("exact fluid rate (LP pieces)" if diagram.method == "lp" else
                  "fluid rate from the counter equations at integer staff points")
        fig.suptitle(textwrap.fill(title or f"{diagram.scenario_name}: {method}",
                                   width=70 * ncols))
    return fig


def _spans(diagram: PhaseDiagram) -> list[tuple[str, float, float]]:
    """(label, low, high) of the shaded stretches of a one-axis diagram, left to right."""
    if diagram.method == "lp":
        return [(diagram.pieces[i].label, x0, x1) for i, x0, x1 in phase_intervals(diagram)]
    pts = sorted(diagram.grid, key=lambda g: g.a)
    xs = np.array([g.a for g in pts], dtype=float)
    half = float(np.min(np.diff(xs))) / 2 if len(xs) > 1 else 0.5
    edges = np.concatenate([[xs[0] - half], (xs[1:] + xs[:-1]) / 2, [xs[-1] + half]])
    out: list[tuple[str, float, float]] = []
    for g, x0, x1 in zip(pts, edges[:-1], edges[1:]):
        if out and out[-1][0] == g.label:
            out[-1] = (g.label, out[-1][1], x1)
        else:
            out.append((g.label, x0, x1))
    return out


def _shade(ax, diagram: PhaseDiagram, named: bool = True) -> dict[str, str]:
    spans = _spans(diagram)
    colours = _colours([lab for lab, _, _ in spans])
    width = spans[-1][2] - spans[0][1]
    for k, (label, x0, x1) in enumerate(spans):
        ax.axvspan(x0, x1, facecolor=colours[label], alpha=0.3, lw=0, zorder=0)
        if k:
            ax.axvline(x0, color=REFERENCE, lw=0.8, zorder=1)
        if named and x1 - x0 > 0.08 * width:
            ax.text(0.5 * (x0 + x1), 0.97, label.replace("+", "+\n"), ha="center", va="top",
                    fontsize=8, zorder=4, transform=ax.get_xaxis_transform(),
                    bbox=dict(boxstyle="round,pad=0.2", fc="white", ec="none", alpha=0.7))
    ax.set_xlim(spans[0][1], spans[-1][2])
    return colours


def _draw_profile(ax, diagram: PhaseDiagram) -> list:
    colours = _shade(ax, diagram)
    if diagram.method == "lp":
        spans = phase_intervals(diagram)
        xs = np.array([spans[0][1]] + [x1 for _, _, x1 in spans])
        ax.plot(xs, diagram.rate_at(xs), color="black", lw=1.6, zorder=3)
        ax.plot(xs[1:-1], diagram.rate_at(xs[1:-1]), ls="", marker="o", ms=4, color="black",
                zorder=3)
        line = "fluid rate (exact; dots: where the limiting pools change)"
        lo, hi = diagram.box()
    else:
        xs = np.array(sorted(g.a for g in diagram.grid), dtype=float)
        ax.plot(xs, [diagram.rate_at(x) for x in xs], color="black", lw=1.2, marker="o", ms=3.5,
                zorder=3)
        line = "fluid rate (counter equations at integer staff)"
        lo, hi = xs[0], xs[-1]
    ax.axhline(diagram.inflow_rate, color=REFERENCE, ls=":", lw=1, zorder=1)
    handles = [Patch(facecolor=c, alpha=0.3, label=f"limited by {lab}" if lab != INFLOW
                     else "limited by the inflow") for lab, c in colours.items()]
    handles += [Line2D([], [], color="black", lw=1.4, label=line),
                Line2D([], [], color=REFERENCE, ls=":", lw=1,
                       label=f"inflow-limited rate (per {diagram.time_unit})")]
    s = diagram.staff[diagram.axes[0]]
    if lo <= s <= hi:
        ax.axvline(s, color="black", ls="--", lw=0.8, zorder=2)
        ax.scatter([s], [float(diagram.rate_at(s))], marker="*", s=160, color="black", zorder=5)
        handles.append(Line2D([], [], marker="*", color="black", ls="--", lw=0.8, ms=11,
                              label=f"scenario's staff ({s:.4g})"))
    return handles


def _errorbars(ax, x, mean, low, high, **style) -> None:
    err = np.vstack([np.nan_to_num(mean - low), np.nan_to_num(high - mean)])
    ax.errorbar(x, mean, yerr=np.clip(err, 0, None), capsize=2.5, lw=1, ls="", zorder=6,
                **style)


def _draw_profile_gaps(ax, overlay: pd.DataFrame) -> list:
    opt = overlay["optimistic"].to_numpy(bool)
    a = overlay["a"].to_numpy(float)
    m, lo, hi = (overlay[c].to_numpy(float) for c in ("sim_mean", "sim_low", "sim_high"))
    _errorbars(ax, a[~opt], m[~opt], lo[~opt], hi[~opt], fmt="o", ms=5, color=SIMULATED)
    _errorbars(ax, a[opt], m[opt], lo[opt], hi[opt], fmt="^", ms=7, color=OPTIMISTIC,
               mec="black", mew=0.5)
    return [Line2D([], [], marker="o", color=SIMULATED, ls="", ms=5,
                   label="simulated mean and 95 % interval"),
            Line2D([], [], marker="^", color=OPTIMISTIC, mec="black", ls="", ms=7,
                   label="simulated; fluid optimistic (above the interval)")]


def _draw_profile_service_levels(ax, overlay: pd.DataFrame) -> list:
    places = [c[: -len("_sl_low")] for c in overlay.columns if c.endswith("_sl_low")]
    a = overlay["a"].to_numpy(float)
    handles = []
    for k, place in enumerate(places):
        colour, marker = SERIES[k % len(SERIES)], "osDv^<>"[k % 7]
        m, lo, hi = (overlay[f"{place}_sl_{c}"].to_numpy(float) for c in ("mean", "low", "high"))
        shift = 0.12 * (k - (len(places) - 1) / 2)  # side by side, not on top of each other
        _errorbars(ax, a + shift, m, lo, hi, fmt=marker, ms=4.5, color=colour)
        ax.axhline(float(overlay[f"{place}_sl_goal"].iloc[0]), color=colour, ls="--", lw=0.9)
        handles.append(Line2D([], [], marker=marker, color=colour, ls="--", lw=0.9, ms=5,
                              label=f"{place}: simulated service level (goal dashed)"))
    ax.set_ylim(0, 1.05)
    ax.set_ylabel("share served within the target time")
    ax.set_title("simulated service level per target (mean and 95 % interval)"
                 + _conventions(overlay), pad=10)
    return handles


# --- the simulated overlay -----------------------------------------------------------------------
