"""``fluidgap fit``: call records or interval counts to a scenario (design.md §5).

Reads the CSV file, fits (:mod:`compare.study.fit_records`, :mod:`compare.study.fit_counts`),
writes the scenario with ``--write-scenario FILE`` (whole, atomically) and the figures and
tables with ``--report DIR``. Every problem with the input is one line and exit code 2, and
nothing is written before everything is computed.
"""

from __future__ import annotations

import argparse
import re

from .flag_values import at_least_one, finite
from .outcome import InputError, Outcome, finish

__all__ = ["add_fit_parser", "fit"]

_CLOCK = re.compile(r"(\d{1,2}):(\d{2})\Z")


def add_fit_parser(sub, input_limits) -> None:
    """The ``fit`` subcommand and its flags (``input_limits``: the parser's limit flags)."""
    p = sub.add_parser("fit", help="fit arrivals, holds and patience from call records (or "
                       "interval counts) and write them as a scenario")
    p.add_argument("data", metavar="RECORDS.csv",
                   help="call records, one row per call (or interval counts with --counts)")
    p.add_argument("--counts", action="store_true",
                   help="the file holds interval counts over days (wide: a row per day and a "
                   "column per interval; long: day, interval and count columns)")
    p.add_argument("--time-unit", default="min", dest="time_unit", metavar="UNIT",
                   help="the scenario's time unit; timestamps convert to s, min or h "
                   "(default min)")
    p.add_argument("--step", type=finite, metavar="STEP",
                   help="interval of the arrival profile, in the time unit (default 30 min; "
                   "for counts with timestamps: their spacing)")
    p.add_argument("--day-start", dest="day_start", metavar="T",
                   help="start of the profile: HH:MM for timestamps, a number otherwise "
                   "(default: the first arrival, rounded down to a step)")
    for name, what in (("arrival", "when the caller joined the queue"),
                       ("answered", "when the call was answered (empty if not)"),
                       ("ended", "when the call ended (for an unanswered caller without an "
                        "abandoned column: when the caller gave up)"),
                       ("abandoned", "when an unanswered caller gave up (optional column)")):
        p.add_argument(f"--{name}", default=name, metavar="COL",
                       help=f"records: the column saying {what} (default {name})")
    p.add_argument("--layout", choices=("auto", "wide", "long"), default="auto",
                   help="counts: the file's layout (default auto: long when it has the count "
                   "column)")
    for name, what in (("day", "the day (long layout; a label in the wide one)"),
                       ("interval", "the interval (long layout)"),
                       ("count", "the count (long layout)")):
        p.add_argument(f"--{name}", default=name, metavar="COL",
                       help=f"counts: the column of {what} (default {name})")
    p.add_argument("--timestamp", metavar="COL",
                   help="counts, long layout: a column of interval start timestamps instead "
                   "of day and interval")
    p.add_argument("--into", metavar="SCENARIO",
                   help="fill the fields of this scenario instead of writing a one-queue one")
    p.add_argument("--source", metavar="NAME",
                   help="with --into: the source whose arrivals the data give (default: the "
                   "one source into --queue)")
    p.add_argument("--queue", metavar="PLACE", help="with --into: the waiting place that "
                   "gets the fitted patience")
    p.add_argument("--hold", metavar="PLACE", help="with --into: the place that gets the "
                   "fitted hold")
    p.add_argument("--staff", type=at_least_one, metavar="N",
                   help="records: the staff written for the pool (default: the most calls "
                   "in talk at once in the records)")
    p.add_argument("--write-scenario", dest="write_scenario", metavar="FILE",
                   help="write the fitted scenario (YAML with comments) to FILE")
    p.add_argument("--report", metavar="DIR",
                   help="write report.html with the QQ and Kaplan-Meier figures, CSV tables "
                   "and JSON into DIR")
    p.add_argument("--json", action="store_true", help="print one JSON document instead of "
                   "tables")
    p.add_argument("--set", dest="overrides", action="append", default=[],
                   metavar="PATH=VALUE", help="with --into: change a field of that scenario "
                   "before it is filled (repeatable)")
    input_limits(p)
    p.set_defaults(handler=fit)


def _seconds_per_unit(unit: str) -> float | None:
    from compare.study.fit_input import SECONDS_PER_UNIT

    return SECONDS_PER_UNIT.get(unit)


def _day_start(args) -> float | None:
    text = args.day_start
    if text is None:
        return None
    m = _CLOCK.match(text.strip())
    if m:
        h, mm = int(m.group(1)), int(m.group(2))
        per = _seconds_per_unit(args.time_unit)
        if h > 23 or mm > 59 or per is None:
            raise InputError(f"fluidgap fit: --day-start {text}: a clock time HH:MM needs "
                             "hours 0-23, minutes 0-59 and a time unit of s, min or h")
        return (h * 60 + mm) * 60 / per
    try:
        value = finite(text)
    except argparse.ArgumentTypeError as exc:
        raise InputError(f"fluidgap fit: --day-start: {exc} or HH:MM") from None
    if value < 0:
        raise InputError(f"fluidgap fit: --day-start must be >= 0 (got {text})")
    return value


