"""The scenario model: one frozen description of the net that both engines read.

A :class:`Scenario` is built by :func:`fluid.loading.load_scenario` (which validates the YAML
document of design.md §3) and never changes afterwards. Variants (another staffing plan, scaled
volumes) come from :func:`fluid.loading.with_changes`, which applies overrides to the scenario's
document and validates the result again, so a variant is exactly what the same YAML edited by
hand would give. The structure queries here read the net as written (arcs, routes, priorities);
the facts derived from it (routing shares, reachability, flows, ...) are in
:mod:`fluid.structure`.

All times are in the scenario's ``time_unit``; rates are per that unit.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from functools import cached_property
from typing import Any, Iterator, Mapping

from .distributions import Distribution
from .sources import Arrivals, RandomRate

__all__ = [
    "FrozenMap",
    "RunSettings",
    "Source",
    "Schedule",
    "Pool",
    "Place",
    "Transition",
    "ServiceTarget",
    "ABANDONER_CONVENTIONS",
    "Targets",
    "Scenario",
    "Limits",
    "LIMIT_FLAGS",
    "LARGEST_SEED",
    "OUTCOMES",
]

#: How a job can end for its caller: taken and served, abandoned, or lost (turned away).
OUTCOMES = ("served", "abandoned", "lost")

#: The largest run seed (numpy's SeedSequence takes any whole number; 128 bits is plenty).
LARGEST_SEED = 2**128 - 1


class FrozenMap(Mapping):
    """A read-only, hashable, picklable mapping that keeps insertion order."""

    __slots__ = ("_data",)

    def __init__(self, data: Mapping | None = None):
        object.__setattr__(self, "_data", dict(data or {}))

    def __getitem__(self, key):
        return self._data[key]

    def __iter__(self) -> Iterator:
        return iter(self._data)

    def __len__(self) -> int:
        return len(self._data)

    def __hash__(self) -> int:
        return hash(tuple(self._data.items()))

    def __eq__(self, other) -> bool:
        return isinstance(other, Mapping) and dict(self._data) == dict(other)

    def __repr__(self) -> str:
        return f"FrozenMap({self._data!r})"

    def __reduce__(self):
        return (FrozenMap, (self._data,))

    def __setattr__(self, name, value):
        raise AttributeError("FrozenMap is read-only")


@dataclass(frozen=True)
class RunSettings:
    """Default simulation settings of a scenario (command-line flags override them).
    ``start``: the clock time of time 0 in minutes after midnight (``run.start: "08:00"`` gives
    480.0), or None; only labels read it (:func:`fluid.clock.clock_label`)."""

    horizon: float = 600.0
    warmup: float = 0.0
    replications: int = 10
    seed: int = 0
    start: float | None = None


@dataclass(frozen=True)
class Limits:
    """Bounds on the work one input may ask for, so that any input ends fast (the README's
    "Limits"). Each can be raised: ``fluid.load_scenario(..., limits=Limits(...))``,
    ``desim.resolve_settings(..., limits=...)``, or the command-line flag in
    :data:`LIMIT_FLAGS`.

    ``file_values``: numbers read from one trace or empirical file; ``intervals``: intervals of
    one run (horizon / step) for per-interval tables and for profile and schedule steps;
    ``replications``: replications of one run; ``arrivals``: expected arrivals over every run a
    command makes (rate × horizon × replications, summed), refused beyond it before anything
    runs; ``outside_files``: whether files named in a scenario may lie outside its folder."""

    file_values: int = 1_000_000
    intervals: int = 10_000
    replications: int = 10_000
    arrivals: float = 1e9
    outside_files: bool = False

    def flag(self, name: str) -> str:
        """The command-line flag that sets the limit ``name`` (a field)."""
        return LIMIT_FLAGS[name]


#: The command-line flag of each field of :class:`Limits`.
LIMIT_FLAGS = {"file_values": "--max-file-values", "intervals": "--max-intervals",
               "replications": "--max-replications", "arrivals": "--max-arrivals",
               "outside_files": "--allow-outside-files"}


@dataclass(frozen=True)
class Source:
    """Exogenous arrivals into one place. ``arrivals`` is the arrival process, one of
    :class:`~fluid.sources.PoissonArrivals`, :class:`~fluid.sources.ProfileArrivals` or
    :class:`~fluid.sources.TraceArrivals`; ask it, not which kind it is. ``random_rate``: a
    :class:`~fluid.sources.RandomRate` day factor multiplying its rates, drawn once per
    replication (None: the rates as written; the fluid model always reads them as written,
    the factor's mean being 1)."""

    name: str
    into: str
    arrivals: Arrivals
    random_rate: RandomRate | None = None

    @property
    def rate_varies(self) -> bool:
        """True when a day factor with cv > 0 multiplies the rates in the simulation."""
        return self.random_rate is not None and self.random_rate.varies


@dataclass(frozen=True)
class Schedule:
    """Staff per interval: ``staff[i]`` on ``[i*step, (i+1)*step)``; the last value holds after."""

    step: float
    staff: tuple[int, ...]

    def staff_at(self, t: float) -> int:
        i = int(t // self.step)
        return self.staff[min(max(i, 0), len(self.staff) - 1)]


@dataclass(frozen=True)
class Pool:
    """Anonymous agents. ``staff`` is the initial marking (the first interval's staff when there
    is a schedule). ``priority`` orders the pool's output transitions, highest first."""

    name: str
    staff: int
    priority: tuple[str, ...] = ()
    schedule: Schedule | None = None

    def staff_at(self, t: float) -> int:
        return self.staff if self.schedule is None else self.schedule.staff_at(t)

    def mean_staff(self, horizon: float) -> float:
        if self.schedule is None:
            return float(self.staff)
        s = self.schedule
        total, t = 0.0, 0.0
        i = 0
        while t < horizon:
            end = min(horizon, (i + 1) * s.step) if i < len(s.staff) - 1 else horizon
            total += s.staff[min(i, len(s.staff) - 1)] * (end - t)
            t, i = end, i + 1
        return total / horizon


@dataclass(frozen=True)
class Place:
    """A place where jobs reside. ``hold``: time before a token is available (none = at once);
    ``route``: preselection proportions over the output transitions; ``priority``: output
    transitions in order, highest first; ``patience``: time an available job waits before it
    abandons; ``abandon_to``: where an abandoning job goes (none = it leaves)."""

    name: str
    hold: Distribution | None = None
    route: FrozenMap | None = None
    priority: tuple[str, ...] = ()
    patience: Distribution | None = None
    abandon_to: str | None = None

    @property
    def hold_mean(self) -> float:
        return 0.0 if self.hold is None else self.hold.mean


@dataclass(frozen=True)
class Transition:
    """Consumes ``inputs`` (name -> arc weight) and produces ``outputs`` (name -> arc weight).
    ``outcome``: how a job that ends here ends for its caller (one of :data:`OUTCOMES`; only a
    transition whose outputs hold no place, one that ends jobs, can be other than served)."""

    name: str
    inputs: FrozenMap
    outputs: FrozenMap
    outcome: str = "served"


#: How a service level counts the jobs that abandon (``targets.PLACE.abandoned``).
ABANDONER_CONVENTIONS = ("against", "excluded", "excluded_within")


@dataclass(frozen=True)
class ServiceTarget:
    """Share ``goal`` of the jobs that become available in ``place`` taken within ``within``
    (scenario time unit), counting abandoners by ``abandoned``: "against" (the default: taken
    within / all that left the place), "excluded" (taken within / taken), or "excluded_within"
    (abandoners that waited at most ``excluded_within`` left out of both sides, later ones
    counted against)."""

    place: str
    within: float
    goal: float
    abandoned: str = "against"
    excluded_within: float | None = None

    def describe(self, time_unit: str) -> str:
        """What the service level measures, in words: "within 0.5 min, abandoners counted
        against"."""
        within = f"within {self.within:g} {time_unit}"
        if self.abandoned == "excluded":
            return f"{within}, abandoners excluded"
        if self.abandoned == "excluded_within":
            return (f"{within}, abandoners within {self.excluded_within:g} {time_unit} excluded "
                    "(later ones counted against)")
        return f"{within}, abandoners counted against"

    def to_json(self, time_unit: str) -> dict:
        """``{"within", "goal", "abandoned", "excluded_within", "describes"}``."""
        return {"within": self.within, "goal": self.goal, "abandoned": self.abandoned,
                "excluded_within": self.excluded_within, "describes": self.describe(time_unit)}


@dataclass(frozen=True)
class Targets:
    service: FrozenMap = field(default_factory=FrozenMap)
    abandonment_max: float | None = None


@dataclass(frozen=True)
class Scenario:
    """A validated net with its parameters and targets. Read-only; see
    :func:`fluid.loading.with_changes`."""

    name: str
    time_unit: str
    run: RunSettings
    sources: FrozenMap  # name -> Source
    pools: FrozenMap  # name -> Pool
    places: FrozenMap  # name -> Place
    transitions: FrozenMap  # name -> Transition
    targets: Targets
    shifts: FrozenMap = field(default_factory=FrozenMap)  # name -> fluid.shifts.ShiftPattern
    file: str = "<string>"
    document: str = field(default="{}", repr=False, compare=False)
    base_dir: str | None = field(default=None, repr=False, compare=False)
    limits: Limits = field(default=Limits(), repr=False, compare=False)

    # --- structure ------------------------------------------------------------------------------

    def is_pool(self, name: str) -> bool:
        return name in self.pools

    def is_job_place(self, name: str) -> bool:
        return name in self.places

    @cached_property
    def _outputs(self) -> dict[str, tuple[str, ...]]:
        out: dict[str, list[str]] = {n: [] for n in (*self.places, *self.pools)}
        for t in self.transitions.values():
            for p in t.inputs:
                out[p].append(t.name)
        return {k: tuple(v) for k, v in out.items()}

    @cached_property
    def _inputs(self) -> dict[str, tuple[str, ...]]:
        out: dict[str, list[str]] = {n: [] for n in (*self.places, *self.pools)}
        for t in self.transitions.values():
            for p in t.outputs:
                out[p].append(t.name)
        return {k: tuple(v) for k, v in out.items()}

    def outputs_of(self, node: str) -> tuple[str, ...]:
        """Transitions that consume from place or pool ``node``, in declaration order."""
        return self._outputs[node]

    def inputs_of(self, node: str) -> tuple[str, ...]:
        """Transitions that put tokens into place or pool ``node``, in declaration order."""
        return self._inputs[node]

    def sources_into(self, place: str) -> tuple[str, ...]:
        return tuple(s.name for s in self.sources.values() if s.into == place)

    def job_input(self, transition: str) -> str | None:
        """The job place ``transition`` takes a job from, or None."""
        for p in self.transitions[transition].inputs:
            if p in self.places:
                return p
        return None

    def job_output(self, transition: str) -> str | None:
        """The job place ``transition`` puts its job into, or None (the job ends there)."""
        for p in self.transitions[transition].outputs:
            if p in self.places:
                return p
        return None

    def ends_job(self, transition: str) -> bool:
        return self.job_input(transition) is not None and self.job_output(transition) is None

    @cached_property
    def ending_transitions(self) -> tuple[str, ...]:
        return tuple(t for t in self.transitions if self.ends_job(t))

    def priority_order(self, node: str) -> tuple[str, ...]:
        """Output transitions of ``node`` in priority order (empty when it has no priority)."""
        obj = self.places.get(node) or self.pools.get(node)
        return obj.priority

    @property
    def has_priorities(self) -> bool:
        return any(p.priority for p in self.places.values()) or any(
            p.priority for p in self.pools.values()
        )

    @property
    def has_time_variation(self) -> bool:
        """True when a source has a profile or trace or a pool has a schedule."""
        return any(not s.arrivals.is_constant for s in self.sources.values()) or any(
            p.schedule is not None for p in self.pools.values()
        )

    @property
    def has_patience(self) -> bool:
        return any(p.patience is not None for p in self.places.values())

    def to_document(self) -> dict[str, Any]:
        """The (override-applied) YAML document this scenario was validated from."""
        return json.loads(self.document)
