"""Types of command-line values: argparse ``type=`` functions that refuse what no flag can mean.

Each raises :class:`argparse.ArgumentTypeError`, which the parser reports in one line naming the
flag (``fluidgap simulate: argument --horizon: must be a finite number (got 'inf')``); ranges
that depend on other values (warm-up below the horizon, ...) are checked where those are known.
"""

from __future__ import annotations

import argparse
import math

from fluid.errors import short_repr
from fluid.fields import LARGEST_NUMBER

__all__ = ["finite", "whole", "at_least_one", "positive_limit", "LONGEST_WHOLE_TEXT"]

#: Characters of the longest whole number a flag takes (a 128-bit seed has 39 digits).
LONGEST_WHOLE_TEXT = 40


def _got(text: str) -> str:
    return f"(got {short_repr(text)})"


def finite(text: str) -> float:
    """A number of magnitude at most :data:`fluid.fields.LARGEST_NUMBER` (no inf, no nan)."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a number {_got(text)}") from None
    if not math.isfinite(value):
        raise argparse.ArgumentTypeError(f"must be a finite number {_got(text)}")
    if abs(value) > LARGEST_NUMBER:
        raise argparse.ArgumentTypeError(f"must be at most {LARGEST_NUMBER:g} in magnitude "
                                         f"{_got(text)}")
    return value


def whole(text: str) -> int:
    """A whole number written in at most :data:`LONGEST_WHOLE_TEXT` characters."""
    stripped = text.strip()
    if len(stripped) > LONGEST_WHOLE_TEXT:
        raise argparse.ArgumentTypeError(f"must be a whole number of at most "
                                         f"{LONGEST_WHOLE_TEXT} digits {_got(text)}")
    try:
        return int(stripped)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a whole number {_got(text)}") from None


def at_least_one(text: str) -> int:
    """A whole number >= 1 (a limit's value)."""
    value = whole(text)
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be >= 1 {_got(text)}")
    return value


def positive_limit(text: str) -> float:
    """A finite number > 0 of any size (a limit on expected arrivals, e.g. 1e10)."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a number {_got(text)}") from None
    if not (math.isfinite(value) and value > 0):
        raise argparse.ArgumentTypeError(f"must be a finite number > 0 {_got(text)}")
    return value
