"""Text of the staff per interval (:class:`~compare.study.interval_staffing.IntervalStaffing`)
and of a shift plan (:class:`~compare.study.shift_plan.ShiftPlan`): the interval table, the
shift table, the costs against the flat plan, and the ``schedule:`` block to paste into the
scenario. Times in the scenario's time unit (clock times when the scenario has a clock)."""

from __future__ import annotations

import yaml

from ..study.interval_staffing import verdict
from .conventions import service_level_lines
from .tables import fmt, fmt_estimate, format_table

__all__ = ["clock", "interval_text", "interval_summary", "shift_plan_text", "shift_summary",
           "schedule_text", "scenario_with_plan"]


def clock(scenario, t: float) -> str:
    """``t`` as a clock time when the scenario has one (``fluid.clock``), else the number."""
    from fluid.clock import clock_label

    return clock_label(scenario, t)


def _conventions(s) -> list[str]:
    """What each service level in the tables measures (one paragraph), or nothing."""
    lines = service_level_lines(s.targets.service, s.time_unit)
    return ["\n".join(lines)] if lines else []


def _breaks(s, shift: str, start: float) -> str:
    """The off-duty spans inside one shift worked (clock times), "-" for none."""
    spans = s.shifts[shift].on_duty(start)
    gaps = [(a[1], b[0]) for a, b in zip(spans, spans[1:])]
    return ", ".join(f"{clock(s, lo)}-{clock(s, hi)}" for lo, hi in gaps) or "-"


def _shown(targets, estimates, judged) -> dict:
    """The targets the simulation measured (a metric missing from its table is left out)."""
    return {t: spec for t, spec in targets.items()
            if any((t, i) in estimates for i in judged)}


def _achieved(targets, estimates, i) -> list[str]:
    cells = []
    for t, spec in targets.items():
        e = estimates.get((t, i))
        mark = {"meets": "", "misses": " MISS", "no data": " (no data)"}[verdict(spec, e)]
        cells.append(("-" if e is None else fmt_estimate(e, 3)) + mark)
    return cells


def _target_heads(targets, unit) -> list[str]:
    heads = []
    for t, spec in targets.items():
        heads.append(f"{t} (goal {spec['goal']:g} within {spec['within']:g} {unit})"
                     if "goal" in spec else f"{t} (max {spec['max']:g})")
    return heads


def _times(n: int, word: str) -> str:
    return f"{n} {word}" + ("" if n == 1 else "s")


def _run_line(req) -> str:
    s = req.settings
    state = ("converged: the staff stopped changing" if req.converged
             else "NOT converged (iteration cap reached)")
    return (f"iterative staffing algorithm (practical variant of Feldman, Massey, Mandelbaum "
            f"and Whitt 2008): {_times(req.iterations, 'simulation')}, {state}; "
            f"{s['replications']} "
            f"replications each, seed {s['seed']} (common random numbers); intervals of "
            f"{req.step:g} {req.time_unit}; estimates are mean [95 % interval over "
            "replications] by arrival interval")


def interval_text(s, req) -> str:
    """The staff required per pool and interval and the service achieved with it."""
    pools = list(req.staff)
    shown = _shown(req.targets, req.estimates, req.judged)
    heads = ["interval", *[f"{p} start" for p in pools], *[f"{p} required" for p in pools],
             *_target_heads(shown, req.time_unit)]
    rows = [[f"{clock(s, i * req.step)}-{clock(s, (i + 1) * req.step)}",
             *[req.start[p][i] for p in pools], *[req.staff[p][i] for p in pools],
             *_achieved(shown, req.estimates, i)] for i in req.judged]
    parts = [f"{req.scenario_name}: staff required per interval", _run_line(req),
             *_conventions(s), format_table(heads, rows),
             "every interval meets its targets with confidence" if req.meets
             else "some interval does NOT meet its targets (marked MISS)"]
    if req.notes:
        parts.append("\n".join(f"note: {n}" for n in req.notes))
    return "\n\n".join(parts)


def interval_summary(req) -> list[str]:
    return [f"{req.scenario_name}: staff required per interval", _run_line(req),
            "every interval meets its targets with confidence" if req.meets
            else "some interval does NOT meet its targets"]


def schedule_text(plan) -> str:
    """The plan as a ``pools:`` block of schedules, to paste into the scenario."""
    lines = ["pools:"]
    for p, v in plan.staff.items():
        lines.append(f"  {p}:")
        lines.append(f"    schedule: {{step: {plan.step:g}, staff: [{', '.join(map(str, v))}]}}")
    return "\n".join(lines)


def _cost_line(plan) -> str:
    flat = ", ".join(f"{p} {n}" for p, n in plan.flat.items())
    saving = plan.flat_cost - plan.cost
    share = f" ({saving / plan.flat_cost:.1%} less)" if plan.flat_cost > 0 else ""
    return (f"shift plan cost {fmt(plan.cost)} (covering program {fmt(plan.cover_cost)}, LP "
            f"bound {fmt(plan.lp_bound)}, {_times(len(plan.repairs), 'shift')} added by the "
            "checks); flat "
            f"plan (peak requirement all day: {flat}) on the same shifts costs "
            f"{fmt(plan.flat_cost)}: the shift plan saves {fmt(saving)}{share}")


