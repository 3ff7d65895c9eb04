"""The single station as a net: one queue (or one per priority class) and one pool of agents.

The classical queue of the formulas (M/M/c, M/M/c+M, M/G/c/c, priority classes) written in the
scenario format of design.md §3, for the station self-check, the benchmark and the tests. All
numbers come from the caller; times in the given time unit.
"""

from __future__ import annotations

from collections.abc import Sequence

__all__ = ["station_yaml", "POOL"]

#: The pool's name in every station.
POOL = "agents"
_POOL = POOL


def _hold_yaml(mean_hold: float, hold_cv: float, hold_dist: str) -> str:
    if hold_cv == 1.0:
        return f"{{dist: exponential, mean: {mean_hold!r}}}"
    if hold_cv == 0.0:
        return f"{{dist: deterministic, value: {mean_hold!r}}}"
    return f"{{dist: {hold_dist}, mean: {mean_hold!r}, cv: {hold_cv!r}}}"


def _patience_yaml(patience_mean: float | None) -> str:
    if patience_mean is None:
        return "{}"
    if patience_mean == 0:
        return "{patience: 0}"
    return f"{{patience: {{dist: exponential, mean: {patience_mean!r}}}}}"


def station_yaml(servers: int, arrival_rate: float, mean_hold: float, *,
                 patience_mean: float | None = None, hold_cv: float = 1.0,
                 hold_dist: str = "lognormal", class_rates: Sequence[float] | None = None,
                 within: float | None = None, time_unit: str = "min",
                 name: str = "Station self-check (generated)", run: dict | None = None,
                 targets: bool = True) -> str:
    """YAML text of the single-station scenario (design.md §3). With one class the names are
    source ``calls``, places ``queue`` and ``talk``, transitions ``answer`` and ``close``; with
    classes k = 1..K they carry the suffix ``_k`` and pool ``agents`` has priority
    ``[answer_1, ..., answer_K]``. Exponential hold when ``hold_cv`` = 1, deterministic when 0,
    else ``hold_dist`` (lognormal or gamma) with that cv; exponential patience, or 0 for a loss
    system. ``run``: the scenario's ``run`` section (None: the defaults); ``targets``: a
    service-level target (goal 80 % within ``within``, default a tenth of the mean hold) per
    queue. Times in ``time_unit``."""
    within = mean_hold / 10 if within is None else within
    hold = _hold_yaml(mean_hold, hold_cv, hold_dist)
    queue = _patience_yaml(patience_mean)
    rates = [arrival_rate] if class_rates is None else list(class_rates)
    suffix = [""] if class_rates is None else [f"_{k}" for k in range(1, len(rates) + 1)]
    lines = [f"name: {name}", f"time_unit: {time_unit}"]
    if run:
        lines.append("run: {" + ", ".join(f"{k}: {v!r}" for k, v in run.items()) + "}")
    lines.append("sources:")
    lines += [f"  calls{s}: {{rate: {r!r}, into: queue{s}}}" for s, r in zip(suffix, rates)]
    if class_rates is None:
        lines += ["pools:", f"  {_POOL}: {servers}"]
    else:
        order = ", ".join(f"answer{s}" for s in suffix)
        lines += ["pools:", f"  {_POOL}: {{staff: {servers}, priority: [{order}]}}"]
    lines.append("places:")
    for s in suffix:
        lines += [f"  queue{s}: {queue}", f"  talk{s}: {{hold: {hold}}}"]
    lines.append("transitions:")
    for s in suffix:
        lines += [f"  answer{s}: {{in: [queue{s}, {_POOL}], out: [talk{s}]}}",
                  f"  close{s}: {{in: [talk{s}], out: [{_POOL}]}}"]
    if targets:
        lines.append("targets:")
        lines += [f"  queue{s}: {{within: {within!r}, goal: 0.8}}" for s in suffix]
    return "\n".join(lines) + "\n"
