"""Text and JSON shapes of results for the command line."""

from __future__ import annotations

import math
from typing import Any

from fluid.scenario import Scenario

from ..study.gap import GAP_CONVENTION, gap_text
from .conventions import service_level_lines
from .tables import fmt, fmt_estimate, format_table

#: Printed with every result and in every report (staffing can affect people's safety).
CAUTION = (
    "Decision support under the model's assumptions. Where staffing affects people's safety "
    "(emergency or health lines), follow local regulations and professional practice."
)

__all__ = ["CAUTION", "inspect_text", "inspect_json", "fluid_text", "simulation_text", "describe_dist",
           "comparison_text", "comparison_summary", "station_text", "station_summary",
           "scale_text", "scale_summary", "flags_text"]


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
    day = f", {src.random_rate.describe()}" if src.rate_varies else ""
    return src.arrivals.describe(fmt) + day


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


def inspect_text(s: Scenario, invariants: list[dict], uncovered: list[str],
                 leaks: dict[str, list[str]] | None = None) -> str:
    """The net's summary; ``leaks`` (from :func:`fluid.invariants.patience_leaks`) names the
    pools that lose agents through patience exits."""
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
    exits = _patience_exits(s)
    if exits:
        # each is a column of the incidence matrix the invariants above come from
        inv_lines.append("patience exits (in the invariants; an abandoning job takes along "
                         "whatever waits with it):")
        inv_lines += [f"  {p} -> {to or 'leaves the net'}" for p, to in exits.items()]
    if uncovered:
        inv_lines.append("pools on no invariant (agents can leak or multiply): " + ", ".join(uncovered))
    for pool, places in (leaks or {}).items():
        inv_lines.append("warning: " + _leak_line(pool, places))
    parts.append("\n".join(inv_lines))
    if s.targets.service or s.targets.abandonment_max is not None:
        rows = [[p, f"{fmt(t.goal * 100, 3)} % {t.describe(s.time_unit)}"]
                for p, t in s.targets.service.items()]
        if s.targets.abandonment_max is not None:
            rows.append(["abandonment", f"at most {fmt(s.targets.abandonment_max * 100, 3)} %"])
        parts.append(format_table(["target", "goal"], rows))
    if s.shifts:
        parts.append(_shift_patterns(s))
    return "\n\n".join(parts)


def _shift_patterns(s: Scenario) -> str:
    """The shift patterns `staff --shifts` may mix: pool, allowed starts, length, breaks, cost
    (times in the scenario's unit, starts as clock times when it has a clock)."""
    from fluid.clock import clock_label

    def starts(t) -> str:
        first, last = clock_label(s, t.starts[0]), clock_label(s, t.starts[-1])
        if len(t.starts) == 1:
            return first
        steps = {round(b - a, 9) for a, b in zip(t.starts, t.starts[1:])}
        every = f" every {fmt(steps.pop())} {s.time_unit}" if len(steps) == 1 else ""
        return f"{len(t.starts)} from {first} to {last}{every}"

    rows = [[t.name, t.pool, starts(t), f"{fmt(t.length)} {s.time_unit}",
             ", ".join(f"{fmt(b.length)} after {fmt(b.after)}" for b in t.breaks) or "-",
             fmt(t.cost)] for t in s.shifts.values()]
    return format_table(["shift", "pool", "starts", "length", "breaks", "cost per agent"], rows,
                        title="shift patterns (for `fluidgap staff --shifts`):")


def _patience_exits(s: Scenario) -> dict[str, str | None]:
    """``{place: abandon_to or None}`` for the places with patience (the invariants' exits)."""
    return {n: p.abandon_to for n, p in s.places.items() if p.patience is not None}


def _leak_line(pool: str, places: list[str]) -> str:
    # the words of fluid.invariants.leak_message, which the loader's warning uses too
    from fluid.invariants import leak_message

    return leak_message(pool, places)


def inspect_json(s: Scenario, invariants: list[dict], uncovered: list[str],
                 leaks: dict[str, list[str]] | None = None) -> dict:
    return {
        "scenario": s.name,
        "file": s.file,
        "time_unit": s.time_unit,
        "sources": {n: {"kind": src.arrivals.kind, "into": src.into,
                        "mean_rate": src.arrivals.mean_rate(s.run.horizon)}
                    for n, src in s.sources.items()},
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
        "patience_exits": _patience_exits(s),
        "agent_leaks": {pool: {"places": list(places), "message": _leak_line(pool, places)}
                        for pool, places in (leaks or {}).items()},
        "targets": {
            "service": {p: t.to_json(s.time_unit) for p, t in s.targets.service.items()},
            "abandonment_max": s.targets.abandonment_max,
        },
        # (times in the scenario's unit from t = 0; breaks off duty, after the shift's start)
        "shifts": {n: {"pool": t.pool, "starts": list(t.starts), "length": t.length,
                       "breaks": [{"after": b.after, "length": b.length} for b in t.breaks],
                       "cost": t.cost} for n, t in s.shifts.items()},
    }


