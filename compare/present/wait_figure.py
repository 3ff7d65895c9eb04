"""The waiting-time figure that agrees with each service level's convention.

One panel per place with a service target: the served jobs' waits and the abandoners' times to
abandon drawn apart, as empirical distribution functions (the share of each group at most t,
against t in the scenario's time unit), with the target's ``within`` (and, for the convention
``excluded_within``, its threshold) as vertical lines. The panel says what its service level
measures (:meth:`fluid.scenario.ServiceTarget.describe`) and gives that service level computed
from the same pooled waits by the same convention: taken within / (taken + the abandoners
counted against), so figure and figure caption cannot disagree. Pooled over the replications
(a description of the waits; the service level's interval is in the tables).
"""

from __future__ import annotations

import math
import textwrap
from typing import Mapping

import matplotlib as mpl
import numpy as np
from matplotlib.figure import Figure

from .figures import (_STYLE, OPTIMISTIC, REFERENCE, SIMULATED, TARGET, _grid, _new_figure,
                      nothing_figure)

__all__ = ["pooled_outcome_waits", "convention_share", "service_waits_figure"]


def pooled_outcome_waits(runs, places) -> dict[str, dict[str, np.ndarray]]:
    """``{place: {"taken": waits, "abandoned": times to abandon}}`` pooled over ``runs``
    (:class:`desim.run.RunResult` with recorded waits) for each of ``places``."""
    out = {}
    for p in places:
        parts = {"taken": [], "abandoned": []}
        for run in runs:
            w = (run.waits or {}).get(p)
            if w is not None:
                for k in parts:
                    parts[k].append(np.asarray(w[k], dtype=float))
        out[p] = {k: np.concatenate(v) if v else np.array([]) for k, v in parts.items()}
    return out


def convention_share(target, taken: np.ndarray, abandoned: np.ndarray) -> float:
    """The service level of these waits under ``target``'s convention (nan when nothing)."""
    within = float(np.count_nonzero(taken <= target.within))
    if target.abandoned == "excluded":
        late = 0
    elif target.abandoned == "excluded_within":
        late = int(np.count_nonzero(abandoned > target.excluded_within))
    else:
        late = abandoned.size
    base = taken.size + late
    return within / base if base else math.nan


def _ecdf(ax, values: np.ndarray, right: float, **style) -> None:
    v = np.sort(values[np.isfinite(values)])
    xs = np.concatenate([[0.0], v, [max(right, v[-1])]])
    ys = np.concatenate([[np.count_nonzero(v <= 0.0) / v.size],
                         np.arange(1, v.size + 1) / v.size, [1.0]])
    ax.step(xs, ys, where="post", **style)


def service_waits_figure(waits: Mapping[str, Mapping[str, np.ndarray]], targets: Mapping,
                         time_unit: str, *, ncols: int = 2,
                         title: str = "Waits behind each service level: served and abandoning "
                                      "jobs apart") -> Figure:
    """One panel per place of ``targets`` (place -> ServiceTarget) with the distribution
    functions of the served jobs' waits and of the abandoners' times to abandon from ``waits``
    (as :func:`pooled_outcome_waits`), the ``within`` line, the ``excluded_within`` line when
    the convention has one, and the service level of these waits by the convention."""
    names = [p for p in targets if p in waits]
    if not names:
        return nothing_figure(title, "no waits recorded")
    ncols = max(1, min(ncols, len(names)))
    fig = _new_figure(4.6 * ncols, 0.8 + 3.0 * math.ceil(len(names) / ncols))
    axes = _grid(fig, len(names), ncols)
    with mpl.rc_context(_STYLE):
        for ax, place in zip(axes, names):
            target = targets[place]
            taken, gone = waits[place]["taken"], waits[place]["abandoned"]
            both = np.concatenate([taken, gone])
            right = max(float(np.quantile(both, 0.995)) if both.size else 0.0,
                        target.within, target.excluded_within or 0.0) * 1.05 or 1.0
            if taken.size:
                _ecdf(ax, taken, right, color=SIMULATED, lw=1.5,
                      label=f"served: wait ({taken.size:,})")
            if gone.size:
                _ecdf(ax, gone, right, color=OPTIMISTIC, lw=1.5, ls="-.",
                      label=f"abandoned: time to abandon ({gone.size:,})")
            ax.axvline(target.within, color=TARGET, ls="--", lw=1.3,
                       label=f"within {target.within:g} {time_unit}")
            if target.abandoned == "excluded_within":
                ax.axvline(target.excluded_within, color=REFERENCE, ls=":", lw=1.3,
                           label=f"abandoners within {target.excluded_within:g} excluded")
            share = convention_share(target, taken, gone)
            lines = [place, *textwrap.wrap(target.describe(time_unit), 48)]
            if share == share:
                lines.append(f"service level of these waits {share:.1%}")
            ax.set_title("\n".join(lines), fontsize=9)
            ax.set_xlim(0, right)
            ax.set_ylim(0, 1.02)
            ax.set_xlabel(f"t ({time_unit})")
            ax.set_ylabel("share of the group at most t")
            if not both.size:
                ax.text(0.5, 0.5, "no waits recorded", transform=ax.transAxes, ha="center")
            ax.legend(loc="lower right", frameon=False)
        fig.suptitle(title)
    return fig
