"""Text of the ``phases`` and ``staff`` results: tables and summary lines."""

from __future__ import annotations

from .conventions import service_level_lines
from .tables import fmt, fmt_estimate, format_table

__all__ = ["phases_text", "staff_text", "staff_summary", "staff_line"]


def phases_text(d, overlay=None) -> str:
    ax = d.axes
    unit = d.time_unit
    over = (f"fluid phase diagram of {d.of_label} over the staff of {ax[0]} and {ax[1]}"
            if len(ax) == 2 else f"fluid {d.of_label} against the staff of {ax[0]}")
    terms = " + ".join(f"coef_{x} x {x}" for x in ax)
    head = [f"{d.scenario_name}: {over}",
            f"rate per {unit} = minimum over the pieces of const + {terms}"
            if d.method == "lp" else
            "method: integrated counter equations on an integer grid (the LP does not apply: "
            "priorities, profiles or schedules); no exact pieces"]
    parts = ["\n".join(head)]
    if d.pieces:
        rows = [[p.label, fmt(p.const), *(fmt(p.coef[x]) for x in ax),
                 "(" + ", ".join(fmt(w, 3) for w in p.witness) + ")"] for p in d.pieces]
        parts.append(format_table(["limiting", "const", *(f"coef {x}" for x in ax),
                                   f"a point inside ({', '.join(ax)})"], rows))
    elif len(ax) == 1:
        runs: list[list] = []  # consecutive grid points with the same limiting pools
        for g in sorted(d.grid, key=lambda g: g.a):
            if runs and runs[-1][0] == g.label:
                runs[-1][2] = g.a
            else:
                runs.append([g.label, g.a, g.a])
        parts.append(format_table(["limiting", f"{ax[0]} (agents)"],
                                  [[lab, f"{lo}" if lo == hi else f"{lo}-{hi}"]
                                   for lab, lo, hi in runs]))
    else:
        labels: dict[str, int] = {}
        for g in d.grid:
            labels[g.label] = labels.get(g.label, 0) + 1
        parts.append(format_table(["limiting", "grid points"], list(labels.items())))
    here = tuple(d.staff[x] for x in ax)
    try:
        at = f"{fmt(float(d.rate_at(*here)))} per {unit}"
    except ValueError:  # a counters grid drawn away from the scenario's staff
        at = "outside the drawn range"
    parts.append(f"at the scenario's staff ({', '.join(f'{x} {fmt(v)}' for x, v in zip(ax, here))})"
                 f": {at}; inflow-limited rate {fmt(d.inflow_rate)}")
    if overlay is not None and len(overlay):
        rows = [[*(int(r[k]) for k in "ab"[:len(ax)]), fmt(r["fluid_rate"]),
                 fmt_estimate(_Est(r["sim_mean"], r["sim_low"], r["sim_high"])),
                 "yes" if r["optimistic"] else ""] for r in overlay.to_dict("records")]
        parts.append(format_table([*ax, "fluid rate", "simulated [95 % interval]",
                                   "fluid optimistic"], rows,
                                  title=f"simulated at integer staff ({int(overlay['n'].max())} "
                                  "replications per point, common random numbers):"))
    if d.notes:
        parts.append("\n".join(f"note: {n}" for n in d.notes))
    return "\n\n".join(parts)


class _Est:
    def __init__(self, mean, low, high):
        self.mean, self.low, self.high = mean, low, high


def staff_line(staff) -> str:
    return ", ".join(f"{p} {n}" for p, n in staff.items())


def staff_text(s, r) -> str:
    fp = r.fluid_plan
    parts = [f"{r.scenario_name}: staffing ({r.method})"]
    parts.append(format_table(
        ["pool", "scenario staff", "offered work", "fluid plan", "plan", "cost per agent"],
        [[p, fmt(s.pools[p].mean_staff(s.run.horizon)), fmt(fp.work.get(p), 4), fp.staff[p],
          r.plan[p], fmt(r.costs[p])] for p in s.pools]))
    summary = f"fluid plan cost {fmt(fp.cost)}; plan cost {fmt(r.plan_cost)}"
    if r.meets is not None:
        summary += ("; meets every target with confidence" if r.meets
                    else "; does NOT meet every target (see the plans tried)")
    parts.append(summary)
    if s.targets.service:
        parts.append("\n".join(service_level_lines(s.targets.service, s.time_unit)))
    if r.tried:
        names = list(r.targets)
        rows = []
        for t in r.tried:
            rows.append([t.step, " ".join(f"{p}={n}" for p, n in t.staff.items()), fmt(t.cost),
                         *[fmt_estimate(t.estimates.get(n)) for n in names],
                         "yes" if t.meets else "no"])
        reps = r.settings["replications"]
        parts.append(format_table(["step", "staff", "cost", *names, "meets"], rows,
                                  title=f"plans tried ({reps} replications each, seed "
                                  f"{r.settings['seed']}, common random numbers; estimates are "
                                  "mean [95 % interval]):"))
    if r.notes:
        parts.append("\n".join(f"note: {n}" for n in r.notes))
    return "\n\n".join(parts)


def staff_summary(r) -> list[str]:
    """The report's summary lines of a staffing result."""
    fp = r.fluid_plan
    return [f"{r.scenario_name}: staffing ({r.method})",
            f"fluid plan: {staff_line(fp.staff)} (cost {fmt(fp.cost)})",
            f"plan: {staff_line(r.plan)} (cost {fmt(r.plan_cost)})"
            + ("" if r.meets is None else "; meets every target with confidence"
               if r.meets else "; does NOT meet every target"),
            *(f"service level at {p}: {t['describes']}" for p, t in r.targets.items()
              if "describes" in t)]
