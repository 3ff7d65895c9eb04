"""One handler per subcommand: load the scenario, call the library, shape text and JSON.

Each handler takes the parsed arguments and returns an :class:`~compare.cli.outcome.Outcome`
through :func:`~compare.cli.outcome.finish`; printing is left to :mod:`compare.cli.main`.
Heavy modules (the studies, pandas, matplotlib) are imported inside the handler that needs them,
so ``fluidgap --help`` and ``fluidgap inspect`` start fast.
"""

from __future__ import annotations

import functools
import math

from ..present import text as render
from ..present.text import CAUTION
from .outcome import InputError, Outcome, finish
from .run_options import checked_settings, load, simulation

__all__ = ["inspect", "fluid", "simulate", "compare", "station", "scale", "phases", "staff"]


def inspect(args) -> Outcome:
    from fluid.invariants import p_semiflows, patience_leaks, uncovered_pools

    s = load(args)
    invariants = p_semiflows(s)
    uncovered = uncovered_pools(s)
    leaks = patience_leaks(s) if uncovered else {}
    return Outcome(text=render.inspect_text(s, invariants, uncovered, leaks),
                   json=render.inspect_json(s, invariants, uncovered, leaks))


def _check_step(s, dt: float) -> None:
    """Refuse a counter grid step that gives fewer than two steps or more points than the
    counters take over the scenario's horizon."""
    from fluid.counters import MAX_POINTS

    cmd, horizon = "fluidgap fluid", s.run.horizon
    if dt <= 0:
        raise InputError(f"{cmd}: --dt must be > 0 (got {dt:g})")
    if dt > horizon / 2:
        raise InputError(f"{cmd}: --dt must be at most half the horizon {horizon:g} "
                         f"(got {dt:g})")
    if horizon / dt + 1 > MAX_POINTS:
        raise InputError(f"{cmd}: --dt {dt:g} cuts the horizon {horizon:g} into "
                         f"{horizon / dt:.3g} steps, more than the {MAX_POINTS:,} grid points "
                         "the counters take: give a larger step")


def fluid(args) -> Outcome:
    from fluid.analysis import throughput
    from fluid.sources import rate_uncertainty, rate_uncertainty_notes
    from fluid.structure import lp_obstacles

    s = load(args)
    if args.dt is not None:
        _check_step(s, args.dt)
    if args.method == "lp" and lp_obstacles(s):
        raise InputError(f"fluidgap fluid: --method lp does not apply to this net (it has "
                         f"{', '.join(lp_obstacles(s))}): use --method counters or auto")
    result = throughput(s, method=args.method, dt=args.dt, cross_check=args.cross_check)
    doc, notes = result.to_dict(), rate_uncertainty_notes(s.sources)
    doc["rate_uncertainty"] = rate_uncertainty(s.sources)
    if any(p.schedule is not None for p in s.pools.values()):
        from ..present.day_text import schedule_rows

        doc["schedule_per_interval"] = schedule_rows(s)  # (the staff above is its mean)
    text = render.fluid_text(s, result) + "".join(f"\nnote: {n}" for n in notes)
    return finish(args, text, doc)


def _arrivals(s):
    """Expected arrivals of one run of ``s`` over a horizon (for the --max-arrivals check)."""
    from desim.settings import expected_arrivals

    return lambda horizon: expected_arrivals(s, horizon)


def simulate(args) -> Outcome:
    from desim import replicate

    from .exports import simulation_outputs

    s = load(args)
    with simulation(args, s.run, arrivals=_arrivals(s)) as (settings, progress):
        result = replicate(s, settings=settings, progress=progress, percentiles=args.percentiles,
                           record_waits=args.report is not None)
    doc = result.to_json()
    text, report = simulation_outputs(args, s, result, render.simulation_text(s, result), doc)
    return finish(args, text, doc, report=report)


def compare(args) -> Outcome:
    from ..present.reports import comparison_report
    from ..study.comparison import compare as run_comparison
    from .exports import comparison_csv

    s = load(args)
    # (a day factor on a source's rates adds a run without it: compare/study/rate_flags.py)
    runs = 2 if any(src.rate_varies for src in s.sources.values()) else 1
    with simulation(args, s.run, arrivals=_arrivals(s), runs_per_replication=runs) as (
            settings, progress):
        result = run_comparison(s, settings, progress=progress,
                                record_waits=args.report is not None,
                                percentiles=args.percentiles)
    doc = result.to_json()
    text = comparison_csv(args, s, result, render.comparison_text(s, result), doc)
    return finish(args, text, doc,
                  report=lambda d: comparison_report(
                      d, result, s, caution=CAUTION, summary=render.comparison_summary(s, result)))


