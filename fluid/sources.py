"""Arrival processes of a source, as small frozen objects like the distributions.

A :class:`~fluid.scenario.Source` holds one of them:

* :class:`PoissonArrivals` — a Poisson process at a constant ``rate`` (scenario key ``rate``);
* :class:`ProfileArrivals` — a nonhomogeneous Poisson process whose rate is piecewise constant
  over intervals of length ``step`` (scenario key ``profile``; the last rate holds after the end);
* :class:`TraceArrivals` — recorded arrival times replayed as they are (scenario key ``trace``).

Each answers the same questions, so no engine or study asks which kind it holds:

* fluid side: :meth:`cumulative` (expected or recorded arrivals in ``[0, t]``, scalar) and
  :meth:`cumulative_grid` (the same on a numpy time grid: the source counter z_s(t) of the
  counter equations), :meth:`rate_at`, :meth:`mean_rate`, ``is_constant`` (the throughput LP
  needs a constant rate), ``steps`` (the interval lengths a time grid should divide);
* simulation side: :meth:`clock` gives the per-run :class:`ArrivalClock` that draws the arrival
  times from a random stream, a numpy block at a time;
* studies: :meth:`scaled` (rates times a factor) with :meth:`rate_fields` (where the rates sit in
  the scenario document), :meth:`describe` for tables, ``file_data`` for run fingerprints.

A source may also carry a :class:`RandomRate` (scenario key ``random_rate``): a day factor of
mean 1 that multiplies all its rates, drawn once per replication, so that the day's volume
itself is uncertain (a doubly stochastic, mixed Poisson process). The fluid side uses the mean
(factor 1); the simulator draws it (:func:`parse_random_rate` reads the key).

All times are in the scenario's time unit; rates are per that unit.
"""

from __future__ import annotations

import bisect
import math
from dataclasses import dataclass
from itertools import chain
from typing import Any, Callable, ClassVar, Iterator, Protocol

import numpy as np

from .errors import FieldError
from .fields import as_float

__all__ = [
    "Arrivals",
    "ArrivalClock",
    "PoissonArrivals",
    "ProfileArrivals",
    "TraceArrivals",
    "RandomRate",
    "RANDOM_RATE_DISTS",
    "RANDOM_RATE_CV",
    "parse_random_rate",
    "rate_uncertainty",
    "rate_uncertainty_notes",
]

INF = math.inf


def _blocks(sample: Callable[[np.random.Generator, int], np.ndarray],
            rng: np.random.Generator, block: int) -> Iterator[float]:
    """Endless Python floats refilled ``block`` at a time by ``sample(rng, block)``: the same
    iterator as :func:`desim.streams.block_draws` (``fluid`` does not import ``desim``)."""
    return chain.from_iterable(iter(lambda: sample(rng, block).tolist(), None))


class ArrivalClock(Protocol):
    """The arrival times of one source in one run (mutable; one per run).

    ``next_time(now)``: the time of the arrival after the one at ``now`` (inf when there is
    none). ``spacing``: for a constant rate, the iterator of times between arrivals, which the
    engine's hot path reads directly (``now + next(spacing)`` is what ``next_time`` returns);
    None otherwise."""

    spacing: Iterator[float] | None

    def next_time(self, now: float) -> float: ...


# --- clocks (per run) ----------------------------------------------------------------------------


class _PoissonClock:
    __slots__ = ("spacing",)

    def __init__(self, spacing: Iterator[float]):
        self.spacing = spacing

    def next_time(self, now: float) -> float:
        return now + next(self.spacing)


class _ProfileClock:
    __slots__ = ("gaps", "step", "rates", "interval")
    spacing = None

    def __init__(self, gaps: Iterator[float], step: float, rates: tuple[float, ...]):
        self.gaps = gaps  # standard exponential draws
        self.step = step
        self.rates = rates
        self.interval = 0  # the interval of the last arrival (times only grow)

    def next_time(self, t: float) -> float:
        # A Poisson process with a piecewise-constant rate, generated exactly: an exponential gap
        # at the current interval's rate; if it overshoots the interval's end, restart from the
        # boundary with the next rate (valid because the exponential is memoryless).
        rates, n, i = self.rates, len(self.rates), self.interval
        while i < n - 1:
            end = (i + 1) * self.step
            r = rates[i]
            if r > 0:
                c = t + next(self.gaps) / r
                if c < end:
                    self.interval = i
                    return c
            t, i = max(t, end), i + 1
        self.interval = i
        r = rates[-1]
        return t + next(self.gaps) / r if r > 0 else INF


