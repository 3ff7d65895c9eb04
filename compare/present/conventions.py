"""What each service level measures, in words, for every output that prints one."""

from __future__ import annotations

__all__ = ["service_level_lines", "service_level_line"]


def service_level_lines(targets, time_unit: str) -> list[str]:
    """One line per service target: "service level at front_queue: within 0.5 min, abandoners
    counted against" (``targets``: place -> :class:`fluid.scenario.ServiceTarget`)."""
    return [f"service level at {p}: {t.describe(time_unit)}" for p, t in targets.items()]


def service_level_line(targets, time_unit: str) -> str | None:
    """The lines of :func:`service_level_lines` joined by "; " (None without targets)."""
    lines = service_level_lines(targets, time_unit)
    return "; ".join(lines) if lines else None