def station(args) -> Outcome:
    from fluid.loading import parse_override

    from ..present.reports import station_report
    from ..study.station import station_check, station_run

    from fluid.fields import LARGEST_WHOLE

    cmd = "fluidgap station"
    if args.servers < 1:
        raise InputError(f"{cmd}: --servers must be >= 1 (got {args.servers})")
    if args.servers > LARGEST_WHOLE:
        raise InputError(f"{cmd}: --servers must be at most {LARGEST_WHOLE:,} "
                         f"(got {args.servers:.3g})")
    for flag, value in (("--rate", args.rate), ("--mean-hold", args.mean_hold)):
        if not value > 0:
            raise InputError(f"{cmd}: {flag} must be > 0 (got {value:g})")
    if args.patience_mean is not None and args.patience_mean < 0:
        raise InputError(f"{cmd}: --patience-mean must be >= 0 (got {args.patience_mean:g})")
    if args.hold_cv < 0:
        raise InputError(f"{cmd}: --hold-cv must be >= 0 (got {args.hold_cv:g})")
    if args.within is not None and args.within < 0:
        raise InputError(f"{cmd}: --within must be >= 0 (got {args.within:g})")
    if args.reps is not None and args.reps < 2:
        raise InputError(f"{cmd}: --reps must be >= 2 for an interval (got {args.reps})")
    if args.class_rates and any(not r > 0 for r in args.class_rates):
        raise InputError(f"{cmd}: every --class-rates value must be > 0")
    # --set changes the simulated station only (the formulas keep the flags' values): a way to
    # see that the checks do fail when the simulation is fed something else
    overrides = dict(parse_override(o) for o in args.overrides) or None
    try:
        with simulation(args, station_run(args.rate, args.horizon),
                        arrivals=lambda horizon: args.rate * horizon) as (settings, progress):
            result = station_check(
                args.servers, args.rate, args.mean_hold, patience_mean=args.patience_mean,
                hold_cv=args.hold_cv, class_rates=args.class_rates, within=args.within,
                settings=settings, progress=progress, _simulate_overrides=overrides)
    except ValueError as exc:
        if isinstance(exc, InputError):
            raise
        flag = _station_flag(exc) if overrides is None else None
        if flag is not None:  # a value the generated station refused: name the flag, not it
            said = str(exc).removeprefix(f"{exc.file}: {exc.path}: ")
            raise InputError(f"{cmd}: {flag}: {said}") from None
        raise InputError(f"{cmd}: {exc}") from None
    return finish(args, render.station_text(result), result.to_json(),
                  report=lambda d: station_report(d, result, caution=CAUTION,
                                                  summary=render.station_summary(result)))


#: Fields of the generated station (fluid/stations.py) and the flag each comes from.
_STATION_FLAGS = (("places.talk", "hold.cv", "--hold-cv"), ("places.talk", "hold", "--mean-hold"),
                  ("places.queue", "patience", "--patience-mean"), ("sources.calls", "rate",
                  "--rate / --class-rates"), ("pools.agents", "", "--servers"),
                  ("targets.queue", "within", "--within"))


def _station_flag(exc: ValueError) -> str | None:
    """The station flag behind a field the generated station refused (None: not known)."""
    path = getattr(exc, "path", None)
    if not isinstance(path, str) or getattr(exc, "file", None) != "<station>":
        return None
    for prefix, field, flag in _STATION_FLAGS:
        head, _, rest = path.partition(".")
        name, _, tail = rest.partition(".")
        # (class k's fields carry the suffix _k: places.talk_2.hold.cv)
        base = f"{head}.{name.rsplit('_', 1)[0] if name[-1:].isdigit() else name}"
        if base == prefix and tail.startswith(field):
            return flag
    return None


def scale(args) -> Outcome:
    from ..present.reports import scale_report
    from ..study.scale import scale_study

    s = load(args)
    if not args.factors or any(not k > 0 for k in args.factors):
        raise InputError("fluidgap scale: --factors must be positive numbers")
    # (the exponents' intervals and the per-factor intervals need two replications or more)
    with simulation(args, s.run, runs_per_replication=len(args.factors), arrivals=_arrivals(s),
                    volume=sum(args.factors), min_replications=2) as (settings, progress):
        result = scale_study(s, args.factors, settings, progress=progress,
                             staffing=getattr(args, "staffing", "linear"))
    return finish(args, render.scale_text(result), result.to_json(),
                  report=lambda d: scale_report(d, result, caution=CAUTION,
                                                summary=render.scale_summary(result)))


