"""The day at a glance: service level against its goal, and the staff steps, on one time axis.

Reads the wide per-interval table of :func:`compare.study.day_table.day_table`. One panel per
service target (the simulated mean as a dashed step line inside its 95 % band, the fluid value
as a solid step line, the goal as a dotted line), one for the abandonment share against its
maximum when the table holds it, and at the bottom the staff of each pool: scheduled (solid
steps), on duty in the simulation (dashed, when the table holds it) and the fluid offered load
in agents (dotted), so a dip in the service level sits above the staff step that explains it.
The x axis shows clock times when the scenario has ``run.start`` (:mod:`fluid.clock`).
"""

from __future__ import annotations

import math

import matplotlib as mpl
import numpy as np
from matplotlib.figure import Figure
from matplotlib.ticker import FixedLocator, FuncFormatter

from fluid.clock import axis_label, clock_label
from fluid.scenario import Scenario

from .figures import _STYLE, FLUID, SERIES, SIMULATED, TARGET, _steps

__all__ = ["day_figure"]

#: At most this many labelled ticks on the time axis (interval boundaries, every k-th).
MAX_TICKS = 13


def _band(ax, x, day, key: str, lo: float, hi: float) -> None:
    start, end = day["start"].to_numpy(float), day["end"].to_numpy(float)
    _, mean = _steps(start, end, day[key].to_numpy(float))
    _, low = _steps(start, end, day[f"{key}.low"].to_numpy(float))
    _, high = _steps(start, end, day[f"{key}.high"].to_numpy(float))
    ax.fill_between(x, np.clip(low, lo, hi), np.clip(high, lo, hi), step="post",
                    color=SIMULATED, alpha=0.22, lw=0, label="simulated 95 % interval")
    ax.step(x, mean, where="post", color=SIMULATED, ls="--", lw=1.4, label="simulated mean")
    if f"{key}.fluid" in day.columns:
        _, fl = _steps(start, end, day[f"{key}.fluid"].to_numpy(float))
        ax.step(x, fl, where="post", color=FLUID, lw=1.8, label="fluid")


def day_figure(scenario: Scenario, day, *, title: str | None = None) -> Figure:
    """The day figure of the wide table ``day`` (see the module docstring)."""
    if day is None or len(day) == 0:
        raise ValueError("the per-interval table is empty")
    day = day.sort_values("interval")
    panels = [(p, t.goal) for p, t in scenario.targets.service.items()
              if f"service_level.{p}" in day.columns]
    abandon = scenario.targets.abandonment_max if "abandonment" in day.columns else None
    n = len(panels) + ("abandonment" in day.columns) + 1
    with mpl.rc_context(_STYLE):
        fig = Figure(figsize=(8.0, 0.9 + 2.2 * n), layout="constrained")
        axes = list(fig.subplots(n, 1, sharex=True, squeeze=False).ravel())
        start, end = day["start"].to_numpy(float), day["end"].to_numpy(float)
        x = np.append(start, end[-1])
        for ax, (place, goal) in zip(axes, panels):
            _band(ax, x, day, f"service_level.{place}", 0.0, 1.0)
            ax.axhline(goal, color=TARGET, ls=":", lw=1.6, label="goal")
            said = scenario.targets.service[place].describe(scenario.time_unit)
            ax.set_title(f"service level at {place} (goal {100 * goal:.3g} %; {said})")
            ax.set_ylabel("share served within target")
            ax.set_ylim(-0.02, 1.02)
        if "abandonment" in day.columns:
            ax = axes[len(panels)]
            _band(ax, x, day, "abandonment", 0.0, 1.0)
            if abandon is not None:
                ax.axhline(abandon, color=TARGET, ls=":", lw=1.6, label="maximum")
            ax.set_title("abandonment (share of the interval's callers)")
            ax.set_ylabel("share unserved")
        staff_ax = axes[-1]
        for colour, pool in zip(SERIES * 4, scenario.pools):
            _, sched = _steps(start, end, day[f"scheduled.{pool}"].to_numpy(float))
            staff_ax.step(x, sched, where="post", color=colour, lw=1.8,
                          label=f"{pool}: scheduled")
            if f"staff.{pool}" in day.columns:
                _, on = _steps(start, end, day[f"staff.{pool}"].to_numpy(float))
                staff_ax.step(x, on, where="post", color=colour, ls="--", lw=1.2,
                              label=f"{pool}: on duty (simulated mean)")
            _, offered = _steps(start, end, day[f"offered.{pool}"].to_numpy(float))
            staff_ax.step(x, offered, where="post", color=colour, ls=":", lw=1.4,
                          label=f"{pool}: offered load (fluid, agents)")
        staff_ax.set_title("staff")
        staff_ax.set_ylabel("agents")
        # (head room above the steps for the legend)
        top = max((line.get_ydata().max() for line in staff_ax.get_lines()), default=1.0)
        staff_ax.set_ylim(0, 1.45 * top if np.isfinite(top) and top > 0 else 1.0)
        staff_ax.legend(loc="upper left", frameon=False, ncols=3)
        every = max(1, math.ceil(len(x) / MAX_TICKS))
        staff_ax.xaxis.set_major_locator(FixedLocator(x[::every]))
        staff_ax.xaxis.set_major_formatter(
            FuncFormatter(lambda t, _pos: clock_label(scenario, float(t))))
        staff_ax.set_xlabel(axis_label(scenario))
        staff_ax.set_xlim(x[0], x[-1])
        if len(axes) > 1:
            handles, labels = axes[0].get_legend_handles_labels()
            for ax in axes[1:-1]:
                for h, lab in zip(*ax.get_legend_handles_labels()):
                    if lab not in labels:
                        handles.append(h)
                        labels.append(lab)
            fig.legend(handles, labels, loc="outside lower center", ncols=len(labels),
                       frameon=False)
        fig.suptitle(title or f"The day interval by interval: {scenario.name}")
    return fig
