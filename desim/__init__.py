"""desim: the stochastic (discrete-event) semantics of a fluidgap scenario.

A SimPy model driven by callbacks that executes any valid :class:`fluid.scenario.Scenario`
(design.md §4.2), with random streams keyed by name (common random numbers), independent
replications on any ``concurrent.futures`` executor, and per-run statistics over
[warmup, horizon] combined into estimates with 95 % Student t intervals. All times are in the
scenario's time unit.

Main entry points: :func:`replicate` (many replications -> :class:`SimulationResult`, whose
``to_frame()`` is a tidy pandas table) and :func:`run_replication` (one run ->
:class:`RunResult`, optionally with an event trace).

The names are imported on first use (PEP 562), so ``import desim`` costs next to nothing;
pandas comes with the first table, scipy.stats with the first interval, dask only with
:func:`dask_executor`.
"""

# (the module's own imports carry a leading underscore: its public names are exactly __all__)
import importlib as _importlib
import sys as _sys
import types as _types
import typing as _typing

#: public name -> module of this package that defines it
_EXPORTS = {
    "ConservationError": "engine",
    "DaskError": "dask_executor",
    "DaskUnavailable": "dask_executor",
    "DEFAULT_MAX_JOBS": "run",
    "Estimate": "estimate",
    "MserResult": "warmup",
    "RunResult": "run",
    "RunStore": "store",
    "SettingsError": "settings",
    "SimulationError": "engine",
    "SimulationResult": "results",
    "SimulationSettings": "settings",
    "StoreError": "store",
    "WarmupSuggestion": "results",
    "dask_executor": "dask_executor",
    "mser5": "warmup",
    "replicate": "replicate",
    "resolve_settings": "settings",
    "run_replication": "run",
    "run_replications": "replicate",
    "stable_hash": "streams",
    "stream_rng": "streams",
    "waiting_places": "run",
}

__all__ = list(_EXPORTS)


def __getattr__(name: str):
    try:
        module = _EXPORTS[name]
    except KeyError:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}") from None
    value = getattr(_importlib.import_module(f".{module}", __name__), name)
    globals()[name] = value  # later look-ups skip this function
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))


class _Package(_types.ModuleType):
    """This package as a module object that keeps ``desim.replicate`` and
    ``desim.dask_executor`` the functions.

    Those two submodules share their names with the functions they define, and the import
    system sets the package attribute to the submodule when that is first imported (``from
    desim.replicate import ...`` anywhere, or the first look-up of another name it defines);
    the function takes its place instead, as when this file imported them eagerly."""

    def __setattr__(self, name: str, value) -> None:
        if isinstance(value, _types.ModuleType) and _EXPORTS.get(name) == name:
            value = getattr(value, name)
        super().__setattr__(name, value)


_sys.modules[__name__].__class__ = _Package

if _typing.TYPE_CHECKING:  # what type checkers and editors see
    from .dask_executor import DaskError, DaskUnavailable, dask_executor
    from .engine import ConservationError, SimulationError
    from .estimate import Estimate
    from .replicate import replicate, run_replications
    from .results import SimulationResult, WarmupSuggestion
    from .run import DEFAULT_MAX_JOBS, RunResult, run_replication, waiting_places
    from .settings import SettingsError, SimulationSettings, resolve_settings
    from .store import RunStore, StoreError
    from .streams import stable_hash, stream_rng
    from .warmup import MserResult, mser5
