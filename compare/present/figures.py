"""Figures for comparing the fluid model with the simulation (matplotlib, no screen needed).

Every function returns a :class:`matplotlib.figure.Figure` built directly (no pyplot, so no
window and no global figure registry: safe in a server, a test or a worker process) and never
shows or saves it; :func:`compare.report.write_report` embeds them. Inputs are plain data (dicts,
arrays, tidy DataFrames, :class:`desim.Estimate`-like objects with ``mean``, ``low``, ``high``,
``n``) so any part of ``compare`` can feed them.

Colours are the Okabe–Ito palette (distinguishable with the common colour-vision deficiencies)
and every colour distinction is doubled by a marker or line style, so the figures also read in
grey. Times are in the scenario's ``time_unit``, passed in as a label.
"""

from __future__ import annotations

import math
from typing import Any, Callable, Mapping

import matplotlib as mpl
import numpy as np
import pandas as pd
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter, NullFormatter

from ..study.gap import gap_text
from .clock_axis import set_clock_axis

__all__ = [
    "OKABE_ITO",
    "rates_figure",
    "waits_figure",
    "pooled_waits",
    "nothing_figure",
    "transient_figure",
    "scale_figure",
]

#: Okabe & Ito (2008) colour-blind-safe palette, in their order (black first).
OKABE_ITO = ("#000000", "#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00",
             "#CC79A7")
SIMULATED = "#0072B2"  # blue
FLUID = "#E69F00"  # orange
OPTIMISTIC = "#D55E00"  # vermillion
PESSIMISTIC = "#009E73"  # bluish green
TARGET = "#CC79A7"  # reddish purple
REFERENCE = "#666666"
# yellow is left out of series colours: too pale on white
SERIES = ("#0072B2", "#E69F00", "#009E73", "#D55E00", "#CC79A7", "#56B4E9", "#000000")

_STYLE = {
    "font.size": 9,
    "axes.titlesize": 10,
    "axes.labelsize": 9,
    "legend.fontsize": 8,
    "xtick.labelsize": 8,
    "ytick.labelsize": 8,
    "axes.grid": True,
    "grid.color": "#dddddd",
    "grid.linewidth": 0.6,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.prop_cycle": mpl.cycler(color=SERIES),
    "figure.dpi": 100,
}

#: How a per-interval metric of the simulation (desim.run) is labelled and in which unit.
_INTERVAL_UNITS = {
    "queue": "mean jobs waiting",
    "service_level": "share served within target",
    "arrivals": "arrivals per interval",
    "completed": "completions per interval",
    "abandoned": "abandonments per interval",
    "rate": "firings per {tu}",
    "busy": "share of staff busy",
    "wait": "mean wait ({tu})",
}


def _new_figure(width: float, height: float) -> Figure:
    with mpl.rc_context(_STYLE):
        return Figure(figsize=(width, height), layout="constrained")


def nothing_figure(title: str, text: str) -> Figure:
    """A small figure that says there is nothing to draw (``text``) under ``title``."""
    fig = _new_figure(5.0, 2.0)
    ax = fig.add_subplot()
    ax.set_axis_off()
    ax.text(0.5, 0.5, text, ha="center", va="center")
    fig.suptitle(title)
    return fig


def _grid(fig: Figure, n: int, ncols: int):
    """``n`` axes on a grid of ``ncols`` columns (unused cells removed), in reading order."""
    ncols = max(1, min(ncols, n))
    nrows = math.ceil(n / ncols)
    with mpl.rc_context(_STYLE):
        axes = fig.subplots(nrows, ncols, squeeze=False).ravel()
    for ax in axes[n:]:
        ax.remove()
    return list(axes[:n])


def _finite(x: Any) -> bool:
    return (x is not None and isinstance(x, (int, float, np.floating, np.integer))
            and math.isfinite(x))


# --- rates ----------------------------------------------------------------------------------------


