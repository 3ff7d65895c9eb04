"""Figure of a day's staffing: per pool the staff required per interval (iterative staffing
algorithm), the scheduled staff of the shift plan and the scenario's current schedule; per target
the service achieved in each interval, mean and 95 % interval over replications, against the goal
(or maximum).

Works for a :class:`~compare.study.shift_plan.ShiftPlan` and for a bare
:class:`~compare.study.interval_staffing.IntervalStaffing` (no plan: the required staff and its
achieved service). Built without pyplot, in the colours of :mod:`compare.present.figures`; each
series also has its own line style or marker. Times in the scenario's time unit from 0, shown
as clock times when the scenario has ``run.start``.
"""

from __future__ import annotations

import math

import matplotlib as mpl
import numpy as np
from matplotlib.figure import Figure

from ..study.interval_staffing import ABANDONMENT, verdict
from .clock_axis import set_clock_axis
from .figures import _STYLE, REFERENCE, SERIES, TARGET

__all__ = ["shift_figure"]


def _panel_title(target: str, spec: dict, unit: str, scenario) -> str:
    if target == ABANDONMENT:
        return "abandonment share (callers by arrival interval)"
    served = scenario.targets.service.get(target) if scenario is not None else None
    said = served.describe(unit) if served is not None else f"within {spec['within']:g} {unit}"
    return f"service level at {target} ({said})"


def _steps(values, step):
    x = np.arange(len(values) + 1) * step
    return x, np.r_[values, values[-1]] if len(values) else np.array([0])


def shift_figure(result, *, title: str | None = None, scenario=None) -> Figure:
    """The figure of the module docstring for a shift plan or a per-interval staffing.
    ``scenario``: the scenario staffed, for clock times on the time axis (``run.start``) and
    the service-level conventions in the panel titles; without it, times from 0."""
    plan = result if hasattr(result, "requirement") else None
    req = plan.requirement if plan is not None else result
    estimates = plan.estimates if plan is not None else req.estimates
    pools, targets = list(req.staff), list(req.targets)
    shown = [t for t in targets if any((t, i) in estimates for i in req.judged)]
    step, unit = req.step, req.time_unit
    with mpl.rc_context(_STYLE):
        fig = Figure(figsize=(9.5, 1.0 + 2.2 * (len(pools) + len(shown))), layout="constrained")
        axes = fig.subplots(len(pools) + len(shown), 1, sharex=True, squeeze=False)[:, 0]
        for ax, pool in zip(axes, pools):
            x, y = _steps(req.staff[pool], step)
            ax.step(x, y, where="post", color=SERIES[0], lw=1.6, label="required (per interval)")
            if plan is not None:
                x, y = _steps(plan.staff[pool], step)
                ax.step(x, y, where="post", color=SERIES[1], lw=1.4, ls="--",
                        label=f"shift plan (cost {plan.cost:g})")
                x, y = _steps(plan.current[pool], step)
                ax.step(x, y, where="post", color=REFERENCE, lw=1.0, ls=":",
                        label="current schedule")
                ax.axhline(plan.flat[pool], color=SERIES[2], lw=0.9, ls="-.",
                           label=f"flat plan ({plan.flat[pool]} all day)")
            ax.set_ylabel("agents")
            ax.set_title(f"staff of {pool}", pad=4)
            ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=7, frameon=False)
        mids = (np.array(req.judged) + 0.5) * step
        for ax, t in zip(axes[len(pools):], shown):
            spec = req.targets[t]
            means, lo, hi, miss = [], [], [], []
            for i in req.judged:
                e = estimates.get((t, i))
                ok = e is not None and math.isfinite(e.low) and math.isfinite(e.high)
                means.append(e.mean if e is not None else math.nan)
                lo.append(e.mean - e.low if ok else 0.0)
                hi.append(e.high - e.mean if ok else 0.0)
                miss.append(verdict(spec, e) == "misses")
            means = np.array(means)
            ax.errorbar(mids, means, yerr=[lo, hi], fmt="o", ms=3, color=SERIES[0], lw=0.9,
                        capsize=2, label="achieved, 95 % interval")
            if any(miss):
                m = np.array(miss)
                ax.plot(mids[m], means[m], "x", color=SERIES[3], ms=7, label="misses")
            level = spec["goal"] if "goal" in spec else spec["max"]
            ax.axhline(level, color=TARGET, lw=1.2, ls="--",
                       label=("goal" if "goal" in spec else "maximum") + f" {level:g}")
            ax.set_title(_panel_title(t, spec, unit, scenario), pad=4)
            ax.set_ylabel("share")
            if t == ABANDONMENT:  # (a share near 0: scale to the maximum and the highs)
                highs = [m + d for m, d in zip(means, hi) if math.isfinite(m)]
                ax.set_ylim(0.0, min(1.02, 1.25 * max([level, *highs])))
            else:
                lows = [m - d for m, d in zip(means, lo) if math.isfinite(m)]
                bottom = min([level, *lows]) if lows else level
                ax.set_ylim(max(0.0, bottom - 0.05), 1.02)
            ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=7, frameon=False)
        end = step * (max(req.judged) + 1 if req.judged else 1)
        if not set_clock_axis(axes[-1], scenario, step, end):
            axes[-1].set_xlabel(f"time ({unit} from the start of the run)")
        fig.suptitle(title or (f"{req.scenario_name}: "
                               + ("shift plan" if plan is not None else "staff per interval")))
    return fig
