"""One sign convention for every gap between the fluid model and the simulation.

A gap is always ``simulated − fluid``: negative where the simulation gives less than the fluid
model promises (a throughput shortfall), positive where it gives more (a longer wait). The
relative gap divides that difference by ``|fluid|``. Where the fluid value is near zero the
relative gap means nothing (a fluid wait of 0.00036 and a simulated one of 0.11 would read
+31 000 %), so the absolute difference is shown instead and the relative gap is nan.

Near zero: ``|fluid|`` is at most :data:`NEAR_ZERO` (1 %) of the larger of ``|fluid|`` and
``|simulated|`` — the relative gap would exceed 99 times the fluid value — or at most
:data:`ZERO_FLOOR` (1e-12, round-off) in absolute terms. Units are those of the figure compared
(rates per the scenario's time unit, times in it, shares as fractions).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["GAP_CONVENTION", "NEAR_ZERO", "ZERO_FLOOR", "Gap", "gap_between", "gap_text"]

GAP_CONVENTION = ("gaps: simulated minus fluid (relative to the fluid value; absolute where the "
                  "fluid value is near zero)")

NEAR_ZERO = 1e-2   # |fluid| at most 1 % of the figure's scale: relative gap not shown
ZERO_FLOOR = 1e-12  # |fluid| at most this is zero whatever the scale (round-off)

RELATIVE, ABSOLUTE, NONE = "relative", "absolute", "none"


@dataclass(frozen=True)
class Gap:
    """``absolute = simulated − fluid``; ``relative = absolute / |fluid|`` (nan unless ``kind``
    is "relative"); ``kind``: "relative", "absolute" (fluid near zero: read the absolute
    difference) or "none" (a value missing or infinite)."""

    absolute: float
    relative: float
    kind: str


def gap_between(fluid: float, simulated: float) -> Gap:
    """The gap of ``simulated`` against ``fluid`` under the one convention (module docstring)."""
    if not (math.isfinite(fluid) and math.isfinite(simulated)):
        return Gap(simulated - fluid if not (math.isnan(fluid) or math.isnan(simulated))
                   else math.nan, math.nan, NONE)
    diff = simulated - fluid
    scale = max(abs(fluid), abs(simulated))
    if abs(fluid) <= ZERO_FLOOR or abs(fluid) <= NEAR_ZERO * scale:
        return Gap(diff, math.nan, ABSOLUTE)
    return Gap(diff, diff / abs(fluid), RELATIVE)


def gap_text(fluid: float, simulated: float, *, digits: int = 1) -> str:
    """The gap as printed: ``+10.4 %`` (relative), ``+0.112 (abs.)`` (fluid near zero) or
    ``-``."""
    g = gap_between(fluid, simulated)
    if g.kind == RELATIVE:
        return f"{100 * g.relative:+.{digits}f} %"
    if g.kind == ABSOLUTE:
        return f"{g.absolute:+.3g} (abs.)"
    return "-"