def fluid_text(s: Scenario, r) -> str:
    unit = s.time_unit
    head = f"{s.name}: {getattr(r, 'model', '') or 'fluid model'}"
    if getattr(r, "rounding", 0):
        head += f"; hold times rounded to the grid by at most {fmt(100 * r.rounding, 3)} %"
    rows = [[t, fmt(rate), "yes" if s.ends_job(t) else ""] for t, rate in r.rates.items()]
    parts = [head, format_table(["transition", f"rate per {unit}", "ends job"], rows)]
    pool_rows = []
    for name in s.pools:
        load = r.load.get(name)
        offered = (getattr(r, "offered_load", None) or {}).get(name)
        pool_rows.append([name, fmt(s.pools[name].mean_staff(s.run.horizon)), fmt(load, 3),
                          fmt(offered, 3), "yes" if name in r.bottlenecks else ""])
    if pool_rows:
        parts.append(format_table(["pool", "staff", "load", "offered load", "bottleneck"],
                                  pool_rows))
        parts.append("load: agents busy at the fluid rates over staff (what the fluid routes "
                     "through the pool, overflow included); offered load: the arrivals' work "
                     "with every pool unlimited, over staff")
    done = sum(r.rates[t] for t in s.ending_transitions)
    offered = sum(r.source_rates.values()) if getattr(r, "source_rates", None) else None
    summary = f"jobs ended per {unit}: {fmt(done)}"
    if offered is not None:
        summary += f" of {fmt(offered)} arriving"
    summary += "; bottlenecks: " + (", ".join(r.bottlenecks) if r.bottlenecks else "none (inflow-limited)")
    parts.append(summary)
    places = getattr(r, "places", {}) or {}
    if places:
        parts.append(format_table(
            ["waiting place", "state", f"inflow per {unit}", f"served per {unit}", "abandoned",
             "queue", f"wait of served ({unit})"],
            [[p, fp.state, fmt(fp.inflow), fmt(fp.capacity), _pct(fp.abandoned), fmt(fp.queue),
              fmt(fp.wait_served)] for p, fp in places.items()],
            title="waiting places (fluid; steady state, or means over the window "
                  "for a time-varying scenario):"))
    if any(p.schedule is not None for p in s.pools.values()):
        from .day_text import schedule_text

        parts.append(schedule_text(s))
    parts.append("The fluid model has no randomness: run `fluidgap simulate` or `fluidgap compare` "
                 "for the simulated waiting, abandonment and service level with intervals.")
    return "\n\n".join(parts)


def _est(e, reps: int) -> str:
    text = fmt_estimate(e)
    return text if e is None or e.n == reps else f"{text} (n={e.n})"


