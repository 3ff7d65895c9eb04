"""The ``fluidgap`` argument parser: subcommands and their flags."""

from __future__ import annotations

import argparse

from fluid.scenario import Limits

from . import handlers
from .exports import add_export_flags
from .fit_handler import add_fit_parser
from .flag_values import at_least_one, finite, positive_limit, whole

__all__ = ["UsageError", "build_parser"]


class UsageError(Exception):
    """Bad command-line usage: reported in one line, exit code 2."""


class _Parser(argparse.ArgumentParser):
    def error(self, message: str) -> None:  # one clear line instead of usage + error
        raise UsageError(f"{self.prog}: {message} (see {self.prog} --help)")


def _common(p: argparse.ArgumentParser, *, scenario: str = "required") -> None:
    if scenario == "required":
        p.add_argument("scenario", help="scenario YAML file")
    elif scenario == "optional":
        p.add_argument("scenario", nargs="?", help="scenario YAML file (default: the built-in demo)")
    p.add_argument("--set", dest="overrides", action="append", default=[], metavar="PATH=VALUE",
                   help="change a field before validation, e.g. pools.front_desk=12 (repeatable)")
    p.add_argument("--json", action="store_true", help="print one JSON document instead of tables")
    _input_limits(p)


_DEFAULT = Limits()


def _input_limits(p: argparse.ArgumentParser) -> None:
    """The flags that raise the limits on reading a scenario (README, "Limits")."""
    p.add_argument("--allow-outside-files", action="store_true", dest="allow_outside_files",
                   help="let the scenario name trace and empirical files outside its folder")
    p.add_argument("--max-file-values", type=at_least_one, metavar="N", dest="max_file_values",
                   help="numbers one trace or empirical file may hold "
                   f"(default {_DEFAULT.file_values:,})")
    p.add_argument("--max-intervals", type=at_least_one, metavar="N", dest="max_intervals",
                   help="intervals of one run (horizon / step) for --interval, profiles and "
                   f"schedules (default {_DEFAULT.intervals:,})")


