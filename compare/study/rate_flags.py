"""Rate uncertainty against queueing randomness: does a day factor make a target miss?

A source with ``random_rate`` (:class:`fluid.sources.RandomRate`) has its rates multiplied by a
factor of mean 1 drawn once per replication, so each replication is a day whose volume is
itself uncertain. A target can then miss for two reasons: the waits a day of the expected
volume brings (queueing randomness) or the bad days (rate uncertainty). :func:`rate_check`
tells them apart by simulating the scenario a second time without the factors (cv 0) with
the same seed, so both runs see the same arrivals, holds and patience draws (common random
numbers) and differ by the factors alone. A ``rate_uncertainty`` flag is raised for each
target that misses with the factor (by the rule of ``target_missed``: the whole interval on
the wrong side of the goal) but not without it.

The check costs nothing when no source has a factor with cv > 0 (:func:`varying_sources` is
empty and nothing is simulated). Times are in the scenario's time unit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from desim import Estimate, SimulationResult, SimulationSettings, replicate
from fluid.loading import with_changes
from fluid.scenario import Scenario
from fluid.sources import rate_uncertainty, rate_uncertainty_notes as _notes

from .flags import Flag

__all__ = ["RATE_FLAG_KIND", "RateCheck", "TargetPair", "rate_check", "varying_sources",
           "rate_uncertainty_json", "rate_uncertainty_notes", "without_factors"]

#: The flag kind this module raises.
RATE_FLAG_KIND = "rate_uncertainty"


def varying_sources(scenario: Scenario) -> tuple[str, ...]:
    """The sources whose rates a day factor with cv > 0 multiplies, in declaration order."""
    return tuple(n for n, s in scenario.sources.items() if s.rate_varies)


def rate_uncertainty_json(scenario: Scenario) -> dict:
    """``{source: {"dist", "cv"}}`` for every source with a varying day factor (empty when
    none; :func:`fluid.sources.rate_uncertainty`)."""
    return rate_uncertainty(scenario.sources)


def rate_uncertainty_notes(scenario: Scenario) -> list[str]:
    """One note per source with a varying day factor (:func:`fluid.sources.rate_uncertainty_notes`)."""
    return _notes(scenario.sources)


def without_factors(scenario: Scenario) -> Scenario:
    """The same scenario with every day factor switched off (cv 0)."""
    return with_changes(scenario, {f"sources.{n}.random_rate.cv": 0
                                   for n in varying_sources(scenario)})


@dataclass(frozen=True)
class TargetPair:
    """One target judged with the day factors and without them (same seed). ``target``: the
    place of a service target, or ``abandonment``; ``goal``: its goal (a share to reach) or
    maximum (a share not to exceed); ``with_factor``, ``without_factor``: the simulated
    estimates; ``days_meeting_with``, ``days_meeting_without``: share of the replications
    (days) whose own value met the target."""

    target: str
    goal: float
    with_factor: Estimate
    without_factor: Estimate
    days_meeting_with: float
    days_meeting_without: float
    misses_with: bool
    misses_without: bool

    @property
    def rate_driven(self) -> bool:
        """The target misses with the factors but not without them."""
        return self.misses_with and not self.misses_without

    def to_json(self) -> dict:
        def share(x):
            return x if math.isfinite(x) else None

        return {"target": self.target, "goal": self.goal,
                "with_factor": self.with_factor.to_json(),
                "without_factor": self.without_factor.to_json(),
                "days_meeting_with": share(self.days_meeting_with),
                "days_meeting_without": share(self.days_meeting_without),
                "misses_with": self.misses_with, "misses_without": self.misses_without}


@dataclass(frozen=True)
class RateCheck:
    """The comparison's run without day factors and what it says. ``sources``: as
    :func:`rate_uncertainty_json`; ``without``: the simulation without the factors (None when
    no source has one, or no verdict was judged); ``targets``: a :class:`TargetPair` per target;
    ``flags``: the ``rate_uncertainty`` flags."""

    sources: dict
    without: SimulationResult | None = field(default=None, repr=False)
    targets: tuple[TargetPair, ...] = ()
    flags: tuple[Flag, ...] = ()

    def to_json(self) -> dict:
        return {"sources": self.sources, "checked": self.without is not None,
                "targets": [t.to_json() for t in self.targets]}


def _days_meeting(values: np.ndarray, goal: float, at_least: bool) -> float:
    values = values[np.isfinite(values)]
    if not values.size:
        return math.nan
    return float(np.mean(values >= goal if at_least else values <= goal))


def _overall_abandonment_per_day(sim: SimulationResult) -> np.ndarray:
    names = list(sim.sources)
    ab = np.sum([sim.raw("source", s, "abandoned") for s in names], axis=0)
    done = np.sum([sim.raw("source", s, "completed") for s in names], axis=0)
    ended = ab + done
    return np.where(ended > 0, ab / np.where(ended > 0, ended, 1.0), np.nan)


def _pairs(scenario: Scenario, with_sim: SimulationResult,
           without_sim: SimulationResult) -> list[TargetPair]:
    pairs = []
    for p, target in scenario.targets.service.items():
        a, b = with_sim.places[p].get("served_within"), without_sim.places[p].get("served_within")
        if a is None or b is None:
            continue
        pairs.append(TargetPair(
            p, target.goal, a, b,
            _days_meeting(with_sim.raw("place", p, "served_within"), target.goal, True),
            _days_meeting(without_sim.raw("place", p, "served_within"), target.goal, True),
            misses_with=a.high < target.goal, misses_without=b.high < target.goal))
    cap = scenario.targets.abandonment_max
    if cap is not None and with_sim.sources:
        a, b = with_sim.overall_abandonment(), without_sim.overall_abandonment()
        pairs.append(TargetPair(
            "abandonment", cap, a, b,
            _days_meeting(_overall_abandonment_per_day(with_sim), cap, False),
            _days_meeting(_overall_abandonment_per_day(without_sim), cap, False),
            misses_with=a.low > cap, misses_without=b.low > cap))
    return pairs


def _f(x: float) -> str:
    return f"{x:.4g}"


def _est(e: Estimate) -> str:
    return f"{_f(e.mean)} [{_f(e.low)}, {_f(e.high)}]"


def _flag(pair: TargetPair, sources: dict) -> Flag:
    factors = ", ".join(f"{n} (cv {d['cv']:g})" for n, d in sources.items())
    if pair.target == "abandonment":
        what = f"overall abandonment (maximum {100 * pair.goal:.1f} %)"
    else:
        what = f"the service level at {pair.target} (goal {100 * pair.goal:.1f} %)"
    days = ""
    if math.isfinite(pair.days_meeting_with) and math.isfinite(pair.days_meeting_without):
        days = (f"; days meeting it: {100 * pair.days_meeting_with:.0f} % with the factor, "
                f"{100 * pair.days_meeting_without:.0f} % without")
    return Flag(RATE_FLAG_KIND, pair.target, (
        f"{what} misses with the day factor of {factors}: {_est(pair.with_factor)}, but holds "
        f"without it: {_est(pair.without_factor)} (same seed, common random numbers){days}: "
        "rate uncertainty, not queueing randomness, makes the target miss; plan for the "
        "high-volume days (staff to a volume above the mean, or a plan per day type) rather "
        "than for the expected day"))


def rate_check(scenario: Scenario, sim: SimulationResult, settings: SimulationSettings, *,
               judge: bool = True, progress=None, percentiles=None) -> RateCheck:
    """Judge ``scenario``'s targets with its day factors (``sim``, already simulated with
    ``settings``) and without them (simulated here with the same settings and seed, not saved
    in a run folder). Simulates nothing when no source has a varying factor, nor when
    ``judge`` is False (no verdicts, e.g. one replication)."""
    sources = rate_uncertainty_json(scenario)
    if not sources or not judge:
        return RateCheck(sources)
    plain = without_factors(scenario)
    without = replicate(plain, settings=settings.with_changes(out=None, resume=False),
                        progress=progress, percentiles=percentiles)
    pairs = tuple(_pairs(scenario, sim, without))
    flags = tuple(_flag(p, sources) for p in pairs if p.rate_driven)
    return RateCheck(sources, without, pairs, flags)
