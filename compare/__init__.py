"""compare: fluid against simulation and against the classical formulas; the command line.

Four rooms with a one-way import order, ``cli -> present -> study -> formulas``:
:mod:`compare.formulas` (Erlang B/C/A, Cobham, Whitt, square-root staffing; pure),
:mod:`compare.study` (the comparison, gaps, flags, transient, station, scale, staffing search,
phase overlay), :mod:`compare.present` (text, figures, the HTML report) and :mod:`compare.cli`
(the ``fluidgap`` command line).

The public API below is what a notebook calls; names are imported on first use, so
``import compare`` costs nothing::

    import compare
    c = compare.compare(compare.load_demo(), reps=10)
    c.to_frame()
"""

from __future__ import annotations

import importlib

__all__ = [
    "Comparison",
    "ScaleResult",
    "StaffingResult",
    "StationResult",
    "compare",
    "demo_path",
    "load_demo",
    "scale_study",
    "staff_search",
    "station_check",
]

_HOMES = {
    "Comparison": "compare.study.comparison",
    "compare": "compare.study.comparison",
    "ScaleResult": "compare.study.scale",
    "scale_study": "compare.study.scale",
    "StaffingResult": "compare.study.staffing_search",
    "staff_search": "compare.study.staffing_search",
    "StationResult": "compare.study.station",
    "station_check": "compare.study.station",
    "demo_path": "compare.study.demo",
    "load_demo": "compare.study.demo",
}


def __getattr__(name: str):
    home = _HOMES.get(name)
    if home is None:
        raise AttributeError(f"module 'compare' has no attribute {name!r}")
    value = getattr(importlib.import_module(home), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