def _simulation_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--reps", type=whole, help="replications (default: the scenario's run.replications)")
    p.add_argument("--horizon", type=finite, help="simulated time per replication, scenario time unit")
    p.add_argument("--warmup", type=finite, help="time discarded at the start of each replication")
    p.add_argument("--seed", type=whole, help="base seed (default: the scenario's run.seed)")
    p.add_argument("--workers", type=whole, default=None,
                   help="worker processes (default: the number of cores; 1 = in this process)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.add_argument("--max-jobs", type=whole, default=None, dest="max_jobs",
                   help="jobs inside the net at which a replication is stopped as unstable")
    p.add_argument("--max-replications", type=at_least_one, metavar="N",
                   dest="max_replications",
                   help=f"replications one run may ask for (default {_DEFAULT.replications:,})")
    p.add_argument("--max-arrivals", type=positive_limit, metavar="N", dest="max_arrivals",
                   help="expected arrivals over every run of the command, refused beyond it "
                   f"before anything runs (default {_DEFAULT.arrivals:.0e})")
    p.add_argument("--dask", metavar="ADDRESS",
                   help="run replications on a Dask cluster at ADDRESS, or 'local' to start one "
                   "on this machine (127.0.0.1); needs the dask extra")
    p.add_argument("--out", metavar="DIR",
                   help="save each finished replication in DIR as it completes (crash-safe)")
    p.add_argument("--resume", action="store_true",
                   help="continue the interrupted run saved in --out DIR")


def _percentile(text: str) -> float:
    """A percentile in percent, in [0, 100]."""
    value = finite(text)
    if not 0 <= value <= 100:
        raise argparse.ArgumentTypeError(f"must lie in [0, 100] (got {text})")
    return value


def _percentiles(p: argparse.ArgumentParser) -> None:
    p.add_argument("--percentiles", type=_percentile, nargs="+", metavar="Q", default=None,
                   help="wait percentiles per waiting place, in percent (default: 50 80 90 95)")


def _staff_day_options(p: argparse.ArgumentParser) -> None:
    """Staffing per interval and shift plans (compare/cli/staff_day.py)."""
    p.add_argument("--interval", type=finite, metavar="STEP",
                   help="staff per interval of this length (default for profiles and "
                   "schedules: their shortest step)")
    p.add_argument("--shifts", action="store_true",
                   help="cover the staff per interval with the scenario's shift patterns "
                   "(shifts:) at least cost, then simulate and repair the plan")
    p.add_argument("--write-scenario", metavar="FILE", dest="write_scenario",
                   help="with --shifts: write the scenario with the plan as its schedules")
    p.add_argument("--max-iterations", type=whole, metavar="N", dest="max_iterations",
                   help="simulations of the iterative staffing algorithm at most (default 15)")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="fluidgap",
        description="Fluid models of timed Petri nets set against stochastic simulation.",
    )
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True

    p = sub.add_parser("inspect", help="validate a scenario and summarise its net")
    _common(p)
    p.set_defaults(handler=handlers.inspect)

    p = sub.add_parser("fluid", help="fluid throughput, bottlenecks and loads")
    _common(p)
    p.add_argument("--method", choices=["auto", "lp", "counters"], default="auto",
                   help="lp: the throughput LP (no priorities, constant rates); counters: "
                   "integrate the counter equations (default: auto)")
    p.add_argument("--dt", type=finite, help="time step of the counter integration")
    p.add_argument("--cross-check", action="store_true", dest="cross_check",
                   help="with the LP, also integrate the counter equations and report the largest "
                   "relative difference of a rate (JSON key cross_check; null when not run)")
    p.set_defaults(handler=handlers.fluid)

    p = sub.add_parser("simulate", help="stochastic simulation with confidence intervals")
    _common(p)
    _simulation_options(p)
    p.add_argument("--interval", type=finite, metavar="STEP",
                   help="also tabulate arrivals, served, abandoned, service level and queue per "
                   "interval of this length")
    _percentiles(p)
    add_export_flags(p, report=True)
    p.set_defaults(handler=handlers.simulate)

    p = sub.add_parser("compare", help="the main job: fluid against simulation, gaps and flags")
    _common(p, scenario="optional")
    _simulation_options(p)
    p.add_argument("--interval", type=finite, metavar="STEP",
                   help="per-interval comparison step (default for profiles and schedules: their step)")
    _percentiles(p)
    p.add_argument("--report", metavar="DIR", help="write report.html, CSV tables and JSON into DIR")
    add_export_flags(p, report=False)
    p.set_defaults(handler=handlers.compare)

    p = sub.add_parser("station", help="single-station self-check against Erlang B/C/A, Cobham, Whitt")
    p.add_argument("--servers", type=whole, required=True, metavar="C", help="agents")
    p.add_argument("--rate", type=finite, required=True, metavar="L",
                   help="arrival rate per time unit (the total over classes)")
    p.add_argument("--mean-hold", type=finite, required=True, metavar="H", dest="mean_hold",
                   help="mean holding time")
    p.add_argument("--patience-mean", type=finite, metavar="P", dest="patience_mean",
                   help="mean of exponential patience (0 = a loss system; none = callers wait)")
    p.add_argument("--hold-cv", type=finite, default=1.0, dest="hold_cv",
                   help="coefficient of variation of the hold (1 = exponential; else lognormal)")
    p.add_argument("--class-rates", type=finite, nargs="+", metavar="L", dest="class_rates",
                   help="priority classes, highest first (their sum must equal --rate)")
    p.add_argument("--within", type=finite, help="service-level threshold (default: mean hold / 10)")
    p.add_argument("--report", metavar="DIR", help="write report.html, CSV tables and JSON into DIR")
    p.add_argument("--json", action="store_true", help="print one JSON document instead of tables")
    p.add_argument("--set", dest="overrides", action="append", default=[], metavar="PATH=VALUE",
                   help="change the simulated station only (e.g. sources.calls.rate=1.2), to see "
                   "the checks fail when the simulation differs from the formulas")
    _simulation_options(p)
    p.set_defaults(handler=handlers.station)

    p = sub.add_parser("scale", help="fluid-limit study: the gap as volume and staff grow together")
    _common(p)
    _simulation_options(p)
    p.add_argument("--factors", type=finite, nargs="+", default=[1, 2, 4, 8, 16], metavar="K",
                   help="scale factors for arrival rates and staff (default: 1 2 4 8 16)")
    p.add_argument("--staffing", choices=("linear", "sqrt"), default="linear",
                   help="staff rule per factor k: linear (staff × k, loads fixed; default) or "
                   "sqrt (staff = R_k + beta sqrt(R_k), R_k = k × offered work, beta from the "
                   "scenario's staff)")
    p.add_argument("--report", metavar="DIR", help="write report.html, CSV tables and JSON into DIR")
    p.set_defaults(handler=handlers.scale)

    p = sub.add_parser("phases", help="exact fluid phase diagram over the staff of one or two "
                       "pools")
    _common(p)
    p.add_argument("--axes", nargs="+", required=True, metavar="POOL",
                   help="one pool (the rate against its staff) or two pools (the diagram over "
                   "their staff)")
    p.add_argument("--of", metavar="TRANSITION",
                   help="the rate drawn (default: the total rate of transitions that end jobs)")
    p.add_argument("--range", action="append", metavar="POOL=LO:HI",
                   help="staff range drawn for an axis (repeatable)")
    p.add_argument("--simulate", action="store_true",
                   help="overlay simulated gaps at integer staff points (common random numbers)")
    p.add_argument("--png", metavar="FILE", help="write the diagram as a PNG file")
    p.add_argument("--report", metavar="DIR", help="write report.html, CSV tables and JSON into DIR")
    _simulation_options(p)
    p.set_defaults(handler=handlers.phases)

    p = sub.add_parser("staff", help="cheapest staffing meeting the targets, fluid then simulated")
    _common(p)
    p.add_argument("--cost", action="append", metavar="POOL=C",
                   help="cost per agent of a pool (default 1; repeatable)")
    p.add_argument("--fluid-only", action="store_true", dest="fluid_only",
                   help="stop at the fluid plan (no simulation)")
    p.add_argument("--png", metavar="FILE", help="write the figure of the plans as a PNG file")
    p.add_argument("--report", metavar="DIR", help="write report.html, CSV tables and JSON into DIR")
    _staff_day_options(p)
    _simulation_options(p)
    p.set_defaults(handler=handlers.staff)

    add_fit_parser(sub, _input_limits)
    return parser