def simulation_text(s: Scenario, r) -> str:
    unit = s.time_unit
    n = r.replications
    head = (f"{s.name}: simulation, {n} replications of [{fmt(r.warmup)}, {fmt(r.horizon)}] {unit}, "
            f"seed {r.seed}.\nEvery figure is a mean [95 % Student t interval, cut at its natural "
            f"bounds: shares and busy in [0, 1], the rest at least 0] over the {n} "
            "replications (n= marks fewer, where a replication had nothing to measure).")
    parts = [head]
    parts.append(format_table(
        ["transition", f"rate per {unit}"],
        [[t, _est(v["rate"], n)] for t, v in r.transitions.items()],
    ))
    from fluid.structure import waiting_places

    rows = []
    for p in waiting_places(s):
        v = r.places[p]
        rows.append([p, _est(v["wait"], n), _est(v["queue"], n), _est(v["abandoned"], n),
                     _est(v["served_within"], n) if "served_within" in v else "-"])
    parts.append(format_table(
        ["waiting place", f"wait ({unit})", "queue", "abandoned share", "served within target"],
        rows))
    if s.targets.service:
        lines = service_level_lines(s.targets.service, unit)
        if r.intervals is not None:
            lines.append("per interval, service level, abandonment and wait count each job in "
                         "the interval it arrived in")
        parts.append("\n".join(lines))
    spread = [m for p in waiting_places(s)[:1] for m in r.places[p] if m.startswith("wait_p")]
    if spread:
        # (the waits of every job that left, taken or abandoning, as `wait` above; the ASA counts
        # the jobs taken only)
        rows = []
        for p in waiting_places(s):
            v = r.places[p]
            rows.append([p, "all who left", _est(v["wait"], n),
                         *(_est(v[m], n) for m in spread)])
            # (the served jobs' waits and the abandoners' times apart: a service level counts
            # them by its convention, so neither is hidden in the other)
            for who, prefix, mean in (("taken", "served_", "asa"), ("abandoning", "abandoned_",
                                                                     None)):
                if any(f"{prefix}{m}" in v for m in spread):
                    rows.append(["", who, _est(v[mean], n) if mean else "",
                                 *(_est(v.get(f"{prefix}{m}", math.nan), n) for m in spread)])
        parts.append(format_table(
            ["waiting place", "jobs", f"mean ({unit})", *(m.removeprefix("wait_") for m in spread)],
            rows,
            title=f"waits ({unit}): pNN = NN-th percentile of the waits, per replication, then "
                  "averaged;\n  all who left (taken or abandoning), the jobs taken (their mean is "
                  "the ASA, average speed of answer),\n  and the abandoners' times to abandon:"))
    if r.pools:
        parts.append(format_table(
            ["pool", "busy fraction"], [[p, _est(v["busy"], n)] for p, v in r.pools.items()]))
    if r.sources:
        parts.append(format_table(
            ["source", "arrivals", "completed", "abandoned share", f"total wait ({unit})"],
            [[name, _est(v["arrivals"], n), _est(v["completed"], n),
              _est(v["abandoned_share"], n), _est(v["total_wait"], n)]
             for name, v in r.sources.items()]))
        if any("callers_served" in v for v in r.sources.values()):
            parts.append(format_table(
                ["source", "served", "abandoned", "lost"],
                [[name] + [_est(v[m], n) if m in v else "-"
                           for m in ("callers_served", "callers_abandoned", "callers_lost")]
                 for name, v in r.sources.items()],
                title="per caller (shares of the callers who arrived in the window and ended "
                      "by its end, each counted once):"))
    if r.intervals is not None and len(r.intervals):
        parts.append(_day_section(s, r.intervals, n, report=False))
    if r.warnings:
        parts.append("\n".join(f"note: {w}" for w in r.warnings))
    return "\n\n".join(parts)


def _day_section(s: Scenario, tidy, reps: int, report: bool = True) -> str:
    """The per-interval section: the wide table, one line per interval (see
    :mod:`compare.present.day_text`)."""
    from ..study.day_table import day_table
    from .day_text import day_text

    return day_text(s, day_table(s, tidy), reps, report)


class _Row:
    __slots__ = ("mean", "low", "high", "n")

    def __init__(self, mean, low, high, n):
        self.mean, self.low, self.high, self.n = mean, low, high, n


# --- compare, station, scale ---------------------------------------------------------------------

FLAG_TITLES = {
    "throughput_optimistic": "fluid throughput optimistic",
    "hidden_congestion": "hidden congestion",
    "abandonment_underestimated": "abandonment underestimated",
    "near_critical": "near critical load",
    "target_missed": "target missed",
    "unstable": "unstable",
    "rate_uncertainty": "rate uncertainty",
    "interval_target": "target missed in intervals",
}


def _pct(x: float) -> str:
    return fmt(100 * x, 3) + " %"


def flags_text(flags, no_verdict: str | None = None) -> str:
    """Flags grouped by kind; a throughput shortfall inherited by many transitions downstream
    is listed once with the transitions it reaches. ``no_verdict``: the line said instead when
    no flag was judged (fewer than two replications)."""
    if no_verdict is not None:
        return no_verdict
    if not flags:
        return "flags: none (the fluid answer holds within the simulation's intervals)"
    import textwrap

    lines: list[str] = []
    header = f"flags ({len(flags)}):"
    by_kind: dict[str, list] = {}
    for f in flags:
        by_kind.setdefault(f.kind, []).append(f)
    for kind, group in by_kind.items():
        title = FLAG_TITLES.get(kind, kind)
        if kind == "throughput_optimistic" and len(group) > 2:
            roots = [f for f in group if "begins upstream" not in f.message]
            inherited = [f.where for f in group if "begins upstream" in f.message]
            for f in roots:
                lines.append(f"[{title}] {f.where}: {f.message}")
            if inherited:
                lines.append(f"[{title}] also below the fluid rate downstream of the above: "
                             + ", ".join(inherited))
            continue
        for f in group:
            lines.append(f"[{title}] {f.where}: {f.message}")
    wrapped = [textwrap.fill(line, width=100, initial_indent="  ", subsequent_indent="      ")
               for line in lines]
    return "\n".join([header, *wrapped])