class _TraceClock:
    __slots__ = ("times", "i")
    spacing = None

    def __init__(self, times: tuple[float, ...]):
        self.times = times
        self.i = 0

    def next_time(self, now: float) -> float:
        i = self.i
        if i >= len(self.times):
            return INF
        self.i = i + 1
        return self.times[i]


# --- arrival processes (frozen) ------------------------------------------------------------------


@dataclass(frozen=True)
class PoissonArrivals:
    """A Poisson process at ``rate`` arrivals per time unit (``rate > 0``)."""

    rate: float

    kind: ClassVar[str] = "poisson"
    is_constant: ClassVar[bool] = True
    steps: ClassVar[tuple[float, ...]] = ()  # the rate never changes
    file_data: ClassVar[None] = None  # the document holds everything

    def rate_at(self, t: float) -> float:
        return self.rate

    def cumulative(self, t: float) -> float:
        """Expected arrivals in ``[0, t]``: rate × t."""
        return self.rate * max(t, 0.0)

    def cumulative_grid(self, t: np.ndarray) -> np.ndarray:
        """:meth:`cumulative` at every point of the grid ``t`` (times >= 0)."""
        return self.rate * t

    def mean_rate(self, horizon: float) -> float:
        """Average arrival rate over ``[0, horizon]``: the rate itself."""
        return self.rate

    def clock(self, rng: np.random.Generator, block: int) -> ArrivalClock:
        """Arrival times drawn from ``rng``: exponential gaps of mean 1 / rate, ``block`` at a
        time."""
        # gap / rate divided by numpy a block at a time: IEEE division is correctly rounded in
        # numpy as in Python, so every arrival time is the same float
        return _PoissonClock(_blocks(
            lambda g, n, rate=self.rate: g.standard_exponential(n) / rate, rng, block))

    def scaled(self, factor: float) -> PoissonArrivals:
        """The same process at ``rate × factor``."""
        return PoissonArrivals(self.rate * factor)

    def rate_fields(self) -> dict[str, Any]:
        """The document fields (paths below the source) that hold the rates, with their values."""
        return {"rate": self.rate}

    def describe(self, fmt: Callable[[float], str] = "{:g}".format) -> str:
        """One line for tables, numbers written by ``fmt``."""
        return f"Poisson {fmt(self.rate)}"


