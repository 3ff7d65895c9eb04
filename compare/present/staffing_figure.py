"""Figures of a staffing search (:class:`compare.staffing_search.StaffingResult`).

:func:`staffing_figure` draws the plans the simulated search tried, in order: one panel per
target with each plan's estimate and 95 % interval against the goal (or maximum), and a panel of
the staff per pool with the fluid plan as dashed lines; the final plan is highlighted in every
panel. Without simulated plans (``fluid_only``, or a scenario without targets) it draws the fluid
plan against the scenario's staff, per pool, instead.

Figures are :class:`matplotlib.figure.Figure` objects built without pyplot, in the Okabe–Ito
colours of :mod:`compare.figures`; every colour is doubled by a marker, a hatch or a label.
Staff in agents; a service-level target's ``within`` in the scenario's time unit.
"""

from __future__ import annotations

import math
import textwrap

import matplotlib as mpl
import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from .figures import _STYLE, FLUID, OPTIMISTIC, PESSIMISTIC, REFERENCE, SERIES, TARGET
from ..study.staffing_search import ABANDONMENT, StaffingResult

__all__ = ["staffing_figure"]

_HIGHLIGHT = "#F0E442"  # Okabe–Ito yellow: a pale band behind the final plan
_MARKERS = "osD^v<>p"


def staffing_figure(result: StaffingResult, *, title: str | None = None) -> Figure:
    """The plans tried by the search (see the module docstring), or the fluid plan against the
    scenario's staff when nothing was simulated."""
    if not result.tried:
        return _fluid_plan_figure(result, title)
    return _trials_figure(result, title)


def _staff_text(staff) -> str:
    return ", ".join(f"{p} {n}" for p, n in staff.items())


def _holds(name: str, target: dict, est) -> bool:
    """The target holds with confidence (as compare.staffing_search.meets_targets)."""
    if name == ABANDONMENT:
        return math.isfinite(est.high) and est.high <= target["max"]
    return math.isfinite(est.low) and est.low >= target["goal"]


def _trials_figure(result: StaffingResult, title: str | None) -> Figure:
    tried = result.tried
    names = [n for n in result.targets if any(n in t.estimates for t in tried)]
    x = np.arange(len(tried))
    final = next((i for i, t in enumerate(tried) if t.staff == result.plan), None)
    fluid = result.fluid_plan.staff
    with mpl.rc_context(_STYLE):
        fig = Figure(figsize=(7.8, 1.2 + 2.3 * (len(names) + 1)), layout="constrained")
        axes = fig.subplots(len(names) + 1, 1, sharex=True, squeeze=False)[:, 0]
        handles: list = []
        for ax, name in zip(axes, names):
            handles = _draw_target(ax, name, result, x)
        ax = axes[-1]
        for k, pool in enumerate(result.plan):
            colour, marker = SERIES[k % len(SERIES)], _MARKERS[k % len(_MARKERS)]
            ax.plot(x, [t.staff[pool] for t in tried], color=colour, marker=marker, ms=5, lw=1)
            ax.axhline(fluid[pool], color=colour, ls="--", lw=0.9)
            handles.append(Line2D([], [], color=colour, marker=marker, ms=5, lw=1,
                                  label=f"staff of {pool} (dashed: its fluid plan)"))
        ax.set_ylabel("staff (agents)")
        ax.set_title(f"staff per pool (dashed: the fluid plan, {_staff_text(fluid)})", pad=6)
        if final is not None:
            for a in axes:
                a.axvspan(final - 0.4, final + 0.4, color=_HIGHLIGHT, alpha=0.35, lw=0, zorder=0)
            handles.append(Patch(facecolor=_HIGHLIGHT, alpha=0.35, label="final plan"))
        ax.set_xticks(x)
        ax.set_xlim(-0.6, len(tried) - 0.4)
        if len(tried) <= 30:
            ax.set_xticklabels([f"{i}: {t.step}" for i, t in enumerate(tried)], rotation=40,
                               ha="right", fontsize=7)
        ax.set_xlabel("plan, in the order tried")
        fig.legend(handles=handles, loc="outside lower center", ncols=3, frameon=False)
        verdict = ("meets every target with confidence" if result.meets
                   else "does NOT meet every target")
        reps = result.settings["replications"]
        head = title or (f"{result.scenario_name}: plans tried ({reps} replications each, "
                         "common random numbers)")
        fig.suptitle(textwrap.fill(head, width=85) + "\n" + textwrap.fill(
            f"final plan {_staff_text(result.plan)}: {verdict}", width=85), fontsize=10)
    return fig