def comparison_summary(s: Scenario, c) -> list[str]:
    t = c.gaps.totals.set_index("metric")
    out = t.loc["output_rate"]
    lines = [f"{s.name}: {c.simulation.replications} replications of "
             f"[{fmt(c.settings.warmup)}, {fmt(c.settings.horizon)}] {s.time_unit}, seed "
             f"{c.settings.seed}; every simulated figure is a mean [95 % interval] over the "
             "replications (Student t, cut at its natural bounds: shares and busy in [0, 1], the "
             "rest at least 0).",
             f"jobs ended per {s.time_unit}: fluid {fmt(out['fluid'])}, simulated "
             f"{fmt(out['mean'])} [{fmt(out['low'])}, {fmt(out['high'])}]"]
    if "abandonment" in t.index:
        ab = t.loc["abandonment"]
        lines.append(f"abandonment: fluid {_pct(ab['fluid'])}, simulated {_pct(ab['mean'])} "
                     f"[{_pct(ab['low'])}, {_pct(ab['high'])}]")
    lines += service_level_lines(s.targets.service, s.time_unit)
    kinds = sorted({f.kind for f in c.flags})
    if not getattr(c, "verdicts", True):
        lines.append("flags: not judged (no interval from one replication)")
    else:
        lines.append("flags: " + (", ".join(kinds) if kinds else "none"))
    return lines


def _gap_rows(frame, name_col: str, extra=()):
    rows = []
    for r in frame.to_dict("records"):
        est = _Row(r["mean"], r["low"], r["high"], int(r["n"]))
        rows.append([r[name_col], *[r[e] for e in extra], fmt(r["fluid"]), fmt_estimate(est),
                     gap_text(r["fluid"], r["mean"])])
    return rows


def _no_verdict(c) -> str | None:
    """The comparison's no-verdict line, or None when its flags were judged."""
    if getattr(c, "verdicts", True):
        return None
    from ..study.comparison import no_verdict

    return no_verdict(c.simulation.replications)


def _rate_section(rate, n: int) -> str:
    """Each target with the day factors and without them (same seed), and the share of the
    replications (days) that met it each way: what rate uncertainty alone does to the plan."""
    cvs = ", ".join(f"{src} cv {v['cv']:g}" for src, v in rate.sources.items())
    rows = [[t.target, ("max " if t.target == "abandonment" else "goal ") + fmt(t.goal),
             _est(t.with_factor, n), _est(t.without_factor, n),
             f"{fmt(100 * t.days_meeting_with, 3)} %", f"{fmt(100 * t.days_meeting_without, 3)} %"]
            for t in rate.targets]
    return format_table(
        ["target", "goal", "with the day factor", "without it", "days meeting, with",
         "without"], rows,
        title=f"rate uncertainty (day factor per replication: {cvs}; the same seed without "
              f"it):\n  days meeting = share of the {n} replications whose own value meets the "
              "target")


def comparison_text(s: Scenario, c) -> str:
    unit = s.time_unit
    parts = ["\n".join(comparison_summary(s, c)[:-1]), flags_text(c.flags, _no_verdict(c)),
             GAP_CONVENTION]
    parts.append(format_table(
        ["transition", f"fluid rate per {unit}", "simulated [95 % interval]", "gap"],
        _gap_rows(c.gaps.transitions, "transition")))
    parts.append(format_table(
        ["waiting place", "metric", "fluid state", "fluid", "simulated [95 % interval]", "gap"],
        _gap_rows(c.gaps.places, "place", extra=("metric", "state"))))
    if len(c.gaps.pools):
        parts.append(format_table(
            ["pool", "staff", "fluid load", "fluid busy", "simulated busy [95 % interval]", "gap"],
            [[r[0], fmt(row["staff"]), fmt(row["load"], 3), *r[1:]]
             for r, row in zip(_gap_rows(c.gaps.pools, "pool"),
                               c.gaps.pools.to_dict("records"))]))
    if c.transient is not None and len(c.transient):
        parts.append(_day_section(s, c.transient, c.simulation.replications))
    if c.rate.targets:
        parts.append(_rate_section(c.rate, c.simulation.replications))
    notes = list(c.notes)  # (they carry the simulation's warnings too)
    scheduled = [r for r, p in s.pools.items() if p.schedule is not None]
    if scheduled and len(c.gaps.pools):
        notes.append(f"the pool table's staff and fluid load replace the schedule of "
                     f"{', '.join(scheduled)} by its mean over the horizon; the simulation and "
                     "the fluid trajectory follow the schedule"
                     + (" (per interval above)" if c.transient is not None else ""))
    if notes:
        parts.append("\n".join(f"note: {n}" for n in notes))
    return "\n\n".join(parts)


