"""``fluidgap staff`` on a day: staff per pool and interval (a scenario with a profile or a
schedule, or ``--interval``), and with ``--shifts`` the cheapest shift plan, optionally written
into a copy of the scenario (``--write-scenario FILE``)."""

from __future__ import annotations

import functools

from ..present.text import CAUTION
from .outcome import InputError, Outcome, finish
from .run_options import simulation

__all__ = ["staff_day", "wants_day"]


def wants_day(args, s) -> bool:
    """True when ``fluidgap staff`` staffs per interval: ``--shifts``, ``--write-scenario`` or
    ``--interval`` given, or a scenario with a profile, trace or schedule (not ``--fluid-only``,
    which keeps the flat fluid plan)."""
    if args.fluid_only:
        if args.shifts or args.write_scenario:
            raise InputError("fluidgap staff: --shifts and --write-scenario simulate the plan: "
                             "leave out --fluid-only")
        return False
    return bool(args.shifts or args.write_scenario or args.interval is not None
                or s.has_time_variation)


def _check(args, s) -> None:
    cmd = "fluidgap staff"
    if args.cost:
        raise InputError(f"{cmd}: --cost is for the flat search (one staff level per pool); "
                         "staffing per interval counts agents, and a shift plan the shifts' "
                         "own cost")
    if args.write_scenario and not args.shifts:
        raise InputError(f"{cmd}: --write-scenario writes a shift plan: give --shifts too")
    if args.shifts and not s.shifts:
        raise InputError(f"{cmd}: --shifts needs shift patterns in the scenario (the key "
                         "shifts:, see the README)")
    if not s.targets.service and s.targets.abandonment_max is None:
        raise InputError(f"{cmd}: the scenario sets no targets: nothing to staff each "
                         "interval for")
    if args.max_iterations is not None and args.max_iterations < 1:
        raise InputError(f"{cmd}: --max-iterations must be at least 1")


def staff_day(args, s) -> Outcome:
    """The per-interval staffing, or with ``--shifts`` the shift plan."""
    from desim.settings import expected_arrivals
    from fluid.errors import ScenarioError

    from ..formulas.shift_cover import CoverError
    from ..present.shift_figure import shift_figure
    from ..present.shift_text import (day_report, interval_summary, interval_text,
                                      scenario_with_plan, shift_plan_text, shift_summary)
    from ..study.interval_staffing import DEFAULT_ITERATIONS, interval_staff
    from ..study.shift_plan import DEFAULT_REPAIRS, shift_plan

    _check(args, s)
    iterations = args.max_iterations or DEFAULT_ITERATIONS
    runs = iterations + (DEFAULT_REPAIRS + 2 if args.shifts else 0)
    try:
        with simulation(args, s.run, runs_per_replication=runs,
                        arrivals=lambda h: expected_arrivals(s, h),
                        min_replications=2) as (settings, progress):
            if args.shifts:
                result = shift_plan(s, settings, step=args.interval, progress=progress,
                                    max_iterations=iterations)
            else:
                result = interval_staff(s, settings, step=args.interval, progress=progress,
                                        max_iterations=iterations)
    except CoverError as exc:
        raise InputError(f"fluidgap staff --shifts: {s.file}: shifts: {exc}") from None
    except ValueError as exc:
        if isinstance(exc, (ScenarioError, InputError)):  # (they name the command already)
            raise
        raise InputError(f"fluidgap staff: {exc}") from None
    doc = result.to_json()
    if args.shifts:
        text, summary = shift_plan_text(s, result), shift_summary(result)
    else:
        text, summary = interval_text(s, result), interval_summary(result)
    if args.write_scenario:
        from ..present.swap import replace_file

        try:
            replace_file(args.write_scenario, scenario_with_plan(s, result).encode())
        except OSError as exc:
            raise InputError(f"fluidgap staff: --write-scenario {args.write_scenario}: cannot "
                             f"write ({exc.strerror or exc})") from None
        text += f"\n\nscenario with the plan written to {args.write_scenario}"
        doc["written_scenario"] = str(args.write_scenario)
    figure = functools.cache(lambda: shift_figure(result, scenario=s))
    title = f"fluidgap staff{' --shifts' if args.shifts else ''}: {s.name}"
    return finish(args, text, doc, figure=figure,
                  report=lambda d: day_report(d, result, figure(), json_doc=doc,
                                              caution=CAUTION, summary=summary, title=title))
