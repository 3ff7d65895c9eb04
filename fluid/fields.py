"""Reading one field of a scenario document: numbers within bounds, whole numbers, names.

Every reader raises :class:`~fluid.errors.FieldError` naming the field's path and the value
(rendered bounded by :func:`fluid.errors.short_repr`). Numbers are bounded in magnitude
(:data:`LARGEST_NUMBER`, :data:`LARGEST_WHOLE`): products such as rate × horizon or staff × hold
must stay far from overflow, and a 400-digit integer is no rate, staff or horizon.
"""

from __future__ import annotations

import math
import re
from typing import Any

from .errors import FieldError

__all__ = ["LARGEST_NUMBER", "LARGEST_WHOLE", "NAME_PATTERN", "LongNumber", "as_float", "number",
           "whole", "name"]

#: The largest magnitude of a number in a scenario (times, rates, means, costs).
LARGEST_NUMBER = 1e12
#: The largest whole number in a scenario (agents, phases, arc weights, replications).
LARGEST_WHOLE = 10**9
#: Names of places, pools, sources and transitions (matched whole: no trailing newline).
NAME_PATTERN = re.compile(r"[a-z][a-z0-9_]*")
#: The longest name (characters): names head the columns of every table.
NAME_CHARS = 64


class LongNumber:
    """An integer literal too long to be read as a number (see :mod:`fluid.yaml_text`): only
    its sign and length are kept, and every reader here refuses it as too large."""

    __slots__ = ("digits", "negative")

    def __init__(self, digits: int, negative: bool = False):
        self.digits = digits
        self.negative = negative

    def short_text(self) -> str:
        return f"{'a negative' if self.negative else 'an'} integer of {self.digits} digits"

    __repr__ = __str__ = short_text

    def __eq__(self, other) -> bool:
        return isinstance(other, LongNumber) and (other.digits, other.negative) == (
            self.digits, self.negative)

    def __hash__(self) -> int:
        return hash(("LongNumber", self.digits, self.negative))


def as_float(value: Any, path: str) -> float:
    """``value`` as a float when it is a number (not a bool); an integer too large for a float
    (or a :class:`LongNumber`) reads as ±inf, for the caller's bounds to refuse. Raises
    FieldError for anything else and for a float that is inf or nan."""
    if isinstance(value, LongNumber):
        return -math.inf if value.negative else math.inf
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise FieldError(path, "must be a finite number", value)
    if isinstance(value, int):
        try:
            return float(value)
        except OverflowError:
            return math.copysign(math.inf, value)
    if not math.isfinite(value):
        raise FieldError(path, "must be a finite number", value)
    return float(value)


def number(value: Any, path: str, *, low: float = 0.0, strict: bool = False,
           high: float = LARGEST_NUMBER) -> float:
    """A finite number >= ``low`` (> ``low`` when ``strict``) and <= ``high``, as a float."""
    x = as_float(value, path)
    if x < low or (strict and x == low):
        raise FieldError(path, f"must be {'>' if strict else '>='} {low:g}", value)
    if x > high:
        raise FieldError(path, f"must be at most {high:g}", value)
    return x


def whole(value: Any, path: str, *, low: int = 0, high: int = LARGEST_WHOLE) -> int:
    """A whole number in ``[low, high]`` (a float with no fraction counts; a bool does not)."""
    if isinstance(value, LongNumber):
        raise FieldError(path, f"must be >= {low}" if value.negative
                         else f"must be at most {high:,}", value)
    if isinstance(value, bool) or not isinstance(value, int):
        if isinstance(value, float) and value.is_integer():
            value = int(value)
        else:
            raise FieldError(path, "must be a whole number", value)
    if value < low:
        raise FieldError(path, f"must be >= {low}", value)
    if value > high:
        raise FieldError(path, f"must be at most {high:,}", value)
    return value


def name(value: Any, path: str) -> str:
    """A name matching ``[a-z][a-z0-9_]*`` as a whole, of at most :data:`NAME_CHARS`
    characters."""
    if not isinstance(value, str) or not NAME_PATTERN.fullmatch(value):
        raise FieldError(path, "a name must match [a-z][a-z0-9_]*", value)
    if len(value) > NAME_CHARS:
        raise FieldError(path, f"a name has at most {NAME_CHARS} characters", value)
    return value