def _step(args, default_needed: bool) -> float | None:
    if args.step is not None:
        if not args.step > 0:
            raise InputError(f"fluidgap fit: --step must be > 0 (got {args.step:g})")
        return args.step
    if not default_needed:
        return None
    per = _seconds_per_unit(args.time_unit)
    if per is None:
        raise InputError(f"fluidgap fit: --step is needed for the time unit {args.time_unit}")
    return 1800.0 / per


def _check_flags(args) -> None:
    if not re.fullmatch(r"[A-Za-z][A-Za-z0-9_]{0,15}", args.time_unit):
        raise InputError("fluidgap fit: --time-unit must be a short word such as min")
    for flag in ("source", "queue", "hold"):
        if getattr(args, flag) is not None and args.into is None:
            raise InputError(f"fluidgap fit: --{flag} needs --into SCENARIO")
    if args.into is not None and args.counts and args.hold is not None:
        raise InputError("fluidgap fit: --hold: interval counts say nothing of holds")
    if args.into is not None and not args.counts and args.queue is None and \
            args.hold is None and args.source is None:
        raise InputError("fluidgap fit: --into needs --queue PLACE, --hold PLACE or "
                         "--source NAME: the fields to fill")
    if args.overrides and args.into is None:
        raise InputError("fluidgap fit: --set needs --into SCENARIO")


def _into(args):
    if args.into is None:
        return None
    from fluid import load_scenario

    from .run_options import limits_from_flags

    return load_scenario(args.into, overrides=args.overrides, limits=limits_from_flags(args))


def fit(args) -> Outcome:
    from ..present import fit_text
    from ..present.swap import replace_file
    from ..present.text import CAUTION
    from .destinations import check_inputs_kept, scenario_inputs
    from .run_options import limits_from_flags

    _check_flags(args)
    limits = limits_from_flags(args)
    day_start = _day_start(args)
    target = _into(args)
    inputs = [args.data] + (scenario_inputs(target) if target is not None else [])
    check_inputs_kept(args, inputs)
    max_rows = limits.file_values
    if args.counts:
        from ..study.fit_counts import CountColumns, fit_counts, read_counts
        from ..study.fit_scenario import counts_scenario, fill_scenario

        data = read_counts(args.data, CountColumns(args.day, args.interval, args.count,
                                                   args.timestamp),
                           layout=args.layout, time_unit=args.time_unit, max_rows=max_rows)
        result = fit_counts(data, _step(args, False), start=day_start)
        stamped = data.starts is not None
        if target is None:
            scenario = counts_scenario(result, time_unit=args.time_unit, stamped=stamped)
        else:
            scenario = fill_scenario(target, counts_fit=result, source=args.source,
                                     queue=args.queue, time_unit=args.time_unit,
                                     stamped=stamped)
        doc = {"counts": result.to_json()}
        text = fit_text.counts_text(result, scenario.text, args.write_scenario)
        summary = [text.split("\n\n")[0], text.split("\n\n")[2], text.split("\n\n")[3]]

        def report(d):
            return fit_text.counts_report(d, result, time_unit=args.time_unit,
                                          caution=CAUTION, summary=summary, json_doc=doc)
    else:
        from ..study.fit_records import RecordColumns, fit_records, read_records
        from ..study.fit_scenario import fill_scenario, records_scenario

        records = read_records(args.data, RecordColumns(args.arrival, args.answered,
                                                        args.ended, args.abandoned),
                               time_unit=args.time_unit, max_rows=max_rows)
        try:
            result = fit_records(records, _step(args, True), day_start=day_start,
                                 max_intervals=limits.intervals)
        except ValueError as exc:
            raise InputError(f"fluidgap fit: {args.data}: {exc}") from None
        if target is None:
            scenario = records_scenario(result, staff=args.staff)
        else:
            scenario = fill_scenario(target, records_fit=result, source=args.source,
                                     queue=args.queue, hold=args.hold,
                                     time_unit=args.time_unit)
        doc = {"records": result.to_json()}
        text = fit_text.records_text(result, scenario.text, args.write_scenario)
        summary = [text.split("\n\n")[0]] + [f"note: {n}" for n in result.notes]

        def report(d):
            return fit_text.records_report(d, result, caution=CAUTION, summary=summary,
                                           json_doc=doc)
    doc["scenario"] = scenario.text
    if args.write_scenario:
        try:
            replace_file(args.write_scenario, scenario.text.encode("utf-8"))
        except OSError as exc:
            raise InputError(f"fluidgap fit: --write-scenario {args.write_scenario}: cannot "
                             f"write ({exc.strerror or exc})") from None
        doc["written"] = str(args.write_scenario)
    return finish(args, text, doc, report=report)