@dataclass(frozen=True)
class ProfileArrivals:
    """A Poisson process with a piecewise-constant rate: ``rates[i]`` arrivals per time unit on
    ``[i*step, (i+1)*step)``; the last value holds after the end (``step > 0``, rates >= 0 with
    at least one positive)."""

    step: float
    rates: tuple[float, ...]

    kind: ClassVar[str] = "profile"
    is_constant: ClassVar[bool] = False
    file_data: ClassVar[None] = None

    def __post_init__(self):
        object.__setattr__(self, "rates", tuple(self.rates))

    @property
    def steps(self) -> tuple[float, ...]:
        return (self.step,)

    def rate_at(self, t: float) -> float:
        i = int(t // self.step)
        return self.rates[min(max(i, 0), len(self.rates) - 1)]

    def cumulative(self, t: float) -> float:
        """Expected arrivals in ``[0, t]``: the integral of the rate."""
        if t <= 0:
            return 0.0
        full = int(t // self.step)
        total = 0.0
        for i in range(min(full, len(self.rates))):
            total += self.rates[i] * self.step
        if full >= len(self.rates):
            total += self.rates[-1] * (t - len(self.rates) * self.step)
        else:
            total += self.rates[full] * (t - full * self.step)
        return total

    def cumulative_grid(self, t: np.ndarray) -> np.ndarray:
        """:meth:`cumulative` at every point of the grid ``t`` (times >= 0; linear between the
        interval ends, so it may differ from :meth:`cumulative` in the last bits)."""
        k = len(self.rates)
        ends = self.step * np.arange(k + 1)
        cum = np.concatenate([[0.0], np.cumsum(np.asarray(self.rates) * self.step)])
        inside = np.interp(t, ends, cum)
        return np.where(t > ends[-1], cum[-1] + self.rates[-1] * (t - ends[-1]), inside)

    def mean_rate(self, horizon: float) -> float:
        """Average arrival rate over ``[0, horizon]``: cumulative(horizon) / horizon."""
        return self.cumulative(horizon) / horizon

    def clock(self, rng: np.random.Generator, block: int) -> ArrivalClock:
        """Arrival times drawn exactly from ``rng`` (standard exponential gaps, ``block`` at a
        time, each divided by the rate of the interval it starts in)."""
        gaps = _blocks(lambda g, n: g.standard_exponential(n), rng, block)
        return _ProfileClock(gaps, self.step, tuple(self.rates))

    def scaled(self, factor: float) -> ProfileArrivals:
        """The same profile with every rate × ``factor`` (the step unchanged)."""
        return ProfileArrivals(self.step, tuple(r * factor for r in self.rates))

    def rate_fields(self) -> dict[str, Any]:
        """The document fields (paths below the source) that hold the rates, with their values."""
        return {"profile.rates": list(self.rates)}

    def describe(self, fmt: Callable[[float], str] = "{:g}".format) -> str:
        """One line for tables, numbers written by ``fmt``."""
        return (f"profile step {fmt(self.step)}, {len(self.rates)} rates, "
                f"{fmt(min(self.rates))}..{fmt(max(self.rates))}")


@dataclass(frozen=True)
class TraceArrivals:
    """Recorded arrival times (non-decreasing, >= 0, at least one), replayed as they are."""

    times: tuple[float, ...]

    kind: ClassVar[str] = "trace"
    is_constant: ClassVar[bool] = False
    steps: ClassVar[tuple[float, ...]] = ()

    def __post_init__(self):
        object.__setattr__(self, "times", tuple(self.times))

    @property
    def file_data(self) -> tuple[float, ...]:
        """The data read from the trace file (the document names the file only)."""
        return self.times

    def rate_at(self, t: float) -> float:
        """The slope of the recorded count drawn as straight lines between arrival instants
        (and from time 0 to the first): on ``[a, b)`` between consecutive distinct arrival times
        (a = 0 before the first) the arrivals at ``b`` over ``b - a``, so that its integral over
        ``[0, t]`` at an arrival instant ``t`` is the count in ``(0, t]``; 0 from the last
        arrival on (and before time 0)."""
        times = self.times
        i = bisect.bisect_right(times, t)
        if i == len(times) or t < 0:
            return 0.0
        after = times[i]
        before = times[i - 1] if i else 0.0
        return (bisect.bisect_right(times, after) - i) / (after - before)

    def cumulative(self, t: float) -> float:
        """Recorded arrivals in ``[0, t]``."""
        return float(bisect.bisect_right(self.times, t))

    def cumulative_grid(self, t: np.ndarray) -> np.ndarray:
        """:meth:`cumulative` at every point of the grid ``t``."""
        return np.searchsorted(np.asarray(self.times), t, side="right").astype(float)

    def mean_rate(self, horizon: float) -> float:
        """Average arrival rate over ``[0, horizon]``: recorded arrivals / horizon."""
        return self.cumulative(horizon) / horizon

    def clock(self, rng: np.random.Generator, block: int) -> ArrivalClock:
        """The recorded times in order (``rng`` and ``block`` are not used)."""
        return _TraceClock(self.times)

    def scaled(self, factor: float) -> TraceArrivals:
        """Always raises :class:`~fluid.errors.FieldError`: recorded times have no rate to
        scale."""
        raise FieldError("trace", "a trace source cannot be scaled (its arrival times are "
                                  "fixed); give it a rate or a profile for a scale study")

    def rate_fields(self) -> dict[str, Any]:
        """Empty: a trace has no rate in its document entry."""
        return {}

    def describe(self, fmt: Callable[[float], str] = "{:g}".format) -> str:
        """One line for tables."""
        return f"trace, {len(self.times)} arrivals"


#: Any of the arrival processes a source may hold.
Arrivals = PoissonArrivals | ProfileArrivals | TraceArrivals


# --- arrival-rate uncertainty --------------------------------------------------------------------

#: The distributions a day factor may have (gamma only for now).
RANDOM_RATE_DISTS = ("gamma",)
#: The largest cv of a day factor. Beyond 1 the gamma factor is mostly near 0 with rare days of
#: many times the expected volume, which no staffing plan is read against, and one such day
#: could ask for far more work than the expected arrivals the run was checked for.
RANDOM_RATE_CV = 1.0
#: The smallest positive cv (as for the distributions' cv: below it the gamma shape 1/cv²
#: overflows).
SMALLEST_RATE_CV = 1e-6


@dataclass(frozen=True)
class RandomRate:
    """A day factor of mean 1 that multiplies every rate of a source, drawn once per
    replication: gamma with the given ``cv`` (shape 1/cv², scale cv²). Arrivals over a period
    with expected count λ then have variance λ + cv²λ² (a gamma mixture of Poisson counts is
    negative binomial; Jongbloed and Koole 2001). ``cv`` 0 is no factor (always 1)."""

    cv: float
    dist: str = "gamma"

    @property
    def mean(self) -> float:
        """The factor's mean: 1 (the fluid model uses it)."""
        return 1.0

    @property
    def varies(self) -> bool:
        """True when the factor is not always 1 (cv > 0)."""
        return self.cv > 0

    def sample(self, rng: np.random.Generator) -> float:
        """One factor drawn from ``rng`` (1.0 exactly when cv is 0; then ``rng`` is not used)."""
        if self.cv == 0:
            return 1.0
        shape = 1.0 / self.cv**2
        return float(rng.gamma(shape, 1.0 / shape))

    def variance_of_count(self, expected: float) -> float:
        """Variance of the arrivals over a period whose expected count is ``expected`` (λ):
        λ + cv² λ² (the negative binomial variance of the gamma-Poisson mixture)."""
        return expected + self.cv**2 * expected**2

    def describe(self) -> str:
        """One line for tables and notes."""
        return f"day factor {self.dist}, mean 1, cv {self.cv:g}"


def parse_random_rate(value: Any, path: str) -> RandomRate:
    """Read ``random_rate: {dist: gamma, cv: C}`` (``dist`` defaults to gamma; cv 0, or in
    [1e-6, :data:`RANDOM_RATE_CV`]); raises :class:`FieldError` naming the key."""
    if not isinstance(value, dict):
        raise FieldError(path, "must be a mapping such as {dist: gamma, cv: 0.1}", value)
    for key in value:
        if key not in ("dist", "cv"):
            raise FieldError(f"{path}.{key}", "unknown key (expected one of: dist, cv)")
    dist = value.get("dist", "gamma")
    if dist not in RANDOM_RATE_DISTS:
        raise FieldError(f"{path}.dist", "only gamma is supported for a day factor for now "
                         f"(expected one of: {', '.join(RANDOM_RATE_DISTS)})", dist)
    if "cv" not in value:
        raise FieldError(f"{path}.cv", "is required")
    cv = as_float(value["cv"], f"{path}.cv")
    if cv < 0:
        raise FieldError(f"{path}.cv", "must be >= 0", value["cv"])
    if cv > RANDOM_RATE_CV:
        raise FieldError(f"{path}.cv", f"must be at most {RANDOM_RATE_CV:g} (a day factor "
                         "with a larger cv is mostly near 0 with rare huge days)", value["cv"])
    if 0 < cv < SMALLEST_RATE_CV:
        raise FieldError(f"{path}.cv", f"must be 0 or at least {SMALLEST_RATE_CV:g}", value["cv"])
    return RandomRate(cv=cv, dist=dist)


def rate_uncertainty(sources) -> dict[str, dict]:
    """``{source: {"dist", "cv"}}`` for every source (of the mapping name -> Source) whose day
    factor varies (cv > 0), empty when none: the spread the fluid model leaves out, as it reads
    the factor's mean (1)."""
    return {n: {"dist": s.random_rate.dist, "cv": s.random_rate.cv}
            for n, s in sources.items() if s.rate_varies}


def rate_uncertainty_notes(sources) -> list[str]:
    """One note per source whose day factor varies (see :func:`rate_uncertainty`)."""
    return [f"arrivals of {n} vary by a day factor with cv {d['cv']:g} ({d['dist']}, mean 1, "
            "drawn once per replication): the fluid model uses the mean"
            for n, d in rate_uncertainty(sources).items()]