def station_summary(r) -> list[str]:
    agree = sum(c.agrees for c in r.checks)
    sim = r.simulation
    head = (f"station: {r.servers} agents, arrival rate {fmt(r.arrival_rate)}, mean hold "
            f"{fmt(r.mean_hold)}, hold cv {fmt(r.hold_cv)}")
    if r.patience_mean is not None:
        head += f", mean patience {fmt(r.patience_mean)}"
    if r.class_rates:
        head += ", priority classes " + " > ".join(fmt(x) for x in r.class_rates)
    return [head,
            f"exact model: {r.model}; {sim.replications} replications of [{fmt(sim.warmup)}, "
            f"{fmt(sim.horizon)}], seed {sim.seed}",
            f"{agree} of {len(r.checks)} checks agree (formula inside the simulated "
            f"{fmt(100 * r.level, 4)} % interval: Bonferroni over the {len(r.checks)} checks, so "
            f"a correct simulator passes them all in at least "
            f"{fmt(100 * r.family_wise_level, 3)} % of runs)"]


def station_text(r) -> str:
    rows = [[c.metric, c.where, fmt(c.formula), fmt_estimate(c.simulation),
             "yes" if c.agrees else "NO", c.source] for c in r.checks]
    rows += [[c.metric, c.where, fmt(c.formula), fmt_estimate(c.simulation), "(not judged)",
              c.source] for c in r.informative]
    parts = ["\n".join(station_summary(r)),
             format_table(["metric", "where", "formula",
                           f"simulated [{fmt(100 * r.level, 4)} % interval"
                           + ("; not judged: 95 %]" if r.informative else "]"),
                           "agrees",
                           "source"], rows)]
    if any(c.metric == "service_level" for c in (*r.checks, *r.informative)):
        parts.append("\n".join(service_level_lines(r.scenario.targets.service,
                                                   r.scenario.time_unit)))
    if r.notes:
        parts.append("\n".join(f"note: {n}" for n in r.notes))
    return "\n\n".join(parts)


def scale_summary(r) -> list[str]:
    lines = [f"{r.scenario_name}: scale study, factors {', '.join(fmt(k) for k in r.factors)}; "
             f"{r.replications} replications each of [{fmt(r.warmup)}, {fmt(r.horizon)}] "
             f"{r.time_unit}, seed {r.seed} (common random numbers)"]
    lines.append(f"staffing: {r.staffing}")
    if r.prediction:
        lines.append(f"predicted: {r.prediction['statement']}")
    for m, f in r.fits.items():
        if f.exponent == f.exponent:
            boot = (f"bootstrap 95 % interval [{fmt(f.low, 3)}, {fmt(f.high, 3)}] over "
                    f"{f.resamples} resamples of the replications" if f.low == f.low
                    else "no bootstrap interval")
            lines.append(f"{m}: decays as k^{fmt(f.exponent, 3)} (least-squares standard error "
                         f"{fmt(f.stderr, 2)} from {f.points} points; {boot})")
        else:
            lines.append(f"{m}: no fit ({'; '.join(f.notes)})")
    return lines


def scale_text(r) -> str:
    cols = [c for c in ("factor", "arrivals", "fluid_output", "throughput_shortfall",
                        "abandonment_gap", "max_transition_gap", "max_load",
                        "unstable_replications") if c in r.table]
    rows = []
    for rec in r.table.to_dict("records"):
        row = []
        for c in cols:
            v = rec[c]
            if c in ("throughput_shortfall", "abandonment_gap") and v == v:
                v = (f"{fmt(v, 3)} [{fmt(rec[c + '_low'], 3)}, {fmt(rec[c + '_high'], 3)}]")
            row.append(v if isinstance(v, str) else fmt(v, 4))
        rows.append(row)
    heads = {"throughput_shortfall": "throughput shortfall [95 % interval]",
             "abandonment_gap": "abandonment gap [95 % interval]",
             "max_transition_gap": "largest transition gap (of the means)",
             "fluid_output": "fluid output", "max_load": "largest load",
             "unstable_replications": "unstable reps"}
    parts = ["\n".join(scale_summary(r)),
             format_table([heads.get(c, c) for c in cols], rows,
                          title=f"per factor ({r.replications} replications each):")]
    if r.notes:
        parts.append("\n".join(f"note: {n}" for n in r.notes))
    return "\n\n".join(parts)
