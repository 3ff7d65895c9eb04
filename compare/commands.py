"""What each subcommand does: load the scenario, call the library, shape text and JSON.

Each handler takes the parsed arguments and returns an :class:`Outcome`; printing is left to
:mod:`compare.cli`.
"""

from __future__ import annotations

import os
import sys
from contextlib import contextmanager
from dataclasses import dataclass
from importlib import resources
from typing import Any

from fluid import load_scenario
from fluid.scenario import Scenario

from . import render

__all__ = ["Outcome", "InputError", "inspect", "fluid", "simulate", "compare_cmd", "station",
           "scale", "demo_path", "CAUTION"]

CAUTION = (
    "Decision support under the model's assumptions. Where staffing affects people's safety "
    "(emergency or health lines), follow local regulations and professional practice."
)


class InputError(ValueError):
    """Bad input that is not a scenario field (e.g. a flag's value): exit code 2."""


@dataclass
class Outcome:
    text: str
    json: Any
    exit_code: int = 0


def demo_path() -> str:
    """Path of the built-in demo scenario (invented data)."""
    return str(resources.files("compare").joinpath("demo/utility-line.yaml"))


def _load(args) -> Scenario:
    path = getattr(args, "scenario", None) or demo_path()
    return load_scenario(path, overrides=args.overrides)


def inspect(args) -> Outcome:
    from fluid.invariants import p_semiflows, uncovered_pools

    s = _load(args)
    invariants = p_semiflows(s)
    uncovered = uncovered_pools(s)
    return Outcome(
        text=render.inspect_text(s, invariants, uncovered),
        json=render.inspect_json(s, invariants, uncovered),
    )


def fluid(args) -> Outcome:
    from fluid.analysis import throughput

    s = _load(args)
    if args.dt is not None and args.dt <= 0:
        raise InputError(f"fluidgap fluid: --dt must be > 0 (got {args.dt:g})")
    result = throughput(s, method=args.method, dt=args.dt)
    doc = result.to_dict()
    doc["caution"] = CAUTION
    return Outcome(text=render.fluid_text(s, result) + "\n\n" + CAUTION, json=doc)


def _check_simulation_args(args, s: Scenario) -> dict:
    horizon = s.run.horizon if args.horizon is None else args.horizon
    warmup = s.run.warmup if args.warmup is None else args.warmup
    reps = s.run.replications if args.reps is None else args.reps
    seed = s.run.seed if args.seed is None else args.seed
    cmd = f"fluidgap {args.command}"
    if horizon <= 0:
        raise InputError(f"{cmd}: --horizon must be > 0 (got {horizon:g})")
    if not 0 <= warmup < horizon:
        raise InputError(f"{cmd}: --warmup must be >= 0 and below the horizon {horizon:g} (got {warmup:g})")
    if reps < 1:
        raise InputError(f"{cmd}: --reps must be >= 1 (got {reps})")
    if seed < 0:
        raise InputError(f"{cmd}: --seed must be >= 0 (got {seed})")
    if args.workers is not None and args.workers < 1:
        raise InputError(f"{cmd}: --workers must be >= 1 (got {args.workers})")
    if args.max_jobs is not None and args.max_jobs < 1:
        raise InputError(f"{cmd}: --max-jobs must be >= 1 (got {args.max_jobs})")
    if getattr(args, "interval", None) is not None and args.interval <= 0:
        raise InputError(f"{cmd}: --interval must be > 0 (got {args.interval:g})")
    workers = args.workers or min(reps, os.cpu_count() or 1)
    _check_store_args(args)
    return dict(reps=reps, horizon=horizon, warmup=warmup, seed=seed, workers=workers,
                max_jobs=args.max_jobs, out=args.out, resume=args.resume)


def _check_store_args(args) -> None:
    if args.resume and not args.out:
        raise InputError(f"fluidgap {args.command}: --resume needs --out DIR (the run to continue)")


@contextmanager
def _executor(args):
    """The Dask executor asked for with --dask, or None (local worker processes)."""
    if not getattr(args, "dask", None):
        yield None
        return
    from desim import dask_executor

    with dask_executor(args.dask, workers=args.workers) as ex:
        yield ex


class _Progress:
    """A tqdm bar on stderr, only when stderr is a terminal and --quiet is not given."""

    def __init__(self, total: int, quiet: bool, desc: str):
        self.bar = None
        if not quiet and sys.stderr.isatty():
            from tqdm import tqdm

            self.bar = tqdm(total=total, desc=desc, unit="rep", file=sys.stderr, leave=False)

    def __call__(self, *_: Any) -> None:
        if self.bar is not None:
            self.bar.update(1)

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()


