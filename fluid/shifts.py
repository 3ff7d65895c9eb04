"""Shift patterns: when an agent of a pool may start, how long a shift lasts, its breaks, its cost.

A scenario may list the shifts its agents can work under the top-level key ``shifts:``::

    shifts:
      early: {pool: agents, starts: [0, 30, 60], length: 480,
              breaks: [{after: 240, length: 30}], cost: 8}
      late:  {pool: agents, starts: {first: 240, last: 360, every: 30}, length: 360, cost: 6}

Times are in the scenario's time unit from t = 0 (the start of the run): ``starts`` the allowed
start times (a list, or ``{first, last, every}``), ``length`` the shift's length from start to
end, ``breaks`` unpaid or paid pauses (``after``: time from the shift's start; ``length``),
during which the agent is off duty, ``cost`` the cost of one agent working the shift once
(default 1; any unit, the same for every shift). Parsed into :class:`ShiftPattern` objects kept
on ``Scenario.shifts`` (name -> pattern); the simulator does not read them: a shift plan becomes
a pool's ``schedule`` (staff per interval).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping

from .errors import FieldError
from .fields import name as _name, number as _real

__all__ = ["ShiftBreak", "ShiftPattern", "parse_shifts", "SHIFT_KEYS", "MAX_STARTS"]

SHIFT_KEYS = ("pool", "starts", "length", "breaks", "cost")
#: Start times all patterns together may list (a bound on the columns of the covering program).
MAX_STARTS = 10_000
#: Breaks one pattern may list.
MAX_BREAKS = 20


@dataclass(frozen=True)
class ShiftBreak:
    """A pause of ``length`` time units beginning ``after`` time units into the shift."""

    after: float
    length: float


@dataclass(frozen=True)
class ShiftPattern:
    """A shift agents of ``pool`` may work: it starts at one of ``starts``, lasts ``length``
    (breaks included), is off duty during each of ``breaks``, and costs ``cost`` per agent."""

    name: str
    pool: str
    starts: tuple[float, ...]
    length: float
    breaks: tuple[ShiftBreak, ...] = ()
    cost: float = 1.0

    def on_duty(self, start: float) -> tuple[tuple[float, float], ...]:
        """The spans ``(from, to)`` an agent starting at ``start`` is on duty (time units)."""
        spans, t = [], start
        for b in self.breaks:
            spans.append((t, start + b.after))
            t = start + b.after + b.length
        spans.append((t, start + self.length))
        return tuple(s for s in spans if s[1] > s[0])

    def covers(self, start: float, a: float, b: float) -> bool:
        """True when an agent starting at ``start`` is on duty during the whole of ``[a, b)``
        (partly present counts as absent: a plan never counts an agent it does not have)."""
        eps = 1e-9 * max(1.0, abs(b))
        return any(lo <= a + eps and hi >= b - eps for lo, hi in self.on_duty(start))

    def describe(self) -> str:
        parts = [f"{self.length:g} long"]
        if self.breaks:
            parts.append("breaks " + ", ".join(f"{b.length:g} after {b.after:g}"
                                               for b in self.breaks))
        return f"{self.name} ({self.pool}): " + "; ".join(parts) + f"; cost {self.cost:g}"


def _starts(value: Any, path: str) -> tuple[float, ...]:
    if isinstance(value, dict):
        for key in value:
            if key not in ("first", "last", "every"):
                raise FieldError(f"{path}.{key}", "unknown key (expected one of: first, last, "
                                 "every)")
        for key in ("first", "last", "every"):
            if key not in value:
                raise FieldError(f"{path}.{key}", "is required")
        first = _real(value["first"], f"{path}.first")
        last = _real(value["last"], f"{path}.last")
        every = _real(value["every"], f"{path}.every", strict=True)
        if last < first:
            raise FieldError(f"{path}.last", f"must be >= first ({first:g})", value["last"])
        count = (last - first) / every + 1  # (a float first: a tiny step must not overflow)
        if count > MAX_STARTS:
            raise FieldError(path, f"gives {count:.3g} start times, more than {MAX_STARTS:,}",
                             value)
        count = int((last - first) / every + 1e-9) + 1
        return tuple(first + k * every for k in range(count))
    if not isinstance(value, list) or not value:
        raise FieldError(path, "must be a non-empty list of times or {first, last, every}",
                         value)
    if len(value) > MAX_STARTS:
        raise FieldError(path, f"lists more than {MAX_STARTS:,} start times", len(value))
    out = tuple(_real(v, f"{path}[{i}]") for i, v in enumerate(value))
    if len(set(out)) != len(out):
        raise FieldError(path, "lists a start time twice", value)
    return tuple(sorted(out))


def _breaks(value: Any, path: str, length: float) -> tuple[ShiftBreak, ...]:
    if not isinstance(value, list):
        raise FieldError(path, "must be a list of {after, length}", value)
    if len(value) > MAX_BREAKS:
        raise FieldError(path, f"lists more than {MAX_BREAKS} breaks", len(value))
    out, end = [], 0.0
    for i, spec in enumerate(value):
        where = f"{path}[{i}]"
        if not isinstance(spec, dict):
            raise FieldError(where, "must be a mapping {after, length}", spec)
        for key in spec:
            if key not in ("after", "length"):
                raise FieldError(f"{where}.{key}", "unknown key (expected one of: after, "
                                 "length)")
        for key in ("after", "length"):
            if key not in spec:
                raise FieldError(f"{where}.{key}", "is required")
        after = _real(spec["after"], f"{where}.after", strict=True)
        span = _real(spec["length"], f"{where}.length", strict=True)
        if after < end:
            raise FieldError(f"{where}.after", f"must come after the previous break's end "
                             f"({end:g})", spec["after"])
        if after + span >= length:
            raise FieldError(where, f"must end before the shift's end ({length:g})", spec)
        out.append(ShiftBreak(after=after, length=span))
        end = after + span
    return tuple(out)


def parse_shifts(doc: Mapping, pools: Mapping) -> dict[str, ShiftPattern]:
    """``shifts:`` (a mapping name -> pattern, already known to be a mapping) as
    :class:`ShiftPattern` objects; ``pools``: the scenario's pools (names checked). Raises
    :class:`~fluid.errors.FieldError` naming the field."""
    out, columns = {}, 0
    for key, spec in doc.items():
        n = _name(key, f"shifts.{key}")
        path = f"shifts.{n}"
        if not isinstance(spec, dict):
            raise FieldError(path, "must be a mapping {pool, starts, length, breaks, cost}", spec)
        for k in spec:
            if k not in SHIFT_KEYS:
                raise FieldError(f"{path}.{k}", "unknown key (expected one of: "
                                 f"{', '.join(SHIFT_KEYS)})")
        for k in ("pool", "starts", "length"):
            if k not in spec:
                raise FieldError(f"{path}.{k}", "is required")
        pool = _name(spec["pool"], f"{path}.pool")
        if pool not in pools:
            raise FieldError(f"{path}.pool", "is not a pool of the scenario (pools: "
                             f"{', '.join(pools) or 'none'})", pool)
        length = _real(spec["length"], f"{path}.length", strict=True)
        starts = _starts(spec["starts"], f"{path}.starts")
        breaks = _breaks(spec.get("breaks", []), f"{path}.breaks", length)
        cost = _real(spec.get("cost", 1.0), f"{path}.cost")
        columns += len(starts)
        if columns > MAX_STARTS:
            raise FieldError(f"{path}.starts", f"brings the start times of all shifts to "
                             f"{columns:,}, more than {MAX_STARTS:,}")
        out[n] = ShiftPattern(name=n, pool=pool, starts=starts, length=length, breaks=breaks,
                              cost=cost)
    return out
