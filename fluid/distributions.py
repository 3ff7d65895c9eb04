"""Holding-time and patience distributions.

Each distribution is a small frozen object with ``mean``, ``cv`` (coefficient of variation,
standard deviation / mean), ``sample(rng, size)`` returning a numpy array of draws, and
``cdf(x)``. The fluid model reads the mean only; the simulator samples; Whitt's fluid model of
abandonment reads the patience CDF. All values are in the scenario's time unit.

To add a distribution: write a frozen dataclass with those four members, give it a ``name``, add
a parser to ``_PARSERS`` naming its keys, and add a test of its moments against scipy.stats.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Protocol

import numpy as np
from scipy import special, stats

from .errors import FieldError

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


@dataclass(frozen=True)
class Deterministic:
    """Always ``value``."""

    value: float
    name: str = field(default="deterministic", init=False, repr=False)

    @property
    def mean(self) -> float:
        return self.value

    @property
    def cv(self) -> float:
        return 0.0

    def sample(self, rng: np.random.Generator, size: int) -> np.ndarray:
        return np.full(size, self.value, dtype=float)

    def cdf(self, x: float) -> float:
        return 1.0 if x >= self.value else 0.0


@dataclass(frozen=True)
class Exponential:
    """Exponential with the given mean (cv = 1)."""

    mean_value: float
    name: str = field(default="exponential", init=False, repr=False)

    @property
    def mean(self) -> float:
        return self.mean_value

    @property
    def cv(self) -> float:
        return 1.0

    def sample(self, rng: np.random.Generator, size: int) -> np.ndarray:
        return rng.exponential(self.mean_value, size)

    def cdf(self, x: float) -> float:
        return 0.0 if x <= 0 else -math.expm1(-x / self.mean_value)


@dataclass(frozen=True)
class Lognormal:
    """Lognormal given by its mean and cv (not by the parameters of the underlying normal)."""

    mean_value: float
    cv_value: float
    name: str = field(default="lognormal", init=False, repr=False)

    @property
    def mean(self) -> float:
        return self.mean_value

    @property
    def cv(self) -> float:
        return self.cv_value

    def _params(self) -> tuple[float, float]:
        sigma2 = math.log1p(self.cv_value**2)
        return math.log(self.mean_value) - sigma2 / 2, math.sqrt(sigma2)

    def sample(self, rng: np.random.Generator, size: int) -> np.ndarray:
        if self.cv_value == 0:
            return np.full(size, self.mean_value, dtype=float)
        mu, sigma = self._params()
        return rng.lognormal(mu, sigma, size)

    def cdf(self, x: float) -> float:
        if self.cv_value == 0:
            return 1.0 if x >= self.mean_value else 0.0
        mu, sigma = self._params()
        return float(stats.lognorm.cdf(x, s=sigma, scale=math.exp(mu)))


@dataclass(frozen=True)
class Gamma:
    """Gamma given by its mean and cv (shape 1/cv², scale mean·cv²)."""

    mean_value: float
    cv_value: float
    name: str = field(default="gamma", init=False, repr=False)

    @property
    def mean(self) -> float:
        return self.mean_value

    @property
    def cv(self) -> float:
        return self.cv_value

    def sample(self, rng: np.random.Generator, size: int) -> np.ndarray:
        if self.cv_value == 0:
            return np.full(size, self.mean_value, dtype=float)
        shape = 1.0 / self.cv_value**2
        return rng.gamma(shape, self.mean_value / shape, size)

    def cdf(self, x: float) -> float:
        if self.cv_value == 0:
            return 1.0 if x >= self.mean_value else 0.0
        shape = 1.0 / self.cv_value**2
        return float(stats.gamma.cdf(x, shape, scale=self.mean_value / shape))


@dataclass(frozen=True)
class Erlang:
    """Erlang with ``k`` phases and the given mean (cv = 1/sqrt(k))."""

    mean_value: float
    k: int
    name: str = field(default="erlang", init=False, repr=False)

    @property
    def mean(self) -> float:
        return self.mean_value

    @property
    def cv(self) -> float:
        return 1.0 / math.sqrt(self.k)

    def sample(self, rng: np.random.Generator, size: int) -> np.ndarray:
        return rng.gamma(self.k, self.mean_value / self.k, size)

    def cdf(self, x: float) -> float:
        return float(stats.gamma.cdf(x, self.k, scale=self.mean_value / self.k))


@dataclass(frozen=True)
class Uniform:
    """Uniform on [low, high]."""

    low: float
    high: float
    name: str = field(default="uniform", init=False, repr=False)

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
            return 1.0 if x >= self.low else 0.0
        return float(min(1.0, max(0.0, (x - self.low) / (self.high - self.low))))


@dataclass(frozen=True)
class Weibull:
    """Weibull given by its mean and shape k (scale = mean / Γ(1 + 1/k))."""

    mean_value: float
    shape: float
    name: str = field(default="weibull", init=False, repr=False)

    @property
    def mean(self) -> float:
        return self.mean_value

    @property
    def scale(self) -> float:
        return self.mean_value / math.gamma(1 + 1 / self.shape)

    @property
    def cv(self) -> float:
        g1 = special.gamma(1 + 1 / self.shape)
        g2 = special.gamma(1 + 2 / self.shape)
        return float(math.sqrt(max(g2 / g1**2 - 1, 0.0)))

    def sample(self, rng: np.random.Generator, size: int) -> np.ndarray:
        return self.scale * rng.weibull(self.shape, size)

    def cdf(self, x: float) -> float:
        return 0.0 if x <= 0 else -math.expm1(-((x / self.scale) ** self.shape))


@dataclass(frozen=True)
class Empirical:
    """Resamples the given values with equal probability (a bootstrap of observed times)."""

    values: tuple[float, ...]
    name: str = field(default="empirical", init=False, repr=False)

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


def _number(spec: dict, key: str, path: str, *, positive: bool = False) -> float:
    if key not in spec:
        raise FieldError(f"{path}.{key}", "is required")
    value = spec[key]
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise FieldError(f"{path}.{key}", "must be a finite number", value)
    if value < 0:
        raise FieldError(f"{path}.{key}", "must be >= 0", value)
    if positive and value == 0:
        raise FieldError(f"{path}.{key}", "must be > 0", value)
    return float(value)


def _parse_values(values: Any, path: str) -> tuple[float, ...]:
    if not isinstance(values, list) or not values:
        raise FieldError(path, "must be a non-empty list of numbers", values)
    out = []
    for i, v in enumerate(values):
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
            raise FieldError(f"{path}[{i}]", "must be a finite number", v)
        if v < 0:
            raise FieldError(f"{path}[{i}]", "must be >= 0", v)
        out.append(float(v))
    return tuple(out)


def _read_values_file(name: Any, path: str, base_dir: Path | None) -> tuple[float, ...]:
    if not isinstance(name, str) or not name:
        raise FieldError(path, "must be a file name", name)
    file = Path(name) if base_dir is None else base_dir / name
    try:
        lines = file.read_text().split()
    except OSError as exc:
        raise FieldError(path, f"cannot read {file}: {exc.strerror}", name) from None
    values = []
    for i, word in enumerate(lines):
        try:
            values.append(float(word))
        except ValueError:
            raise FieldError(path, f"{file}: entry {i + 1} is not a number", word) from None
    return _parse_values(values, path)


def _parse_empirical(spec: dict, path: str, base_dir: Path | None) -> Empirical:
    if ("values" in spec) == ("file" in spec):
        raise FieldError(path, "empirical needs exactly one of 'values' or 'file'")
    if "values" in spec:
        return Empirical(_parse_values(spec["values"], f"{path}.values"))
    return Empirical(_read_values_file(spec["file"], f"{path}.file", base_dir))


def _parse_erlang(spec: dict, path: str, base_dir: Path | None) -> Erlang:
    k = spec.get("k")
    if isinstance(k, bool) or not isinstance(k, int) or k < 1:
        raise FieldError(f"{path}.k", "must be a whole number >= 1", k)
    return Erlang(_number(spec, "mean", path, positive=True), k)


def _parse_uniform(spec: dict, path: str, base_dir: Path | None) -> Uniform:
    low, high = _number(spec, "low", path), _number(spec, "high", path)
    if high < low:
        raise FieldError(f"{path}.high", f"must be >= low ({low:g})", high)
    return Uniform(low, high)


_Parser = Callable[[dict, str, "Path | None"], Any]

_PARSERS: dict[str, tuple[frozenset[str], _Parser]] = {
    "deterministic": (
        frozenset({"value"}),
        lambda s, p, b: Deterministic(_number(s, "value", p)),
    ),
    "exponential": (
        frozenset({"mean"}),
        lambda s, p, b: Exponential(_number(s, "mean", p, positive=True)),
    ),
    "lognormal": (
        frozenset({"mean", "cv"}),
        lambda s, p, b: Lognormal(_number(s, "mean", p, positive=True), _number(s, "cv", p)),
    ),
    "gamma": (
        frozenset({"mean", "cv"}),
        lambda s, p, b: Gamma(_number(s, "mean", p, positive=True), _number(s, "cv", p)),
    ),
    "erlang": (frozenset({"mean", "k"}), _parse_erlang),
    "uniform": (frozenset({"low", "high"}), _parse_uniform),
    "weibull": (
        frozenset({"mean", "shape"}),
        lambda s, p, b: Weibull(
            _number(s, "mean", p, positive=True), _number(s, "shape", p, positive=True)
        ),
    ),
    "empirical": (frozenset({"values", "file"}), _parse_empirical),
}

DISTRIBUTION_NAMES = tuple(_PARSERS)


def parse_distribution(spec: Any, path: str, base_dir: Path | None = None) -> Distribution:
    """Read a distribution from its YAML form: a plain number (deterministic) or a mapping
    ``{dist: NAME, ...}``. Raises :class:`FieldError` naming ``path`` on any problem."""
    if isinstance(spec, bool):
        raise FieldError(path, "must be a number or {dist: NAME, ...}", spec)
    if isinstance(spec, (int, float)):
        if not math.isfinite(spec) or spec < 0:
            raise FieldError(path, "must be a finite number >= 0", spec)
        return Deterministic(float(spec))
    if not isinstance(spec, dict):
        raise FieldError(path, "must be a number or {dist: NAME, ...}", spec)
    name = spec.get("dist")
    if not isinstance(name, str) or name not in _PARSERS:
        raise FieldError(
            f"{path}.dist", f"must be one of {', '.join(DISTRIBUTION_NAMES)}", name
        )
    keys, parser = _PARSERS[name]
    for key in spec:
        if key != "dist" and key not in keys:
            raise FieldError(f"{path}.{key}", f"unknown key for a {name} distribution")
    return parser(spec, path, base_dir)