def rates_figure(fluid_rates: Mapping[str, float], sim: Mapping[str, Any], time_unit: str, *,
                 title: str = "Throughput per transition: fluid model against simulation",
                 log: bool = False) -> Figure:
    """Rate of each transition (firings per ``time_unit``): the simulated mean with its 95 %
    interval (blue dot and bar) and the fluid rate. The fluid marker is a vermillion right
    triangle (▶) where it lies above the simulated interval (the fluid model is optimistic
    there), a green left triangle (◀) where it lies below, an orange diamond inside; in each row
    the simulated value sits slightly above the fluid one so neither hides the other. The right
    margin gives the gap (simulated mean − fluid) / |fluid| in per cent, the sign convention of
    every gap (:data:`compare.study.gap.GAP_CONVENTION`; the absolute difference where the fluid
    rate is near zero).
    Transitions are listed top to bottom in the order of ``sim``, then any only in
    ``fluid_rates``; a missing value is simply not drawn. ``log``: logarithmic rate axis."""
    names = list(sim) + [q for q in fluid_rates if q not in sim]
    offset = 0.13  # simulated just above the row's line, fluid just below: neither hides the other
    fig = _new_figure(7.5, 1.4 + 0.34 * max(len(names), 1))
    style = {"above": (">", OPTIMISTIC, "fluid above the interval (optimistic)"),
             "inside": ("D", FLUID, "fluid inside the interval"),
             "below": ("<", PESSIMISTIC, "fluid below the interval")}
    with mpl.rc_context(_STYLE):
        ax = fig.add_subplot()
        y = np.arange(len(names))[::-1]  # first name on top
        kinds: dict[str, list[tuple[float, float]]] = {k: [] for k in style}
        right = ax.get_yaxis_transform()  # x in axes fraction, y in data
        for yi, q in zip(y, names):
            est = sim.get(q)
            has_mean = est is not None and _finite(est.mean)
            if has_mean:
                lo = est.low if _finite(est.low) else est.mean
                hi = est.high if _finite(est.high) else est.mean
                ax.errorbar([est.mean], [yi + offset], xerr=[[est.mean - lo], [hi - est.mean]],
                            fmt="o",
                            color=SIMULATED, ms=5, capsize=3, lw=1.4, zorder=2)
            f = fluid_rates.get(q)
            if not _finite(f):
                continue
            if has_mean and _finite(est.high) and f > est.high:
                kinds["above"].append((f, yi - offset))
            elif has_mean and _finite(est.low) and f < est.low:
                kinds["below"].append((f, yi - offset))
            else:
                kinds["inside"].append((f, yi - offset))
            if has_mean:
                ax.annotate(gap_text(f, est.mean), (1.0, yi), xycoords=right,
                            xytext=(6, 0), textcoords="offset points", va="center", fontsize=8)
        handles = [ax.errorbar([], [], xerr=[], fmt="o", color=SIMULATED, capsize=3,
                               label="simulated mean, 95 % interval")]
        for kind, pts in kinds.items():
            if pts:
                marker, colour, label = style[kind]
                xs, ys = zip(*pts)
                handles.append(ax.scatter(xs, ys, marker=marker, s=42, color=colour,
                                          edgecolor="black", linewidth=0.5, zorder=3,
                                          label=label))
        ax.annotate("simulated\nminus fluid", (1.0, 1.0), xycoords="axes fraction", xytext=(6, 2),
                    textcoords="offset points", va="bottom", fontsize=7, color=REFERENCE)
        ax.set_yticks(y, names)
        ax.set_ylim(-0.7, len(names) - 0.3)
        ax.grid(axis="y", visible=False)
        if log:
            ax.set_xscale("log")
        ax.margins(x=0.08)
        ax.set_xlabel(f"rate (firings per {time_unit})")
        ax.set_title(title)
        fig.legend(handles=handles, loc="outside lower center", ncols=len(handles),
                   frameon=False)
    return fig


# --- waits ----------------------------------------------------------------------------------------


def pooled_waits(runs, places=None, which: str = "all") -> dict[str, np.ndarray]:
    """Every recorded wait (in the scenario's time unit) per place, pooled over the replications
    ``runs`` (``SimulationResult.runs`` of a ``replicate(..., record_waits=True)``).
    ``which``: "taken" (jobs taken by a transition), "abandoned" or "all" (both, as the place's
    ``wait`` statistic counts them). ``places``: the places to keep (default: those with at
    least one positive wait, i.e. where somebody actually waited)."""
    if which not in ("all", "taken", "abandoned"):
        raise ValueError(f"which must be 'all', 'taken' or 'abandoned' (got {which!r})")
    parts: dict[str, list[np.ndarray]] = {}
    for run in runs:
        if run.waits is None:
            raise ValueError("these runs kept no waits: simulate with record_waits=True")
        for place, w in run.waits.items():
            keys = ("taken", "abandoned") if which == "all" else (which,)
            parts.setdefault(place, []).extend(np.asarray(w[k], dtype=float) for k in keys)
    out = {p: np.concatenate(v) if v else np.array([]) for p, v in parts.items()}
    if places is None:
        return {p: w for p, w in out.items() if w.size and np.nanmax(w) > 0}
    return {p: out.get(p, np.array([])) for p in places}


