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

    from .phase_overlay import phase_overlay
    from .phase_plot import phase_figure

    s = _load(args)
    if len(args.axes) not in (1, 2):
        raise InputError(f"fluidgap phases: --axes takes one or two pools (got {len(args.axes)})")
    for pool in args.axes:
        if pool not in s.pools:
            raise InputError(f"fluidgap phases: --axes names {pool!r}, not a pool of the "
                             f"scenario (pools: {', '.join(s.pools)})")
    if len(set(args.axes)) != len(args.axes):
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
    tables = {"pieces" if diagram.pieces else "grid": diagram.to_frame()}
    if overlay is not None:
        tables["overlay"] = overlay
    return _finish(args, text, doc, lambda: phase_figure(diagram, overlay=overlay), "phases",
                   title=f"fluidgap phases: {s.name}", summary=text.split("\n")[:3],
                   tables=tables)


def _finish(args, text: str, doc: dict, figure, name: str, *, title: str, summary: list[str],
            tables: dict) -> Outcome:
    """Add the caution; with --png FILE or --report DIR draw ``figure()`` and write it (the
    report's result.json is the command's JSON document)."""
    from .report import write_report

    doc["caution"] = CAUTION
    if args.png or args.report:
        fig = figure()
        if args.png:
            tmp = f"{args.png}.tmp-{os.getpid()}"
            fig.savefig(tmp, format="png", dpi=120)
            os.replace(tmp, args.png)
            text += f"\n\nfigure written to {args.png}"
            doc["png"] = str(args.png)
        if args.report:
            doc["report"] = os.path.join(args.report, "report.html")
            files = write_report(args.report, title=title, summary_lines=summary,
                                 tables=tables, figures={name: fig}, json_doc=doc,
                                 caution=CAUTION, write_png=True)
            text += f"\n\nreport written to {files.html}"
    else:
        text += "\n\n(draw it with --png FILE or --report DIR)"
    return Outcome(text=text + "\n\n" + CAUTION, json=doc)


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


def staff(args) -> Outcome:
    from .staff_plot import staffing_figure
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
    fp = result.fluid_plan
    pools = fp.to_frame().rename(columns={"staff": "fluid_plan"})
    pools["plan"] = [result.plan[p] for p in pools["pool"]]
    tables = {"fluid_plan": pools}
    if result.tried:
        tables = {"plans": result.to_frame()} | tables
    summary = [f"{result.scenario_name}: staffing ({result.method})",
               f"fluid plan: {_staff_line(fp.staff)} (cost {fmt(fp.cost)})",
               f"plan: {_staff_line(result.plan)} (cost {fmt(result.plan_cost)})"
               + ("" if result.meets is None else "; meets every target with confidence"
                  if result.meets else "; does NOT meet every target")]
    return _finish(args, staff_text(s, result), doc, lambda: staffing_figure(result), "staffing",
                   title=f"fluidgap staff: {s.name}", summary=summary, tables=tables)


def _staff_line(staff) -> str:
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
