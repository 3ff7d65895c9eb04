"""Holding-time and patience distributions.

Each distribution is a small frozen object with ``mean``, ``cv`` (coefficient of variation,
standard deviation / mean), ``sample(rng, size)`` returning a numpy array of draws, and
``cdf(x)``. The fluid model reads the mean only; the simulator samples; Whitt's fluid model of
abandonment reads the patience CDF. All values are in the scenario's time unit.

Each distribution declares its YAML keys and their domains as data (``params``, a tuple of
:class:`Param`), as SciPy's newer distributions declare their parameter domains; one reader
(:meth:`_Distribution.from_spec`) checks every key against its domain and builds the object,
so every distribution words its errors the same way. To add one: DEVELOPERS.md, "How to add a
distribution".

scipy is imported inside the few methods that need it (the CDFs of the lognormal, gamma and
Erlang, the cv of the Weibull): loading and validating a scenario does not import scipy.stats.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any, ClassVar, Protocol

import numpy as np

from .datafiles import DataFolder
from .errors import FieldError
from .fields import LARGEST_NUMBER, LARGEST_WHOLE, LongNumber, as_float

__all__ = [
    "Distribution",
    "Deterministic",
    "Exponential",
    "Lognormal",
    "Gamma",
    "Erlang",
    "Uniform",
    "Weibull",
    "Empirical",
    "parse_distribution",
    "DISTRIBUTION_NAMES",
]


class Distribution(Protocol):
    name: str

    @property
    def mean(self) -> float: ...

    @property
    def cv(self) -> float: ...

    def sample(self, rng: np.random.Generator, size: int) -> np.ndarray: ...

    def cdf(self, x: float) -> float: ...


# --- parameter domains ---------------------------------------------------------------------------


def _finite(value: Any, path: str, *, positive: bool = False, high: float = LARGEST_NUMBER,
            smallest: float = 0.0) -> float:
    """``value`` as a float when it is a finite number >= 0 (> 0 with ``positive``), at most
    ``high``, and either 0 or at least ``smallest``."""
    x = as_float(value, path)
    if x < 0:
        raise FieldError(path, "must be >= 0", value)
    if positive and x == 0:
        raise FieldError(path, "must be > 0", value)
    if x > high:
        raise FieldError(path, f"must be at most {high:g}", value)
    if 0 < x < smallest:
        raise FieldError(path, f"must be {'' if positive else '0 or '}at least {smallest:g}",
                         value)
    return x


@dataclass(frozen=True)
class Real:
    """A required finite number >= 0 (also > 0 when ``positive``), at most ``high``, and 0 or
    at least ``smallest`` (bounds where the distribution's arithmetic stops making sense)."""

    positive: bool = False
    high: float = LARGEST_NUMBER
    smallest: float = 0.0

    def read(self, spec: dict, key: str, path: str) -> float:
        if key not in spec:
            raise FieldError(f"{path}.{key}", "is required")
        return _finite(spec[key], f"{path}.{key}", positive=self.positive, high=self.high,
                       smallest=self.smallest)


@dataclass(frozen=True)
class Whole:
    """A whole number in ``[low, high]`` (a bool is not one; a missing key reads as None and
    fails)."""

    low: int = 1
    high: int = LARGEST_WHOLE

    def read(self, spec: dict, key: str, path: str) -> int:
        value = spec.get(key)
        if isinstance(value, LongNumber) and not value.negative:
            raise FieldError(f"{path}.{key}", f"must be at most {self.high:,}", value)
        if isinstance(value, bool) or not isinstance(value, int) or value < self.low:
            raise FieldError(f"{path}.{key}", f"must be a whole number >= {self.low}", value)
        if value > self.high:
            raise FieldError(f"{path}.{key}", f"must be at most {self.high:,}", value)
        return value


NON_NEGATIVE, POSITIVE = Real(), Real(positive=True)
#: A coefficient of variation: 0 (the point mass) or in [1e-6, 100]; below, the gamma's shape
#: 1/cv² overflows; above, draws underflow to 0 and overflow to inf.
CV = Real(high=100.0, smallest=1e-6)
#: A Weibull shape in [0.02, 1000]: below, Γ(1 + 2/k) overflows (the cv is infinite).
WEIBULL_SHAPE = Real(positive=True, high=1000.0, smallest=0.02)
#: Erlang phases: 1 to a million (the cv 1/sqrt(k) is then 0.001).
PHASES = Whole(1, high=10**6)
AT_LEAST_ONE = Whole(1)


@dataclass(frozen=True)
class Param:
    """One YAML key of a distribution: the dataclass field ``attr`` it fills, its ``domain``,
    and ``at_least``: the key of an earlier parameter it may not be below (or None)."""

    key: str
    attr: str
    domain: Real | Whole
    at_least: str | None = None


def _step(x: float, at: float) -> float:
    """CDF of the point mass at ``at``."""
    return 1.0 if x >= at else 0.0


def _gamma_cdf(x: float, shape: float, scale: float) -> float:
    # the function scipy.stats.gamma.cdf evaluates, without importing scipy.stats (about 1 s)
    from scipy import special

    return float(special.gammainc(shape, x / scale)) if x > 0 else 0.0


# --- the distributions ---------------------------------------------------------------------------


class _Distribution:
    """What every distribution shares: its ``name`` (the YAML ``dist``), its ``params``
    (checked in the order listed, which is the order errors are found in) and the reader that
    builds it from its YAML mapping."""

    name: ClassVar[str]
    params: ClassVar[tuple[Param, ...]] = ()

    @classmethod
    def keys(cls) -> tuple[str, ...]:
        """The YAML keys allowed besides ``dist``."""
        return tuple(p.key for p in cls.params)

    @classmethod
    def from_spec(cls, spec: dict, path: str, base_dir: Path | DataFolder | None):
        """Check each declared parameter of ``spec`` against its domain and build the object;
        raises :class:`FieldError` naming ``path`` and the key."""
        read: dict[str, Any] = {}
        for p in cls.params:
            value = p.domain.read(spec, p.key, path)
            if p.at_least is not None and value < read[p.at_least]:
                raise FieldError(f"{path}.{p.key}",
                                 f"must be >= {p.at_least} ({read[p.at_least]:g})", value)
            read[p.key] = value
        return cls(**{p.attr: read[p.key] for p in cls.params})


class _ByMean(_Distribution):
    """A distribution given by its mean (the field ``mean_value``)."""

    @property
    def mean(self) -> float:
        return self.mean_value


class _ByMeanCv(_ByMean):
    """A distribution given by its mean and cv (fields ``mean_value``, ``cv_value``); cv 0 is
    the point mass at the mean. Subclasses draw and give the CDF for cv > 0."""

    params = (Param("mean", "mean_value", POSITIVE), Param("cv", "cv_value", CV))

    @property
    def cv(self) -> float:
        return self.cv_value

    def sample(self, rng: np.random.Generator, size: int) -> np.ndarray:
        if self.cv_value == 0:
            return np.full(size, self.mean_value, dtype=float)
        return self._draw(rng, size)

    def cdf(self, x: float) -> float:
        if self.cv_value == 0:
            return _step(x, self.mean_value)
        return self._cdf(x)


@dataclass(frozen=True)
class Deterministic(_Distribution):
    """Always ``value``."""

    value: float
    name = "deterministic"
    params = (Param("value", "value", NON_NEGATIVE),)

    @property
    def mean(self) -> float:
        return self.value

    @property
    def cv(self) -> float:
        return 0.0

    def sample(self, rng: np.random.Generator, size: int) -> np.ndarray:
        return np.full(size, self.value, dtype=float)

    def cdf(self, x: float) -> float:
        return _step(x, self.value)


@dataclass(frozen=True)
class Exponential(_ByMean):
    """Exponential with the given mean (cv = 1)."""

    mean_value: float
    name = "exponential"
    params = (Param("mean", "mean_value", POSITIVE),)

    @property
    def cv(self) -> float:
        return 1.0

    def sample(self, rng: np.random.Generator, size: int) -> np.ndarray:
        return rng.exponential(self.mean_value, size)

    def cdf(self, x: float) -> float:
        return 0.0 if x <= 0 else -math.expm1(-x / self.mean_value)


@dataclass(frozen=True)
class Lognormal(_ByMeanCv):
    """Lognormal given by its mean and cv (not by the parameters of the underlying normal)."""

    mean_value: float
    cv_value: float
    name = "lognormal"

    def _params(self) -> tuple[float, float]:
        sigma2 = math.log1p(self.cv_value**2)
        return math.log(self.mean_value) - sigma2 / 2, math.sqrt(sigma2)

    def _draw(self, rng: np.random.Generator, size: int) -> np.ndarray:
        mu, sigma = self._params()
        return rng.lognormal(mu, sigma, size)

    def _cdf(self, x: float) -> float:
        # scipy.stats.lognorm.cdf's own computation, without importing scipy.stats (about 1 s)
        from scipy import special

        mu, sigma = self._params()
        return float(special.ndtr(math.log(x / math.exp(mu)) / sigma)) if x > 0 else 0.0


@dataclass(frozen=True)
class Gamma(_ByMeanCv):
    """Gamma given by its mean and cv (shape 1/cv², scale mean·cv²)."""

    mean_value: float
    cv_value: float
    name = "gamma"

    def _draw(self, rng: np.random.Generator, size: int) -> np.ndarray:
        shape = 1.0 / self.cv_value**2
        return rng.gamma(shape, self.mean_value / shape, size)

    def _cdf(self, x: float) -> float:
        shape = 1.0 / self.cv_value**2
        return _gamma_cdf(x, shape, self.mean_value / shape)


@dataclass(frozen=True)
class Erlang(_ByMean):
    """Erlang with ``k`` phases and the given mean (cv = 1/sqrt(k))."""

    mean_value: float
    k: int
    name = "erlang"
    params = (Param("k", "k", PHASES), Param("mean", "mean_value", POSITIVE))

    @property
    def cv(self) -> float:
        return 1.0 / math.sqrt(self.k)

    def sample(self, rng: np.random.Generator, size: int) -> np.ndarray:
        return rng.gamma(self.k, self.mean_value / self.k, size)

    def cdf(self, x: float) -> float:
        return _gamma_cdf(x, self.k, self.mean_value / self.k)


@dataclass(frozen=True)
class Uniform(_Distribution):
    """Uniform on [low, high]."""

    low: float
    high: float
    name = "uniform"
    params = (Param("low", "low", NON_NEGATIVE),
              Param("high", "high", NON_NEGATIVE, at_least="low"))

    @property
    def mean(self) -> float:
        return (self.low + self.high) / 2

    @property
    def cv(self) -> float:
        mean = self.mean
        return 0.0 if mean == 0 else (self.high - self.low) / (math.sqrt(12.0) * mean)

    def sample(self, rng: np.random.Generator, size: int) -> np.ndarray:
        return rng.uniform(self.low, self.high, size)

    def cdf(self, x: float) -> float:
        if self.high == self.low:
            return _step(x, self.low)
        return float(min(1.0, max(0.0, (x - self.low) / (self.high - self.low))))


@dataclass(frozen=True)
class Weibull(_ByMean):
    """Weibull given by its mean and shape k (scale = mean / Γ(1 + 1/k))."""

    mean_value: float
    shape: float
    name = "weibull"
    params = (Param("mean", "mean_value", POSITIVE), Param("shape", "shape", WEIBULL_SHAPE))

    @property
    def scale(self) -> float:
        return self.mean_value / math.gamma(1 + 1 / self.shape)

    @property
    def cv(self) -> float:
        from scipy import special

        g1 = special.gamma(1 + 1 / self.shape)
        g2 = special.gamma(1 + 2 / self.shape)
        return float(math.sqrt(max(g2 / g1**2 - 1, 0.0)))

    def sample(self, rng: np.random.Generator, size: int) -> np.ndarray:
        return self.scale * rng.weibull(self.shape, size)

    def cdf(self, x: float) -> float:
        if x <= 0:
            return 0.0
        try:
            return -math.expm1(-((x / self.scale) ** self.shape))
        except OverflowError:  # (x / scale)^shape beyond the largest float: certainly done
            return 1.0


@dataclass(frozen=True)
class Empirical(_Distribution):
    """Resamples the given values with equal probability (a bootstrap of observed times).
    In YAML exactly one of ``values`` (a list) or ``file`` (whitespace-separated numbers, the
    path relative to the scenario file)."""

    values: tuple[float, ...]
    name = "empirical"

    @classmethod
    def keys(cls) -> tuple[str, ...]:
        return ("values", "file")

    @classmethod
    def from_spec(cls, spec: dict, path: str, base_dir: Path | DataFolder | None) -> Empirical:
        if ("values" in spec) == ("file" in spec):
            raise FieldError(path, "empirical needs exactly one of 'values' or 'file'")
        if "values" in spec:
            return cls(_parse_values(spec["values"], f"{path}.values"))
        return cls(_read_values_file(spec["file"], f"{path}.file", base_dir))

    @property
    def mean(self) -> float:
        return float(np.mean(self.values))

    @property
    def cv(self) -> float:
        mean = self.mean
        return 0.0 if mean == 0 else float(np.std(self.values) / mean)

    def sample(self, rng: np.random.Generator, size: int) -> np.ndarray:
        return rng.choice(np.asarray(self.values, dtype=float), size)

    def cdf(self, x: float) -> float:
        return float(np.mean(np.asarray(self.values) <= x))


# --- parsing -------------------------------------------------------------------------------------


def _parse_values(values: Any, path: str) -> tuple[float, ...]:
    if not isinstance(values, list) or not values:
        raise FieldError(path, "must be a non-empty list of numbers", values)
    return tuple(_finite(v, f"{path}[{i}]") for i, v in enumerate(values))


def _folder(base_dir: Path | DataFolder | None) -> DataFolder:
    if isinstance(base_dir, DataFolder):
        return base_dir
    return DataFolder(Path.cwd() if base_dir is None else Path(base_dir))


def _read_values_file(name: Any, path: str, base_dir: Path | DataFolder | None
                      ) -> tuple[float, ...]:
    """The numbers of an empirical file, read by :class:`fluid.datafiles.DataFolder` (inside
    the scenario's folder, bounded, no content in messages)."""
    values, lines = _folder(base_dir).read_numbers(name, path)
    if not values:
        raise FieldError(path, f"{name} holds no numbers", name)
    for i, v in enumerate(values):
        if not (LARGEST_NUMBER >= v >= 0):  # (also refuses nan and inf)
            raise FieldError(path, f"{name}: entry {i + 1} must be a number >= 0 and at most "
                             f"{LARGEST_NUMBER:g} (line {lines[i]})")
    return tuple(values)


#: The distributions by YAML name, in the order error messages list them.
DISTRIBUTIONS: dict[str, type[_Distribution]] = {
    cls.name: cls
    for cls in (Deterministic, Exponential, Lognormal, Gamma, Erlang, Uniform, Weibull, Empirical)
}
DISTRIBUTION_NAMES = tuple(DISTRIBUTIONS)


def parse_distribution(spec: Any, path: str,
                       base_dir: Path | DataFolder | None = None) -> Distribution:
    """Read a distribution from its YAML form: a plain number (deterministic) or a mapping
    ``{dist: NAME, ...}``. ``base_dir``: the folder an empirical ``file`` is read from (the
    working directory when None), or a :class:`fluid.datafiles.DataFolder` with its limits.
    Raises :class:`FieldError` naming ``path`` on any problem."""
    if isinstance(spec, bool):
        raise FieldError(path, "must be a number or {dist: NAME, ...}", spec)
    if isinstance(spec, LongNumber):
        raise FieldError(path, "must be a finite number >= 0" if spec.negative
                         else f"must be at most {LARGEST_NUMBER:g}", spec)
    if isinstance(spec, (int, float)):
        x = as_float(spec, path) if isinstance(spec, int) else float(spec)  # (an int: or ±inf)
        if x > LARGEST_NUMBER and (isinstance(spec, int) or math.isfinite(x)):
            raise FieldError(path, f"must be at most {LARGEST_NUMBER:g}", spec)
        if not math.isfinite(x) or x < 0:
            raise FieldError(path, "must be a finite number >= 0", spec)
        return Deterministic(x)
    if not isinstance(spec, dict):
        raise FieldError(path, "must be a number or {dist: NAME, ...}", spec)
    name = spec.get("dist")
    if not isinstance(name, str) or name not in DISTRIBUTIONS:
        raise FieldError(
            f"{path}.dist", f"must be one of {', '.join(DISTRIBUTION_NAMES)}", name
        )
    kind = DISTRIBUTIONS[name]
    for key in spec:
        if key != "dist" and key not in kind.keys():
            raise FieldError(f"{path}.{key}", f"unknown key for a {name} distribution")
    return kind.from_spec(spec, path, base_dir)