def _draw_target(ax, name: str, result: StaffingResult, x: np.ndarray) -> list:
    target = result.targets[name]
    ests = [t.estimates.get(name) for t in result.tried]
    ok = np.array([e is not None and _holds(name, target, e) for e in ests])
    mean = np.array([math.nan if e is None else e.mean for e in ests], dtype=float)
    low = np.array([math.nan if e is None else e.low for e in ests], dtype=float)
    high = np.array([math.nan if e is None else e.high for e in ests], dtype=float)
    err = np.clip(np.vstack([np.nan_to_num(mean - low), np.nan_to_num(high - mean)]), 0, None)
    for mask, marker, colour in ((ok, "s", PESSIMISTIC), (~ok, "X", OPTIMISTIC)):
        if mask.any():
            ax.errorbar(x[mask], mean[mask], yerr=err[:, mask], fmt=marker, ms=6, color=colour,
                        ecolor=REFERENCE, capsize=2.5, lw=1, zorder=4)
    if name == ABANDONMENT:
        line, label = target["max"], f"maximum {target['max']:g}"
        ax.set_ylabel("abandoned share")
        ax.set_title("abandonment, all sources (mean and 95 % interval)", pad=6)
    else:
        line, label = target["goal"], f"goal {target['goal']:g}"
        ax.set_ylabel("service level")
        what = target.get("describes", f"within {target['within']:g} {result.time_unit}")
        ax.set_title(f"{name}: service level {what}\n(mean and 95 % interval)", pad=6)
    ax.axhline(line, color=TARGET, ls="--", lw=1.2, zorder=2)
    ax.annotate(label, (1.0, line), xycoords=("axes fraction", "data"), xytext=(-4, 3),
                textcoords="offset points", ha="right", va="bottom", fontsize=8, color=TARGET)
    return [Line2D([], [], marker="s", color=PESSIMISTIC, ls="", ms=6,
                   label="target holds with confidence"),
            Line2D([], [], marker="X", color=OPTIMISTIC, ls="", ms=6, label="target missed"),
            Line2D([], [], color=TARGET, ls="--", lw=1.2, label="goal or maximum")]


def _fluid_plan_figure(result: StaffingResult, title: str | None) -> Figure:
    plan = result.fluid_plan
    pools = list(plan.staff)
    x = np.arange(len(pools))
    width = 0.38
    with mpl.rc_context(_STYLE):
        fig = Figure(figsize=(max(5.0, 1.6 + 1.3 * len(pools)), 4.4), layout="constrained")
        ax = fig.add_subplot()
        have = [plan.scenario_staff.get(p, math.nan) for p in pools]
        want = [plan.staff[p] for p in pools]
        bars = [ax.bar(x - width / 2, have, width, color="white", edgecolor=REFERENCE,
                       hatch="//", label="scenario's staff (mean over the horizon)"),
                ax.bar(x + width / 2, want, width, color=FLUID, edgecolor="black", lw=0.6,
                       label="fluid plan")]
        for b in bars:
            ax.bar_label(b, fmt="%.3g", fontsize=8, padding=2)
        work = np.array([plan.work.get(p, math.nan) for p in pools], dtype=float)
        ax.scatter(x + width / 2, work, marker="_", s=900, color="black", lw=2, zorder=4)
        ax.set_xticks(x, pools)
        ax.grid(False, axis="x")
        ax.set_ylabel("agents")
        top = np.nanmax(np.concatenate([have, want, work, [1.0]]))
        ax.set_ylim(0, 1.12 * top)
        handles = [*bars, Line2D([], [], color="black", lw=2,
                                 label="offered work (agents busy at the inflow)")]
        fig.legend(handles=handles, loc="outside lower center", ncols=2, frameon=False)
        why = ("fluid plan only, not simulated" if result.method == "fluid-only"
               else "no targets: the fluid plan, not simulated")
        fig.suptitle(textwrap.fill(title or f"{result.scenario_name}: fluid plan against the "
                                   f"scenario's staff ({why})", width=70), fontsize=10)
    return fig
