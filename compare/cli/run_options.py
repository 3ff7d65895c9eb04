"""Simulation settings from the command line, the limits they raise, the executor asked for,
and the progress bar."""

from __future__ import annotations

import sys
from contextlib import contextmanager
from dataclasses import replace
from typing import Any, Callable

from fluid import load_scenario
from desim.settings import SimulationSettings
from fluid.scenario import Limits, Scenario

from ..study.demo import demo_path
from .destinations import check_inputs_kept, scenario_inputs
from .outcome import InputError

__all__ = ["load", "limits_from_flags", "settings_from_flags", "checked_settings", "simulation",
           "executor", "Progress"]

#: Limits field -> the attribute of the parsed arguments that sets it.
_LIMIT_ARGS = {"file_values": "max_file_values", "intervals": "max_intervals",
               "replications": "max_replications", "arrivals": "max_arrivals",
               "outside_files": "allow_outside_files"}


def limits_from_flags(args) -> Limits:
    """The default limits with those the flags raise (``--max-intervals`` and the like)."""
    given = {field: getattr(args, attr, None) for field, attr in _LIMIT_ARGS.items()}
    return replace(Limits(), **{k: v for k, v in given.items() if v not in (None, False)})


def load(args) -> Scenario:
    """The scenario named on the command line (the built-in demo when none), with ``--set``,
    the limits of the flags, and measured over ``--horizon`` when given; a destination flag
    that would overwrite one of its files is refused here."""
    path = getattr(args, "scenario", None) or demo_path()
    scenario = load_scenario(path, overrides=args.overrides, limits=limits_from_flags(args),
                             horizon=getattr(args, "horizon", None))
    check_inputs_kept(args, scenario_inputs(scenario))
    return scenario


def settings_from_flags(args, run) -> SimulationSettings:
    """The simulation flags over the defaults in ``run`` (a scenario's ``run`` section),
    validated once (:func:`desim.resolve_settings`); a bad value is an :class:`InputError`
    naming its flag."""
    from desim.settings import SettingsError, resolve_settings

    try:
        return resolve_settings(run, reps=args.reps, horizon=args.horizon, warmup=args.warmup,
                                seed=args.seed, workers=args.workers, max_jobs=args.max_jobs,
                                interval=getattr(args, "interval", None), out=args.out,
                                resume=args.resume or None, limits=limits_from_flags(args))
    except SettingsError as exc:
        raise InputError(exc.for_flag(f"fluidgap {args.command}")) from None


def checked_settings(args, run, arrivals: Callable[[float], float] | None = None,
                     volume: float = 1.0, min_replications: int = 1) -> SimulationSettings:
    """:func:`settings_from_flags`, and with ``arrivals(horizon)`` (expected arrivals of one run
    over ``horizon``) the refusal of a command whose ``arrivals × replications × volume``
    exceeds ``--max-arrivals`` (``volume``: runs per replication weighted by their volume).
    ``min_replications``: refuse fewer replications (from --reps or the scenario's
    run.replications); 2 for a command whose verdicts rest on intervals."""
    settings = settings_from_flags(args, run)
    if settings.replications < min_replications:
        given = "" if args.reps is not None else ", from the scenario's run.replications"
        raise InputError(f"fluidgap {args.command}: --reps must be >= {min_replications} for an "
                         f"interval, and its verdicts need one (got {settings.replications}"
                         f"{given})")
    if arrivals is not None:
        from desim.settings import SettingsError, check_workload

        try:
            check_workload(arrivals(settings.horizon), settings, runs=volume)
        except SettingsError as exc:
            raise InputError(exc.for_flag(f"fluidgap {args.command}")) from None
    return settings


@contextmanager
def simulation(args, run, *, runs_per_replication: int = 1, quiet: bool = False,
               arrivals: Callable[[float], float] | None = None, volume: float | None = None,
               min_replications: int = 1):
    """``(settings, progress)`` for a command that simulates: the settings from the flags with
    the executor asked for (``--dask``) in them, and a progress bar over
    ``replications × runs_per_replication`` runs (none with ``--quiet`` or ``quiet``).
    ``arrivals``, ``volume`` (default ``runs_per_replication``) and ``min_replications``: see
    :func:`checked_settings`; the check comes before anything runs."""
    settings = checked_settings(args, run, arrivals,
                                runs_per_replication if volume is None else volume,
                                min_replications)
    total = settings.replications * runs_per_replication
    with Progress(total, args.quiet or quiet) as progress, executor(args) as ex:
        yield (settings if ex is None else settings.with_changes(executor=ex)), progress


@contextmanager
def executor(args):
    """The Dask executor asked for with --dask, or None (local worker processes)."""
    if not getattr(args, "dask", None):
        yield None
        return
    from desim import dask_executor

    with dask_executor(args.dask, workers=args.workers) as ex:
        yield ex


class Progress:
    """A tqdm bar on stderr, only when stderr is a terminal and --quiet is not given."""

    def __init__(self, total: int, quiet: bool, desc: str = "replications"):
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

    def __enter__(self) -> "Progress":
        return self

    def __exit__(self, *exc) -> None:
        self.close()
