"""Text and JSON shapes of results for the command line."""

from __future__ import annotations

from typing import Any

from fluid.scenario import Scenario

from .tables import fmt, fmt_estimate, format_table

__all__ = ["inspect_text", "inspect_json", "fluid_text", "simulation_text", "describe_dist"]


def describe_dist(d: Any) -> str:
    if d is None:
        return "-"
    name = d.name
    if name == "deterministic":
        return fmt(d.mean)
    if name == "exponential":
        return f"exp(mean {fmt(d.mean)})"
    if name in ("lognormal", "gamma", "weibull", "erlang", "uniform", "empirical"):
        return f"{name}(mean {fmt(d.mean)}, cv {fmt(d.cv, 3)})"
    return f"{name}(mean {fmt(d.mean)})"


def _source_text(src) -> str:
    if src.kind == "poisson":
        return f"Poisson {fmt(src.rate)}"
    if src.kind == "profile":
        p = src.profile
        return f"profile step {fmt(p.step)}, {len(p.rates)} rates, {fmt(min(p.rates))}..{fmt(max(p.rates))}"
    return f"trace, {len(src.trace)} arrivals"


def _pool_text(pool) -> str:
    if pool.schedule is None:
        return str(pool.staff)
    sched = pool.schedule
    return f"schedule step {fmt(sched.step)}: {min(sched.staff)}..{max(sched.staff)}"


def _arcs(arcs) -> str:
    return ", ".join(n if w == 1 else f"{n} x{w}" for n, w in arcs.items()) or "(job ends)"


def _outflow(s: Scenario, name: str) -> str:
    node = s.places.get(name) or s.pools.get(name)
    if getattr(node, "route", None) is not None:
        return "route " + ", ".join(f"{t} {fmt(p, 3)}" for t, p in node.route.items())
    if node.priority:
        return "priority " + " > ".join(node.priority)
    return ", ".join(s.outputs_of(name)) or "-"


def inspect_text(s: Scenario, invariants: list[dict], uncovered: list[str]) -> str:
    parts = [f"{s.name}  (file {s.file}, time unit {s.time_unit})"]
    parts.append(format_table(
        ["source", "arrivals", "into"],
        [[n, _source_text(src), src.into] for n, src in s.sources.items()],
    ))
    parts.append(format_table(
        ["pool", "staff", "outputs"],
        [[n, _pool_text(p), _outflow(s, n)] for n, p in s.pools.items()],
    ))
    parts.append(format_table(
        ["place", "hold", "patience", "outputs"],
        [[n, describe_dist(p.hold),
          describe_dist(p.patience) + (f" -> {p.abandon_to}" if p.abandon_to else ""),
          _outflow(s, n)] for n, p in s.places.items()],
    ))
    parts.append(format_table(
        ["transition", "takes", "gives"],
        [[n, _arcs(t.inputs), _arcs(t.outputs)] for n, t in s.transitions.items()],
    ))
    inv_lines = ["conservation invariants (P-semiflows; weighted token sums that never change):"]
    for inv in invariants:
        inv_lines.append("  " + " + ".join(n if w == 1 else f"{fmt(w)}*{n}" for n, w in inv.items()))
    if not invariants:
        inv_lines.append("  none")
    if uncovered:
        inv_lines.append("pools on no invariant (agents can leak or multiply): " + ", ".join(uncovered))
    parts.append("\n".join(inv_lines))
    if s.targets.service or s.targets.abandonment_max is not None:
        rows = [[p, f"{fmt(t.goal * 100, 3)} % within {fmt(t.within)}"] for p, t in s.targets.service.items()]
        if s.targets.abandonment_max is not None:
            rows.append(["abandonment", f"at most {fmt(s.targets.abandonment_max * 100, 3)} %"])
        parts.append(format_table(["target", "goal"], rows))
    return "\n\n".join(parts)


def inspect_json(s: Scenario, invariants: list[dict], uncovered: list[str]) -> dict:
    return {
        "scenario": s.name,
        "file": s.file,
        "time_unit": s.time_unit,
        "sources": {n: {"kind": src.kind, "into": src.into,
                        "mean_rate": src.mean_rate(s.run.horizon)} for n, src in s.sources.items()},
        "pools": {n: {"staff": p.staff, "priority": list(p.priority),
                      "schedule": None if p.schedule is None else
                      {"step": p.schedule.step, "staff": list(p.schedule.staff)},
                      "outputs": list(s.outputs_of(n))} for n, p in s.pools.items()},
        "places": {n: {"hold_mean": p.hold_mean,
                       "hold": None if p.hold is None else p.hold.name,
                       "patience_mean": None if p.patience is None else p.patience.mean,
                       "abandon_to": p.abandon_to,
                       "route": None if p.route is None else dict(p.route),
                       "priority": list(p.priority),
                       "outputs": list(s.outputs_of(n))} for n, p in s.places.items()},
        "transitions": {n: {"in": dict(t.inputs), "out": dict(t.outputs),
                            "ends_job": s.ends_job(n)} for n, t in s.transitions.items()},
        "invariants": [dict(inv) for inv in invariants],
        "uncovered_pools": list(uncovered),
        "targets": {
            "service": {p: {"within": t.within, "goal": t.goal} for p, t in s.targets.service.items()},
            "abandonment_max": s.targets.abandonment_max,
        },
    }


