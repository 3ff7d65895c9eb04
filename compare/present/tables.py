"""Plain-text tables and number formatting for the command line (no colours, no dependencies)."""

from __future__ import annotations

import math
from typing import Any, Sequence

__all__ = ["format_table", "fmt", "fmt_estimate"]


def fmt(value: Any, digits: int = 4) -> str:
    """A number with ``digits`` significant digits; inf and nan spelt out; text unchanged."""
    if value is None:
        return "-"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "n/a"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        if value == 0:
            return "0"
        return f"{value:.{digits}g}"
    return str(value)


def fmt_estimate(est: Any, digits: int = 4) -> str:
    """``mean [low, high]`` for an estimate with ``mean``, ``low`` and ``high`` attributes."""
    if est is None:
        return "-"
    if math.isnan(est.low) or math.isnan(est.high):
        return f"{fmt(est.mean, digits)} [no interval]"
    return f"{fmt(est.mean, digits)} [{fmt(est.low, digits)}, {fmt(est.high, digits)}]"


def format_table(headers: Sequence[str], rows: Sequence[Sequence[Any]], title: str | None = None) -> str:
    """Left-aligned first column, right-aligned others, one space-padded line per row."""
    cells = [[fmt(c) if not isinstance(c, str) else c for c in row] for row in rows]
    widths = [len(h) for h in headers]
    for row in cells:
        for i, c in enumerate(row):
            widths[i] = max(widths[i], len(c))

    def line(row: Sequence[str]) -> str:
        parts = [row[0].ljust(widths[0])] + [c.rjust(w) for c, w in zip(row[1:], widths[1:])]
        return "  ".join(parts).rstrip()

    out = []
    if title:
        out.append(title)
    out.append(line(list(headers)))
    out.append("  ".join("-" * w for w in widths))
    out.extend(line(r) for r in cells)
    return "\n".join(out)
