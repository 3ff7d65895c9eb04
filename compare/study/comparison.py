"""The main job: run one scenario as a fluid model and as a simulation and set them side by side.

:func:`compare` runs :func:`fluid.analysis.throughput` and :func:`desim.replicate` on the same
scenario and window, builds the gap tables (:mod:`compare.gaps`), the flags
(:mod:`compare.flags`) and, for scenarios with profiles, traces or schedules (or when an
``interval`` is asked for), the per-interval table (:mod:`compare.transient`). Times are in the
scenario's time unit.
"""

from __future__ import annotations

import concurrent.futures as cf
from dataclasses import dataclass, field
from typing import Callable

import pandas as pd

from desim import SimulationResult, SimulationSettings, replicate, resolve_settings
from fluid.analysis import FluidResult, throughput
from fluid.json_values import json_ready
from fluid.scenario import Scenario

from .day_table import day_table
from .flags import Flag, find_flags
from .gap import GAP_CONVENTION
from .gaps import Gaps, gap_tables
from .rate_flags import RateCheck, rate_check, rate_uncertainty_notes
from .transient import default_interval, transient_table

__all__ = ["Comparison", "compare"]


@dataclass(frozen=True)
class Comparison:
    """Fluid against simulation for one scenario.

    ``fluid``: :class:`fluid.analysis.FluidResult`; ``simulation``:
    :class:`desim.SimulationResult`; ``gaps``: :class:`compare.gaps.Gaps`; ``flags``: tuple of
    :class:`compare.flags.Flag`; ``transient``: the per-interval table (columns interval, start,
    end, metric, name, fluid, mean, low, high, n) or None; ``settings``: the simulation settings
    used; ``notes``: caveats; ``verdicts``: False with fewer than two replications, where no
    interval exists and so no flag is judged (``flags`` is empty and says nothing); ``rate``:
    the day factors of the sources and the run without them
    (:class:`compare.study.rate_flags.RateCheck`)."""

    scenario_name: str
    time_unit: str
    settings: SimulationSettings
    fluid: FluidResult
    simulation: SimulationResult
    gaps: Gaps
    flags: tuple[Flag, ...]
    transient: pd.DataFrame | None = None
    interval: float | None = None
    notes: tuple[str, ...] = ()
    scenario: Scenario | None = field(default=None, repr=False, compare=False)
    verdicts: bool = True
    rate: RateCheck = field(default_factory=lambda: RateCheck({}))

    def flags_of(self, kind: str) -> tuple[Flag, ...]:
        return tuple(f for f in self.flags if f.kind == kind)

    def to_frame(self) -> pd.DataFrame:
        """The gap tables in one tidy table (see :meth:`compare.gaps.Gaps.to_frame`)."""
        return self.gaps.to_frame()

    def flags_frame(self) -> pd.DataFrame:
        return pd.DataFrame([f.to_json() for f in self.flags], columns=["kind", "where", "message"])

    def to_json(self) -> dict:
        """``{"scenario", "time_unit", "settings", "fluid", "simulation", "gaps", "gap_convention",
        "flags", "transient", "interval", "notes"}`` (design.md §5; ``gap_convention``: the one
        sign convention of every gap, :data:`compare.study.gap.GAP_CONVENTION`), and
        ``"verdicts"`` (False: fewer than two replications, flags not judged), ``"rate_uncertainty"``
        (the day factors and the targets judged without them, see
        :meth:`compare.study.rate_flags.RateCheck.to_json`), ``"per_interval_day"`` (the wide
        per-interval table of :mod:`compare.study.day_table`, one record per interval, or
        null) and ``"targets"`` (the service targets and what each service level measures, as
        the simulation's); nan and inf become null."""
        transient = None
        if self.transient is not None:
            transient = json_ready(self.transient.to_dict("records"))
        return {
            "scenario": self.scenario_name,
            "time_unit": self.time_unit,
            "settings": self.settings.to_json(),
            "fluid": self.fluid.to_dict(),
            "simulation": self.simulation.to_json(),
            "targets": dict(self.simulation.targets),
            "gaps": self.gaps.to_json(),
            "gap_convention": GAP_CONVENTION,
            "flags": [f.to_json() for f in self.flags],
            "transient": transient,
            "interval": self.interval,
            "notes": list(self.notes),
            "verdicts": self.verdicts,
            "rate_uncertainty": json_ready(self.rate.to_json()),
            # one row per interval (compare.study.day_table), when there is a per-interval table
            "per_interval_day": (None if self.transient is None or self.scenario is None else
                                 json_ready(day_table(self.scenario, self.transient)
                                            .to_dict("records"))),
        }


