"""desim: the stochastic (discrete-event) semantics of a fluidgap scenario.

A SimPy model driven by callbacks that executes any valid :class:`fluid.scenario.Scenario`
(design.md §4.2), with random streams keyed by name (common random numbers), independent
replications on any ``concurrent.futures`` executor, and per-run statistics over
[warmup, horizon] combined into estimates with 95 % Student t intervals. All times are in the
scenario's time unit.

Main entry points: :func:`replicate` (many replications -> :class:`SimulationResult`) and
:func:`run_replication` (one run -> :class:`RunResult`, optionally with an event trace).
"""

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

__all__ = [
    "ConservationError",
    "DaskError",
    "DaskUnavailable",
    "DEFAULT_MAX_JOBS",
    "Estimate",
    "MserResult",
    "RunResult",
    "RunStore",
    "SettingsError",
    "SimulationError",
    "SimulationSettings",
    "SimulationResult",
    "StoreError",
    "WarmupSuggestion",
    "dask_executor",
    "mser5",
    "replicate",
    "resolve_settings",
    "run_replication",
    "run_replications",
    "stable_hash",
    "stream_rng",
    "waiting_places",
]
