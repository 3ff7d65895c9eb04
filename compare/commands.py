"""What each subcommand does: load the scenario, call the library, shape text and JSON.

Each handler takes the parsed arguments and returns an :class:`Outcome`; printing is left to
:mod:`compare.cli`.
"""

from __future__ import annotations

import os
import sys
from dataclasses import dataclass
from importlib import resources
from typing import Any

from fluid import load_scenario
from fluid.scenario import Scenario

from . import render

__all__ = ["Outcome", "InputError", "inspect", "fluid", "simulate", "demo_path", "CAUTION"]

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
    return dict(reps=reps, horizon=horizon, warmup=warmup, seed=seed, workers=workers,
                max_jobs=args.max_jobs)


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
        result = replicate(s, interval=args.interval, progress=progress, **opts)
    finally:
        progress.close()
    doc = result.to_json()
    doc["caution"] = CAUTION
    return Outcome(text=render.simulation_text(s, result) + "\n\n" + CAUTION, json=doc)