def fluid_text(s: Scenario, r) -> str:
    unit = s.time_unit
    head = f"{s.name}: fluid model ({'throughput LP' if r.method == 'lp' else 'integrated counter equations'})"
    if getattr(r, "rounding", 0):
        head += f"; hold times rounded to the grid by at most {fmt(100 * r.rounding, 3)} %"
    rows = [[t, fmt(rate), "yes" if s.ends_job(t) else ""] for t, rate in r.rates.items()]
    parts = [head, format_table([f"transition", f"rate per {unit}", "ends job"], rows)]
    pool_rows = []
    for name in s.pools:
        load = r.load.get(name)
        pool_rows.append([name, fmt(s.pools[name].mean_staff(s.run.horizon)), fmt(load, 3),
                          "yes" if name in r.bottlenecks else ""])
    if pool_rows:
        parts.append(format_table(["pool", "staff", "load", "bottleneck"], pool_rows))
    done = sum(r.rates[t] for t in s.ending_transitions)
    offered = sum(r.source_rates.values()) if getattr(r, "source_rates", None) else None
    summary = f"jobs ended per {unit}: {fmt(done)}"
    if offered is not None:
        summary += f" of {fmt(offered)} arriving"
    summary += "; bottlenecks: " + (", ".join(r.bottlenecks) if r.bottlenecks else "none (inflow-limited)")
    parts.append(summary)
    parts.append("The fluid model ignores patience and randomness: run `fluidgap simulate` or "
                 "`fluidgap compare` for waiting, abandonment and service level.")
    return "\n\n".join(parts)


def _est(e, reps: int) -> str:
    text = fmt_estimate(e)
    return text if e is None or e.n == reps else f"{text} (n={e.n})"


def simulation_text(s: Scenario, r) -> str:
    unit = s.time_unit
    n = r.replications
    head = (f"{s.name}: simulation, {n} replications of [{fmt(r.warmup)}, {fmt(r.horizon)}] {unit}, "
            f"seed {r.seed}.\nEvery figure is a mean [95 % Student t interval] over the {n} "
            "replications (n= marks fewer, where a replication had nothing to measure).")
    parts = [head]
    parts.append(format_table(
        ["transition", f"rate per {unit}"],
        [[t, _est(v["rate"], n)] for t, v in r.transitions.items()],
    ))
    from desim import waiting_places

    rows = []
    for p in waiting_places(s):
        v = r.places[p]
        rows.append([p, _est(v["wait"], n), _est(v["queue"], n), _est(v["abandoned"], n),
                     _est(v["served_within"], n) if "served_within" in v else "-"])
    parts.append(format_table(
        ["waiting place", f"wait ({unit})", "queue", "abandoned share", "served within target"],
        rows))
    if r.pools:
        parts.append(format_table(
            ["pool", "busy fraction"], [[p, _est(v["busy"], n)] for p, v in r.pools.items()]))
    if r.sources:
        parts.append(format_table(
            ["source", "arrivals", "completed", "abandoned share", f"total wait ({unit})"],
            [[name, _est(v["arrivals"], n), _est(v["completed"], n),
              _est(v["abandoned_share"], n), _est(v["total_wait"], n)]
             for name, v in r.sources.items()]))
    if r.intervals is not None:
        rows = [[f"{fmt(row.start)}-{fmt(row.end)}", row.metric, row.name,
                 _est(_Row(row.mean, row.low, row.high, int(row.n)), n)]
                for row in r.intervals.itertuples(index=False)]
        parts.append(format_table(["interval", "metric", "where", "mean [95 % interval]"], rows,
                                  title=f"per interval ({unit}):"))
    if r.warnings:
        parts.append("\n".join(f"note: {w}" for w in r.warnings))
    return "\n\n".join(parts)


class _Row:
    __slots__ = ("mean", "low", "high", "n")

    def __init__(self, mean, low, high, n):
        self.mean, self.low, self.high, self.n = mean, low, high, n