def shift_plan_text(s, plan) -> str:
    """Requirement, plan and achieved service per interval; the shift table; costs; the
    ``schedule:`` block."""
    req = plan.requirement
    pools = list(req.staff)
    shown = _shown(req.targets, plan.estimates, req.judged)
    heads = ["interval", *[f"{p} required" for p in pools], *[f"{p} plan" for p in pools],
             *_target_heads(shown, req.time_unit)]
    rows = [[f"{clock(s, i * req.step)}-{clock(s, (i + 1) * req.step)}",
             *[req.staff[p][i] for p in pools], *[plan.staff[p][i] for p in pools],
             *_achieved(shown, plan.estimates, i)] for i in req.judged]
    shifts = [[r["shift"], r["pool"], clock(s, r["start"]), clock(s, r["end"]),
               _breaks(s, r["shift"], r["start"]), r["agents"], fmt(r["cost"])]
              for r in plan.shift_rows()]
    verdict_line = ("the shift plan meets every interval's targets with confidence"
                    if plan.meets else "the shift plan does NOT meet every interval's targets")
    flat_line = ("the flat plan meets every interval with confidence" if plan.flat_meets
                 else "the flat plan does NOT meet every interval (simulated)")
    parts = [f"{req.scenario_name}: shift plan", _run_line(req), *_conventions(s),
             format_table(heads, rows, title="staff per interval (achieved: the shift plan, "
                          f"{_times(plan.checks, 'simulation')} with the same seed):"),
             format_table(["shift", "pool", "start", "end", "off duty", "agents", "cost"], shifts,
                          title="shifts worked:"),
             _cost_line(plan), verdict_line + "; " + flat_line]
    if plan.repairs:
        parts.append("added by the checks: " + "; ".join(plan.repairs))
    parts.append("schedule of the plan (paste into the scenario, or use --write-scenario):\n"
                 + schedule_text(plan))
    if plan.notes:
        parts.append("\n".join(f"note: {n}" for n in plan.notes))
    return "\n\n".join(parts)


def shift_summary(plan) -> list[str]:
    return [f"{plan.scenario_name}: shift plan", _run_line(plan.requirement), _cost_line(plan),
            "the shift plan meets every interval's targets with confidence" if plan.meets
            else "the shift plan does NOT meet every interval's targets"]


def scenario_with_plan(scenario, plan) -> str:
    """The scenario's document (overrides applied) with every pool on the plan's schedule, as
    YAML text (comments of the original file are not kept)."""
    doc = scenario.to_document()
    pools = doc.setdefault("pools", {})
    for p, v in plan.staff.items():
        entry = pools.get(p)
        new = ({k: x for k, x in entry.items() if k not in ("staff", "schedule")}
               if isinstance(entry, dict) else {})
        new["schedule"] = {"step": plan.step, "staff": list(v)}
        pools[p] = new
    head = (f"# {scenario.name}: with the shift plan of `fluidgap staff --shifts` "
            f"(cost {fmt(plan.cost)}) as the pools' schedules\n")
    return head + yaml.safe_dump(doc, sort_keys=False, default_flow_style=None, width=100)


def day_frames(result) -> dict:
    """Tables of the report: ``intervals`` (one row per judged interval: start, end, per pool
    the required staff, the plan's staff and the current staff when there is a plan, per target
    mean, low, high, n and verdict of the service achieved) and, for a plan, ``shifts``."""
    import pandas as pd

    plan = result if hasattr(result, "requirement") else None
    req = plan.requirement if plan is not None else result
    estimates = plan.estimates if plan is not None else req.estimates
    rows = []
    for i in req.judged:
        row = {"interval": i, "start": i * req.step, "end": (i + 1) * req.step}
        for p in req.staff:
            row[f"{p}_required"] = req.staff[p][i]
            if plan is not None:
                row[f"{p}_plan"] = plan.staff[p][i]
                row[f"{p}_current"] = plan.current[p][i]
        for t, spec in req.targets.items():
            e = estimates.get((t, i))
            row |= {f"{t}_mean": e.mean if e else float("nan"),
                    f"{t}_low": e.low if e else float("nan"),
                    f"{t}_high": e.high if e else float("nan"),
                    f"{t}_n": e.n if e else 0, f"{t}_verdict": verdict(spec, e)}
        rows.append(row)
    tables = {"intervals": pd.DataFrame(rows)}
    if plan is not None:
        tables["shifts"] = pd.DataFrame(plan.shift_rows(),
                                        columns=["shift", "pool", "start", "end", "agents",
                                                 "cost"])
    return tables


def day_report(directory, result, figure, *, json_doc: dict, caution: str, title: str,
               summary: list[str]):
    """The report of ``fluidgap staff`` per interval or ``--shifts``: the tables of
    :func:`day_frames`, the figure (also as PNG), the JSON."""
    from .html import write_report

    return write_report(directory, title=title, summary_lines=summary, tables=day_frames(result),
                        figures={"shift_plan" if hasattr(result, "requirement")
                                 else "interval_staff": figure},
                        json_doc=json_doc, caution=caution, write_png=True)