def _ccdf(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Steps of P(W > t): x = 0 and the sorted distinct values, y = share strictly above each."""
    v = np.sort(values[np.isfinite(values)])
    xs = np.unique(np.concatenate([[0.0], v]))
    ys = 1.0 - np.searchsorted(v, xs, side="right") / v.size
    return xs, ys


def waits_figure(waits: Mapping[str, np.ndarray], time_unit: str,
                 targets: Mapping[str, float] | None = None, *,
                 title: str = "How long jobs wait, per waiting place", ncols: int = 3) -> Figure:
    """Small multiples, one panel per place: the empirical complementary distribution of the
    waits, P(wait > t) against t in ``time_unit`` (a step line; its height at t = 0 is the share
    that waited at all). ``targets`` maps a place to its service-level ``within`` (same time
    unit), drawn as a vertical dashed line with the share waiting longer written beside it.
    The panel title gives the number of waits the line rests on."""
    targets = targets or {}
    names = list(waits)
    if not names:
        return nothing_figure(title, "no waits recorded")
    ncols = max(1, min(ncols, len(names)))
    nrows = math.ceil(len(names) / ncols)
    fig = _new_figure(3.3 * ncols, 0.6 + 2.5 * nrows)
    axes = _grid(fig, len(names), ncols)
    with mpl.rc_context(_STYLE):
        for ax, place in zip(axes, names):
            w = np.asarray(waits[place], dtype=float)
            w = w[np.isfinite(w)]
            ax.set_title(f"{place} ({w.size:,} waits)")
            ax.set_xlabel(f"wait t ({time_unit})")
            ax.set_ylabel("share waiting longer than t")
            ax.set_ylim(0, 1.02)
            within = targets.get(place)
            if w.size == 0:
                ax.text(0.5, 0.5, "no waits recorded", transform=ax.transAxes, ha="center")
            else:
                xs, ys = _ccdf(w)
                right = max(float(np.quantile(w, 0.995)), within or 0.0) or 1.0
                xs = np.append(xs, max(right * 1.05, xs[-1]))
                ys = np.append(ys, ys[-1])
                ax.step(xs, ys, where="post", color=SIMULATED, lw=1.5, label="simulated")
                ax.set_xlim(0, right * 1.05)
            if _finite(within):
                ax.axvline(within, color=TARGET, ls="--", lw=1.3,
                           label=f"target: within {within:g} {time_unit}")
                if w.size:
                    share = float(np.mean(w > within))
                    left = within > 0.6 * ax.get_xlim()[1]  # keep the label inside the panel
                    ax.annotate(f"{share:.1%} wait longer", (within, share),
                                xytext=(-6 if left else 6, 8), textcoords="offset points",
                                ha="right" if left else "left", color=TARGET, fontsize=8)
            if ax.get_legend_handles_labels()[0]:
                ax.legend(loc="best", frameon=False)
        fig.suptitle(title)
    return fig


# --- transient ------------------------------------------------------------------------------------


#: Natural range of the per-interval metrics (for clipping interval bands).
_METRIC_RANGE = {"queue": (0.0, np.inf), "service_level": (0.0, 1.0), "arrivals": (0.0, np.inf),
                 "completed": (0.0, np.inf), "abandoned": (0.0, np.inf), "rate": (0.0, np.inf),
                 "busy": (0.0, 1.0), "wait": (0.0, np.inf)}


def _metric_label(metric: str, time_unit: str) -> str:
    return _INTERVAL_UNITS.get(metric, metric).format(tu=time_unit)


def _steps(start: np.ndarray, end: np.ndarray, values: np.ndarray):
    """Step-line vertices for piecewise-constant ``values`` on [start_i, end_i)."""
    return np.append(start, end[-1]), np.append(values, values[-1])


def transient_figure(table: pd.DataFrame, time_unit: str, *,
                     title: str = "Interval by interval: fluid model against simulation",
                     warmup: float | None = None, ncols: int = 2,
                     goals: Mapping[str, float] | None = None,
                     clock: Callable[[float], str] | None = None,
                     xlabel: str | None = None, scenario=None) -> Figure:
    """One panel per (metric, name) of a tidy table with columns interval, start, end, metric,
    name, fluid, mean, low, high, n (start and end in ``time_unit``): the fluid value of each
    interval as a solid orange step line, the simulated mean as a dashed blue step line inside
    its shaded 95 % band. A fluid column that is missing or nan for a panel is simply not drawn.
    Panel titles read "metric: name" (just the metric for whole-system rows, name "").
    ``goals``: place -> service-level goal, drawn as a horizontal line on its service-level
    panel; ``clock``: time -> tick label (e.g. clock times), with ``xlabel`` the axis label;
    ``scenario``: with ``run.start``, ticks on whole clock times instead
    (:mod:`compare.present.clock_axis`)."""
    required = {"start", "end", "metric", "name", "mean", "low", "high"}
    missing = required - set(table.columns)
    if missing:
        raise ValueError(f"transient table lacks columns {sorted(missing)}")
    t = table.copy()
    t["name"] = t["name"].fillna("").astype(str)
    groups = list(t.groupby(["metric", "name"], sort=False))
    if not groups:
        raise ValueError("transient table is empty")
    ncols = max(1, min(ncols, len(groups)))
    nrows = math.ceil(len(groups) / ncols)
    fig = _new_figure(4.2 * ncols, 0.7 + 2.4 * nrows)
    axes = _grid(fig, len(groups), ncols)
    with mpl.rc_context(_STYLE):
        for ax, ((metric, name), g) in zip(axes, groups):
            g = g.sort_values("start")
            start = g["start"].to_numpy(float)
            end = g["end"].to_numpy(float)
            x, mean = _steps(start, end, g["mean"].to_numpy(float))
            _, low = _steps(start, end, g["low"].to_numpy(float))
            _, high = _steps(start, end, g["high"].to_numpy(float))
            lo_bound, hi_bound = _METRIC_RANGE.get(metric, (-np.inf, np.inf))
            low, high = np.clip(low, lo_bound, hi_bound), np.clip(high, lo_bound, hi_bound)
            if warmup is not None and warmup > 0:
                ax.axvspan(0, warmup, color="#000000", alpha=0.07, lw=0,
                           label="warm-up (left out of the overall figures)")
            ax.fill_between(x, low, high, step="post", color=SIMULATED, alpha=0.22, lw=0,
                            label="simulated 95 % interval")
            ax.step(x, mean, where="post", color=SIMULATED, ls="--", lw=1.4,
                    label="simulated mean")
            if "fluid" in g and np.isfinite(g["fluid"].to_numpy(float)).any():
                _, fl = _steps(start, end, g["fluid"].to_numpy(float))
                ax.step(x, fl, where="post", color=FLUID, lw=1.8, label="fluid")
            goal = (goals or {}).get(name) if metric == "service_level" else None
            if goal is not None:
                ax.axhline(goal, color=TARGET, ls=":", lw=1.4, label="goal")
            ax.set_title(f"{metric}: {name}" if name else metric)
            ax.set_xlabel(xlabel or f"time ({time_unit})")
            # (narrow panels side by side: fewer ticks)
            if not set_clock_axis(ax, scenario, float(np.min(end - start)), float(x[-1]),
                                  max_ticks=12 // max(1, ncols)):
                if clock is not None:
                    ax.xaxis.set_major_formatter(FuncFormatter(lambda t, _pos: clock(t)))
            ax.set_ylabel(_metric_label(metric, time_unit))
            ax.set_xlim(x[0], x[-1])
        handles, labels = axes[0].get_legend_handles_labels()
        for ax in axes[1:]:  # a panel of the first group may lack the fluid line
            for h, lab in zip(*ax.get_legend_handles_labels()):
                if lab not in labels:
                    handles.append(h)
                    labels.append(lab)
        fig.legend(handles, labels, loc="outside lower center", ncols=len(labels), frameon=False)
        fig.suptitle(title)
    return fig


# --- scale ----------------------------------------------------------------------------------------


def _fit_parts(fit: Any) -> tuple[float | None, float, tuple[float, float] | None]:
    """(coefficient or None, exponent, exponent interval or None) from the accepted fit shapes:
    a number (the exponent), a pair (coefficient, exponent), or a mapping with the exponent under
    "exponent", "b" or "slope", optionally the coefficient under "coefficient", "a" or
    "prefactor" and an interval under "exponent_low"/"exponent_high" or "low"/"high"."""
    if isinstance(fit, (int, float, np.floating)):
        return None, float(fit), None
    if isinstance(fit, (tuple, list)) and len(fit) == 2:
        return float(fit[0]), float(fit[1]), None
    if isinstance(fit, Mapping):
        b = next((fit[k] for k in ("exponent", "b", "slope") if k in fit), None)
        if b is None:
            raise ValueError(f"scale fit has no exponent (keys {sorted(fit)})")
        a = next((fit[k] for k in ("coefficient", "a", "prefactor") if k in fit), None)
        lo = fit.get("exponent_low", fit.get("low"))
        hi = fit.get("exponent_high", fit.get("high"))
        ci = (float(lo), float(hi)) if _finite(lo) and _finite(hi) else None
        return (float(a) if _finite(a) else None), float(b), ci
    raise ValueError(f"cannot read a scale fit from {fit!r}")


def scale_figure(table: pd.DataFrame, fits: Mapping[str, Any] | None = None, *,
                 title: str = "Fluid gap against scale") -> Figure:
    """Log–log plot of the relative gap (absolute value, a pure number) against the scale factor
    k (arrival rates and staff both multiplied by k), one colour and marker per gap measure,
    from a table with columns factor, measure, gap and optionally low, high (an interval for the
    gap; drawn as error bars, clipped at the smallest plotted gap where it reaches zero).
    ``fits`` maps a measure to its fitted power law a·k^b (see :func:`_fit_parts` for the
    accepted shapes); the fit is drawn dashed with b in the legend (a fitted by least squares on
    the logs with b fixed when not given). A grey dotted reference line of slope −1/2 (the
    square-root rate at which a stochastic gap shrinks in the usual diffusion scaling) goes
    through the geometric mean of the plotted points. Gaps that are zero or not finite cannot be
    drawn on a log axis and are left out."""
    fits = fits or {}
    required = {"factor", "measure", "gap"}
    if required - set(table.columns):
        raise ValueError(f"scale table lacks columns {sorted(required - set(table.columns))}")
    fig = _new_figure(6.4, 4.4)
    markers = "osD^vP*X"
    with mpl.rc_context(_STYLE):
        ax = fig.add_subplot()
        ax.set_xscale("log")
        ax.set_yscale("log")
        all_k, all_g, handles = [], [], []
        for i, (measure, g) in enumerate(table.groupby("measure", sort=False)):
            colour = SERIES[i % len(SERIES)]
            k = g["factor"].to_numpy(float)
            gap = np.abs(g["gap"].to_numpy(float))
            ok = np.isfinite(gap) & (gap > 0) & np.isfinite(k) & (k > 0)
            if not ok.any():
                continue
            k, gap = k[ok], gap[ok]
            order = np.argsort(k)
            k, gap = k[order], gap[order]
            yerr = None
            if {"low", "high"} <= set(g.columns):
                bounds = np.abs(g[["low", "high"]].to_numpy(float)[ok][order])
                lo, hi = bounds.min(axis=1), bounds.max(axis=1)
                straddles = (g["low"].to_numpy(float)[ok][order] <= 0) & \
                            (g["high"].to_numpy(float)[ok][order] >= 0)
                lo = np.where(straddles, 0.0, lo)  # the interval reaches a zero gap
                floor = gap.min() / 10
                lo = np.clip(np.nan_to_num(lo, nan=np.nan), floor, None)
                yerr = np.vstack([np.clip(gap - lo, 0, None), np.clip(hi - gap, 0, None)])
                yerr = np.nan_to_num(yerr, nan=0.0)
            label = str(measure)
            fit = fits.get(measure)
            handles.append(ax.errorbar(k, gap, yerr=yerr, fmt=markers[i % len(markers)],
                                       color=colour, ms=5, capsize=3, lw=1.0, label=label))
            if fit is not None:
                a, b, ci = _fit_parts(fit)
                if a is None:
                    a = float(np.exp(np.mean(np.log(gap) - b * np.log(k))))
                kk = np.geomspace(k.min(), k.max(), 50)
                text = f"{label} fit: gap ∝ $k^{{{b:.2f}}}$"
                if ci is not None:
                    text += f" (exponent {ci[0]:.2f} to {ci[1]:.2f})"
                handles += ax.plot(kk, a * kk ** b, ls="--", color=colour, lw=1.3, label=text)
            all_k.extend(k)
            all_g.extend(gap)
        if all_k:
            k0 = float(np.exp(np.mean(np.log(all_k))))
            g0 = float(np.exp(np.mean(np.log(all_g))))
            kk = np.geomspace(min(all_k), max(all_k), 50)
            handles += ax.plot(kk, g0 * (kk / k0) ** -0.5, ls=":", color=REFERENCE, lw=1.5,
                               label="reference: slope −1/2")
        else:
            ax.text(0.5, 0.5, "no positive gaps to plot", transform=ax.transAxes, ha="center")
        ax.set_xlabel("scale factor k (arrival rates and staff × k)")
        ax.set_ylabel("relative gap (absolute value)")
        if all_k:  # label the factors themselves, not just the powers of ten
            ticks = sorted(set(all_k))
            ax.set_xticks(ticks, [f"{t:g}" for t in ticks])
            ax.xaxis.set_minor_formatter(NullFormatter())
        ax.set_title(title)
        ax.grid(True, which="both", color="#eeeeee")
        if all_k:
            ax.legend(handles=handles, loc="best", frameon=False)
    return fig
