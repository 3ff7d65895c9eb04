"""One validated description of how to simulate: :class:`SimulationSettings`.

Built once, from a scenario's ``run`` section (its defaults) and whatever the caller sets
(command-line flags, keyword arguments), by :func:`resolve_settings`, and passed unchanged to
every study and to :func:`desim.replicate`. Validation happens here and nowhere else; a bad
value raises :class:`SettingsError`, which names the setting (the command line turns the name
into its flag).
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field, replace
from typing import Any

from fluid.scenario import LARGEST_SEED, LIMIT_FLAGS, Limits

__all__ = ["SettingsError", "SimulationSettings", "resolve_settings", "SETTING_FLAGS",
           "check_workload", "expected_arrivals", "LARGEST_SEED"]

#: The command-line flag of each setting (for messages).
SETTING_FLAGS = {"replications": "--reps", "horizon": "--horizon", "warmup": "--warmup",
                 "seed": "--seed", "workers": "--workers", "max_jobs": "--max-jobs",
                 "interval": "--interval", "out": "--out", "resume": "--resume",
                 "percentiles": "--percentiles"}
#: The most worker processes asked for.
MOST_WORKERS = 1024


class SettingsError(ValueError):
    """A simulation setting no run can use. ``setting``: its name (a field of
    :class:`SimulationSettings`); ``problem``: what is wrong, without the name."""

    def __init__(self, setting: str, problem: str):
        super().__init__(f"{setting} {problem}")
        self.setting = setting
        self.problem = problem

    def for_flag(self, command: str) -> str:
        """The message with the setting's command-line flag, e.g.
        ``fluidgap simulate: --horizon must be > 0 (got -1)``."""
        return f"{command}: {SETTING_FLAGS.get(self.setting, self.setting)} {self.problem}"

    def __reduce__(self):  # (raised in worker processes too)
        return (SettingsError, (self.setting, self.problem))


@dataclass(frozen=True)
class SimulationSettings:
    """How to simulate a scenario; times in the scenario's time unit.

    ``replications`` independent runs over ``[0, horizon]``, measured over
    ``[warmup, horizon]``, replication r drawing from base ``seed`` (common random numbers
    across variants run with the same settings). ``workers``: local processes (None: one per
    core, at most one per replication; 1: in this process); ``executor``: any
    ``concurrent.futures`` executor (e.g. a Dask client's), used instead of local processes;
    ``max_jobs``: jobs inside a run at which it is stopped as unstable (None: the engine's
    default); ``interval``: length of the per-interval tables (None: none, or the study's
    default); ``out``/``resume``: the crash-safe run folder and whether to continue it;
    ``limits``: the bounds checked here (replications, intervals per run) and by
    :func:`check_workload` (:class:`fluid.scenario.Limits`). The numbers never depend on
    ``workers``, ``executor`` or ``limits``."""

    replications: int
    horizon: float
    warmup: float
    seed: int
    workers: int | None = None
    executor: Any = field(default=None, compare=False, repr=False)
    max_jobs: int | None = None
    interval: float | None = None
    out: str | None = None
    resume: bool = False
    limits: Limits = field(default=Limits(), compare=False, repr=False)

    @property
    def window(self) -> tuple[float, float]:
        """The statistics window ``(warmup, horizon)``."""
        return (self.warmup, self.horizon)

    def local_workers(self) -> int:
        """Worker processes used when no executor is given."""
        n = self.workers or min(self.replications, os.cpu_count() or 1)
        return max(1, min(n, self.replications))

    def with_changes(self, **changes) -> "SimulationSettings":
        """A validated copy with ``changes`` (field names)."""
        return _validated(replace(self, **changes))

    def in_subfolder(self, name: str) -> "SimulationSettings":
        """The same settings saving into ``out/name`` (unchanged without ``out``)."""
        if self.out is None:
            return self
        return replace(self, out=os.path.join(self.out, name))

    def to_json(self) -> dict:
        """``{"replications", "horizon", "warmup", "seed"}``: what the numbers depend on."""
        return {"replications": self.replications, "horizon": self.horizon,
                "warmup": self.warmup, "seed": self.seed}


def _shown(value: Any) -> str:
    from fluid.errors import short_repr

    return short_repr(value)


def _number(name: str, value: Any, kind=float):
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        try:
            value = kind(value)
        except (TypeError, ValueError, OverflowError):
            raise SettingsError(name, f"must be a number (got {_shown(value)})") from None
    if kind is int:
        if isinstance(value, float):
            if not (math.isfinite(value) and value.is_integer()):
                raise SettingsError(name, f"must be a whole number (got {_shown(value)})")
        return int(value)
    try:
        value = float(value)
    except OverflowError:
        raise SettingsError(name, f"must be a finite number (got {_shown(value)})") from None
    if math.isnan(value):
        raise SettingsError(name, "must be a number (got nan)")
    return value


def _at_most(name: str, value: int, high: int, why: str = "") -> None:
    if value > high:
        raise SettingsError(name, f"must be at most {high:,}{why} (got {_shown(value)})")


def _validated(s: SimulationSettings) -> SimulationSettings:
    limits = s.limits if isinstance(s.limits, Limits) else Limits()
    reps = _number("replications", s.replications, int)
    horizon = _number("horizon", s.horizon)
    warmup = _number("warmup", s.warmup)
    seed = _number("seed", s.seed, int)
    if reps < 1:
        raise SettingsError("replications", f"must be >= 1 (got {reps})")
    _at_most("replications", reps, limits.replications,
             f", the limit (raise it with {LIMIT_FLAGS['replications']})")
    if not (math.isfinite(horizon) and horizon > 0):
        raise SettingsError("horizon", f"must be > 0 (got {horizon:g})")
    if not 0 <= warmup < horizon:
        raise SettingsError("warmup", f"must be >= 0 and below the horizon {horizon:g} "
                            f"(got {warmup:g})")
    if seed < 0:
        raise SettingsError("seed", f"must be >= 0 (got {seed})")
    _at_most("seed", seed, LARGEST_SEED)
    workers = None if s.workers is None else _number("workers", s.workers, int)
    if workers is not None and workers < 1:
        raise SettingsError("workers", f"must be >= 1 (got {workers})")
    if workers is not None:
        _at_most("workers", workers, MOST_WORKERS)
    max_jobs = None if s.max_jobs is None else _number("max_jobs", s.max_jobs, int)
    if max_jobs is not None and max_jobs < 1:
        raise SettingsError("max_jobs", f"must be >= 1 (got {max_jobs})")
    interval = None if s.interval is None else _number("interval", s.interval)
    if interval is not None and not (math.isfinite(interval) and interval > 0):
        raise SettingsError("interval", f"must be > 0 (got {interval:g})")
    if interval is not None and horizon / interval > limits.intervals:
        raise SettingsError("interval", f"{interval:g} cuts the horizon {horizon:g} into "
                            f"{horizon / interval:.3g} intervals, more than the limit of "
                            f"{limits.intervals:,} (raise it with {LIMIT_FLAGS['intervals']})")
    if s.resume and s.out is None:
        raise SettingsError("resume", "needs --out DIR, the run directory to resume from")
    return SimulationSettings(
        replications=reps, horizon=horizon, warmup=warmup, seed=seed, workers=workers,
        executor=s.executor, max_jobs=max_jobs, interval=interval,
        out=None if s.out is None else os.fspath(s.out), resume=bool(s.resume), limits=limits)


def resolve_settings(run, settings: SimulationSettings | None = None, *,
                     reps: int | None = None, horizon: float | None = None,
                     warmup: float | None = None, seed: int | None = None,
                     workers: int | None = None, executor: Any = None,
                     max_jobs: int | None = None, interval: float | None = None,
                     out: str | os.PathLike | None = None,
                     resume: bool | None = None,
                     limits: Limits | None = None) -> SimulationSettings:
    """Validated settings: each keyword given (not None) wins over ``settings``, which wins over
    the defaults in ``run`` (a scenario's :class:`~fluid.scenario.RunSettings`: horizon,
    warmup, replications, seed). ``limits``: the bounds on replications and intervals per run
    (:class:`fluid.scenario.Limits`; default: those of ``settings``, else the defaults).
    Raises :class:`SettingsError` naming the first bad setting."""
    base = settings or SimulationSettings(replications=run.replications, horizon=run.horizon,
                                          warmup=run.warmup, seed=run.seed)
    given = {"replications": reps, "horizon": horizon, "warmup": warmup, "seed": seed,
             "workers": workers, "executor": executor, "max_jobs": max_jobs,
             "interval": interval, "out": out, "resume": resume, "limits": limits}
    return _validated(replace(base, **{k: v for k, v in given.items() if v is not None}))


def expected_arrivals(scenario, horizon: float) -> float:
    """Expected (or, for a trace, recorded) arrivals of one run of ``scenario`` over
    ``[0, horizon]`` (time units), all sources together."""
    return sum(src.arrivals.cumulative(horizon) for src in scenario.sources.values())


def check_workload(arrivals_per_run: float, settings: SimulationSettings,
                   runs: float = 1.0) -> float:
    """The expected arrivals of ``runs`` × ``settings.replications`` runs that each expect
    ``arrivals_per_run`` (see :func:`expected_arrivals`; ``runs``: runs per replication,
    weighted by their volume, e.g. the sum of the factors of a scale study); raises
    :class:`SettingsError` (setting ``"horizon"``, with the replications and the limit in its
    message) when it exceeds ``settings.limits.arrivals``,
    so that a run too long is refused before it starts."""
    total = arrivals_per_run * settings.replications * runs
    limit = settings.limits.arrivals
    if not total <= limit:  # (also when it is nan)
        raise SettingsError("horizon", f"{settings.horizon:g} with {settings.replications:,} "
                            f"replications would simulate about {total:.3g} arrivals "
                            f"({arrivals_per_run:.3g} per run"
                            + (f" × {runs:g} runs per replication" if runs != 1 else "")
                            + f"), more than the limit of {limit:.3g}: shorten the horizon, "
                            f"run fewer replications, or raise the limit with "
                            f"{LIMIT_FLAGS['arrivals']}")
    return total