def compare(scenario: Scenario, settings: SimulationSettings | None = None, *,
            reps: int | None = None, horizon: float | None = None,
            warmup: float | None = None, seed: int | None = None, workers: int | None = None,
            executor: cf.Executor | None = None, progress: Callable[[], object] | None = None,
            interval: float | None = None, record_waits: bool = False,
            max_jobs: int | None = None, out=None, resume: bool = False,
            percentiles=None) -> Comparison:
    """Run ``scenario`` as a fluid model and as simulated replications over [0, horizon]
    measured over [warmup, horizon] (time units), and compare them.

    ``settings``: a :class:`desim.SimulationSettings`; each keyword given wins over it and
    anything unset comes from ``scenario.run`` (see :func:`desim.resolve_settings`).
    ``progress``/``record_waits``/``percentiles`` (the wait percentiles per place) go to
    :func:`desim.replicate`. ``interval``: length of the
    per-interval comparison; by default it is built only for time-varying scenarios, with the
    shortest profile or schedule step."""
    settings = resolve_settings(scenario.run, settings, reps=reps, horizon=horizon,
                                warmup=warmup, seed=seed, workers=workers, executor=executor,
                                interval=interval, max_jobs=max_jobs, out=out,
                                resume=resume or None)
    notes: list[str] = []
    interval = settings.interval
    if interval is None and scenario.has_time_variation:
        interval = default_interval(scenario, settings.horizon)
        settings = settings.with_changes(interval=interval)
    fluid = throughput(scenario, window=settings.window)
    sim = replicate(scenario, settings=settings, progress=progress, record_waits=record_waits,
                    percentiles=percentiles)
    gaps = gap_tables(scenario, fluid, sim)
    transient = None
    if sim.intervals is not None:
        transient = transient_table(scenario, sim.intervals, fluid.counters, settings.horizon)
    # (with one replication every interval is empty, so no flag could fire: "no flags" would
    # read as a verdict; none is given instead)
    verdicts = sim.replications >= MIN_REPLICATIONS_FOR_VERDICTS
    flags = find_flags(scenario, fluid, sim, gaps, transient) if verdicts else ()
    # (a second run without the day factors, only when a source has one)
    rate = rate_check(scenario, sim, settings, judge=verdicts, progress=progress,
                      percentiles=percentiles)
    flags += rate.flags
    if not verdicts:
        notes.append(no_verdict(sim.replications))
    notes.append(f"fluid model compared with: {fluid.model}")
    if scenario.has_time_variation:
        notes.append("time-varying scenario: fluid figures are means over the window "
                     f"[{settings.warmup:g}, {settings.horizon:g}] of the fluid trajectory")
    if sim.unstable_replications:
        notes.append(f"{sim.unstable_replications} replications stopped at the job cap")
    notes += rate_uncertainty_notes(scenario)
    notes += [f"fluid: {n}" for n in fluid.notes]
    notes += [f"simulation: {w}" for w in sim.warnings]
    return Comparison(
        scenario_name=scenario.name, time_unit=scenario.time_unit, settings=settings,
        fluid=fluid, simulation=sim, gaps=gaps, flags=flags, transient=transient,
        interval=interval, notes=tuple(notes), scenario=scenario, verdicts=verdicts, rate=rate,
    )


#: Replications needed for an interval, and so for a flag.
MIN_REPLICATIONS_FOR_VERDICTS = 2


def no_verdict(replications: int) -> str:
    """The line said instead of flags when ``replications`` give no interval."""
    word = "replication" if replications == 1 else "replications"
    return (f"{replications} {word}: no interval, so no verdict; flags not judged "
            f"(give --reps {MIN_REPLICATIONS_FOR_VERDICTS} or more)")
