"""The ``phases`` and ``staff`` subcommands: handlers and their text.

Split from :mod:`compare.commands` to keep each module to one job; the handlers follow the same
pattern (load, call the library, return an :class:`~compare.commands.Outcome`).
"""

from __future__ import annotations

import math
import os

from .commands import (CAUTION, InputError, Outcome, _check_simulation_args, _executor, _load,
                       _Progress)
from .tables import fmt, fmt_estimate, format_table

__all__ = ["phases", "staff", "phases_text", "staff_text"]


def _parse_ranges(items, scenario) -> dict[str, tuple[float, float]]:
    out = {}
    for item in items or []:
        name, sep, span = item.partition("=")
        lo, sep2, hi = span.partition(":")
        try:
            lo_f, hi_f = float(lo), float(hi)
        except ValueError:
            raise InputError(f"fluidgap phases: --range expects POOL=LO:HI (got {item!r})") from None
        if not (sep and sep2) or name not in scenario.pools:
            raise InputError(f"fluidgap phases: --range expects POOL=LO:HI with a pool of the "
                             f"scenario (got {item!r})")
        if not 0 <= lo_f < hi_f:
            raise InputError(f"fluidgap phases: --range {name}: need 0 <= LO < HI (got {span})")
        out[name] = (lo_f, hi_f)
    return out


def _parse_costs(items, scenario) -> dict[str, float] | None:
    if not items:
        return None
    out = {}
    for item in items:
        name, sep, value = item.partition("=")
        try:
            cost = float(value)
        except ValueError:
            cost = math.nan
        if not sep or name not in scenario.pools or not cost >= 0:
            raise InputError("fluidgap staff: --cost expects POOL=C with a pool of the scenario "
                             f"and a cost >= 0 (got {item!r})")
        out[name] = cost
    return out


def phases(args) -> Outcome:
    from fluid.phases import phase_diagram

    from .phase_plot import phase_figure, phase_overlay
    from .report import write_report

    s = _load(args)
    for pool in args.axes:
        if pool not in s.pools:
            raise InputError(f"fluidgap phases: --axes names {pool!r}, not a pool of the "
                             f"scenario (pools: {', '.join(s.pools)})")
    if args.axes[0] == args.axes[1]:
        raise InputError("fluidgap phases: --axes needs two different pools")
    if args.of is not None and args.of not in s.transitions:
        raise InputError(f"fluidgap phases: --of {args.of!r} is not a transition of the scenario")
    ranges = _parse_ranges(args.range, s)
    opts = _check_simulation_args(args, s) if args.simulate else None
    diagram = phase_diagram(s, tuple(args.axes), of=args.of, ranges=ranges or None)
    overlay = None
    if args.simulate:
        progress = _Progress(opts["reps"] * 49, args.quiet, "replications")
        try:
            with _executor(args) as ex:
                overlay = phase_overlay(s, diagram, reps=opts["reps"], horizon=opts["horizon"],
                                        warmup=opts["warmup"], seed=opts["seed"],
                                        workers=opts["workers"], executor=ex, progress=progress,
                                        out=opts["out"], resume=opts["resume"])
        finally:
            progress.close()
    doc = diagram.to_json()
    if overlay is not None:
        doc["overlay"] = overlay.to_dict("records")
    text = phases_text(diagram, overlay)
    if args.png or args.report:
        fig = phase_figure(diagram, overlay=overlay)
        if args.png:
            tmp = f"{args.png}.tmp-{os.getpid()}"
            fig.savefig(tmp, format="png", dpi=120)
            os.replace(tmp, args.png)
            text += f"\n\nfigure written to {args.png}"
            doc["png"] = str(args.png)
        if args.report:
            tables = {"pieces": diagram.to_frame()}
            if overlay is not None:
                tables["overlay"] = overlay
            files = write_report(args.report, title=f"fluidgap phases: {s.name}",
                                 summary_lines=text.split("\n")[:3], tables=tables,
                                 figures={"phases": fig}, json_doc=doc, caution=CAUTION,
                                 write_png=True)
            text += f"\n\nreport written to {files.html}"
            doc["report"] = str(files.html)
    else:
        text += "\n\n(draw it with --png FILE or --report DIR)"
    doc["caution"] = CAUTION
    return Outcome(text=text + "\n\n" + CAUTION, json=doc)


def phases_text(d, overlay=None) -> str:
    a, b = d.axes
    unit = d.time_unit
    head = [f"{d.scenario_name}: fluid phase diagram of {d.of_label} over the staff of {a} and {b}",
            f"rate per {unit} = minimum over the pieces of const + coef_{a} x {a} + coef_{b} x {b}"
            if d.method == "lp" else
            "method: integrated counter equations on an integer grid (the LP does not apply: "
            "priorities, profiles or schedules); no exact pieces"]
    parts = ["\n".join(head)]
    if d.pieces:
        rows = [[p.label, fmt(p.const), fmt(p.coef[a]), fmt(p.coef[b]),
                 f"({fmt(p.witness[0], 3)}, {fmt(p.witness[1], 3)})"] for p in d.pieces]
        parts.append(format_table(["limiting", "const", f"coef {a}", f"coef {b}",
                                   f"a point inside ({a}, {b})"], rows))
    else:
        labels: dict[str, int] = {}
        for g in d.grid:
            labels[g.label] = labels.get(g.label, 0) + 1
        parts.append(format_table(["limiting", "grid points"], list(labels.items())))
    here = (d.staff[a], d.staff[b])
    parts.append(f"at the scenario's staff ({a} {fmt(here[0])}, {b} {fmt(here[1])}): "
                 f"{fmt(float(d.rate_at(*here)))} per {unit}; inflow-limited rate "
                 f"{fmt(d.inflow_rate)}")
    if overlay is not None and len(overlay):
        rows = [[int(r["a"]), int(r["b"]), fmt(r["fluid_rate"]),
                 fmt_estimate(_Est(r["sim_mean"], r["sim_low"], r["sim_high"])),
                 "yes" if r["optimistic"] else ""] for r in overlay.to_dict("records")]
        parts.append(format_table([a, b, "fluid rate", "simulated [95 % interval]",
                                   "fluid optimistic"], rows,
                                  title=f"simulated at integer staff ({int(overlay['n'].max())} "
                                  "replications per point, common random numbers):"))
    if d.notes:
        parts.append("\n".join(f"note: {n}" for n in d.notes))
    return "\n\n".join(parts)


class _Est:
    def __init__(self, mean, low, high):
        self.mean, self.low, self.high = mean, low, high


def staff(args) -> Outcome:
    from .staffing_search import staff_search

    s = _load(args)
    costs = _parse_costs(args.cost, s)
    opts = _check_simulation_args(args, s)
    progress = _Progress(opts["reps"] * 10, args.quiet or args.fluid_only, "replications")
    try:
        with _executor(args) as ex:
            result = staff_search(s, costs=costs, reps=opts["reps"], horizon=opts["horizon"],
                                  warmup=opts["warmup"], seed=opts["seed"],
                                  workers=opts["workers"], executor=ex, progress=progress,
                                  fluid_only=args.fluid_only, out=opts["out"],
                                  resume=opts["resume"])
    finally:
        progress.close()
    doc = result.to_json()
    doc["caution"] = CAUTION
    return Outcome(text=staff_text(s, result) + "\n\n" + CAUTION, json=doc)


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