def _float(text: str) -> float:
    """``text`` as a float, nan when it is none."""
    try:
        return float(text)
    except ValueError:
        return math.nan


def _parse_ranges(items, scenario) -> dict[str, tuple[float, float]]:
    from fluid.errors import short_repr
    from fluid.fields import LARGEST_WHOLE

    out = {}
    for item in items or []:
        name, sep, span = item.partition("=")
        lo, sep2, hi = span.partition(":")
        lo_f, hi_f = _float(lo), _float(hi)
        if not (math.isfinite(lo_f) and math.isfinite(hi_f)):
            raise InputError("fluidgap phases: --range expects POOL=LO:HI with finite numbers "
                             f"(got {short_repr(item)})")
        if not (sep and sep2) or name not in scenario.pools:
            raise InputError(f"fluidgap phases: --range expects POOL=LO:HI with a pool of the "
                             f"scenario (got {short_repr(item)})")
        if not 0 <= lo_f < hi_f <= LARGEST_WHOLE:
            raise InputError(f"fluidgap phases: --range {name}: need 0 <= LO < HI <= "
                             f"{LARGEST_WHOLE:,} (got {short_repr(span)})")
        out[name] = (lo_f, hi_f)
    return out


def _parse_costs(items, scenario) -> dict[str, float] | None:
    from fluid.errors import short_repr
    from fluid.fields import LARGEST_NUMBER

    if not items:
        return None
    out = {}
    for item in items:
        name, sep, value = item.partition("=")
        cost = _float(value)
        if not sep or name not in scenario.pools or not LARGEST_NUMBER >= cost >= 0:
            raise InputError("fluidgap staff: --cost expects POOL=C with a pool of the scenario "
                             f"and a cost >= 0 and at most {LARGEST_NUMBER:g} "
                             f"(got {short_repr(item)})")
        out[name] = cost
    return out


def phases(args) -> Outcome:
    from fluid.phases import phase_diagram

    from ..present.phase_figure import phase_figure
    from ..present.plan_text import phases_text
    from ..present.reports import phases_report
    from ..study.phase_overlay import phase_overlay

    s = load(args)
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
    if args.simulate:
        # bad flags (or a run too long) stop before the diagram is drawn
        checked_settings(args, s.run, _arrivals(s), 49, min_replications=2)
    diagram = phase_diagram(s, tuple(args.axes), of=args.of, ranges=ranges or None)
    overlay = None
    if args.simulate:
        with simulation(args, s.run, runs_per_replication=49, arrivals=_arrivals(s),
                        min_replications=2) as (settings, progress):
            overlay = phase_overlay(s, diagram, settings, progress=progress)
    doc = diagram.to_json()
    if overlay is not None:
        doc["overlay"] = overlay.to_dict("records")
    text = phases_text(diagram, overlay)
    figure = functools.cache(lambda: phase_figure(diagram, overlay=overlay))
    return finish(args, text, doc, figure=figure,
                  report=lambda d: phases_report(d, diagram, overlay, figure(), json_doc=doc,
                                                 caution=CAUTION, summary=text.split("\n")[:3],
                                                 title=f"fluidgap phases: {s.name}"))


def staff(args) -> Outcome:
    from ..present.plan_text import staff_summary, staff_text
    from ..present.reports import staffing_report
    from ..present.staffing_figure import staffing_figure
    from ..study.staffing_search import staff_search

    s = load(args)
    from .staff_day import staff_day, wants_day

    if wants_day(args, s):  # a day of intervals (profiles, schedules, --shifts): per interval
        return staff_day(args, s)
    costs = _parse_costs(args.cost, s)
    # (the search judges each staffing by the intervals of its targets: it needs two runs or
    # more; the fluid-only search simulates nothing)
    with simulation(args, s.run, runs_per_replication=10, quiet=args.fluid_only,
                    arrivals=None if args.fluid_only else _arrivals(s),
                    min_replications=1 if args.fluid_only else 2) as (settings, progress):
        result = staff_search(s, settings, costs=costs, progress=progress,
                              fluid_only=args.fluid_only)
    doc = result.to_json()
    figure = functools.cache(lambda: staffing_figure(result))
    return finish(args, staff_text(s, result), doc, figure=figure,
                  report=lambda d: staffing_report(d, result, figure(), json_doc=doc,
                                                   caution=CAUTION, summary=staff_summary(result),
                                                   title=f"fluidgap staff: {s.name}"))