def simulate(args) -> Outcome:
    from desim import replicate

    s = _load(args)
    opts = _check_simulation_args(args, s)
    progress = _Progress(opts["reps"], args.quiet, "replications")
    try:
        with _executor(args) as ex:
            result = replicate(s, interval=args.interval, progress=progress, executor=ex, **opts)
    finally:
        progress.close()
    doc = result.to_json()
    doc["caution"] = CAUTION
    return Outcome(text=render.simulation_text(s, result) + "\n\n" + CAUTION, json=doc)


def _finish(args, text: str, doc: dict, write_report) -> Outcome:
    """Add the caution, and write the report when ``--report DIR`` was given
    (``write_report(directory)`` returns the files written)."""
    doc["caution"] = CAUTION
    if args.report:
        files = write_report(args.report)
        text += f"\n\nreport written to {files.html}"
        doc["report"] = str(files.html)
    return Outcome(text=text + "\n\n" + CAUTION, json=doc)


def compare_cmd(args) -> Outcome:
    from .core import compare
    from .reports import comparison_report

    s = _load(args)
    opts = _check_simulation_args(args, s)
    progress = _Progress(opts["reps"], args.quiet, "replications")
    try:
        with _executor(args) as ex:
            result = compare(s, interval=args.interval, progress=progress, executor=ex,
                             record_waits=args.report is not None, **opts)
    finally:
        progress.close()
    return _finish(args, render.comparison_text(s, result), result.to_json(),
                   lambda d: comparison_report(d, result, s, caution=CAUTION,
                                               summary=render.comparison_summary(s, result)))


def station(args) -> Outcome:
    from .reports import station_report
    from .station import station_check

    cmd = "fluidgap station"
    if args.servers < 1:
        raise InputError(f"{cmd}: --servers must be >= 1 (got {args.servers})")
    for flag, value in (("--rate", args.rate), ("--mean-hold", args.mean_hold)):
        if not value > 0:
            raise InputError(f"{cmd}: {flag} must be > 0 (got {value:g})")
    if args.patience_mean is not None and args.patience_mean < 0:
        raise InputError(f"{cmd}: --patience-mean must be >= 0 (got {args.patience_mean:g})")
    if args.hold_cv < 0:
        raise InputError(f"{cmd}: --hold-cv must be >= 0 (got {args.hold_cv:g})")
    if args.within is not None and args.within < 0:
        raise InputError(f"{cmd}: --within must be >= 0 (got {args.within:g})")
    reps = 20 if args.reps is None else args.reps
    if reps < 2:
        raise InputError(f"{cmd}: --reps must be >= 2 for an interval (got {reps})")
    if args.workers is not None and args.workers < 1:
        raise InputError(f"{cmd}: --workers must be >= 1 (got {args.workers})")
    class_rates = args.class_rates
    rate = args.rate
    if class_rates and any(not r > 0 for r in class_rates):
        raise InputError(f"{cmd}: every --class-rates value must be > 0")
    # --set changes the simulated station only (the formulas keep the flags' values): a way to
    # see that the checks do fail when the simulation is fed something else
    from fluid.loading import parse_override

    overrides = dict(parse_override(o) for o in args.overrides) or None
    _check_store_args(args)
    progress = _Progress(reps, args.quiet, "replications")
    try:
        with _executor(args) as ex:
            result = station_check(
                args.servers, rate, args.mean_hold, patience_mean=args.patience_mean,
                hold_cv=args.hold_cv, class_rates=class_rates, within=args.within, reps=reps,
                horizon=args.horizon, warmup=args.warmup,
                seed=1 if args.seed is None else args.seed,
                workers=args.workers or min(reps, os.cpu_count() or 1), progress=progress,
                _simulate_overrides=overrides, executor=ex, out=args.out, resume=args.resume)
    except ValueError as exc:
        raise InputError(f"{cmd}: {exc}") from None
    finally:
        progress.close()
    return _finish(args, render.station_text(result), result.to_json(),
                   lambda d: station_report(d, result, caution=CAUTION,
                                            summary=render.station_summary(result)))


def scale(args) -> Outcome:
    from .reports import scale_report
    from .scale import scale_study

    s = _load(args)
    opts = _check_simulation_args(args, s)
    if not args.factors or any(not k > 0 for k in args.factors):
        raise InputError("fluidgap scale: --factors must be positive numbers")
    progress = _Progress(opts["reps"] * len(args.factors), args.quiet, "replications")
    try:
        with _executor(args) as ex:
            result = scale_study(s, args.factors, progress=progress, executor=ex, **opts)
    finally:
        progress.close()
    return _finish(args, render.scale_text(result), result.to_json(),
                   lambda d: scale_report(d, result, caution=CAUTION,
                                          summary=render.scale_summary(result)))
