"""fluid: the scenario model and the deterministic (fluid) semantics of a timed Petri net.

Public API: :func:`load_scenario`, :func:`load_scenario_text`, :class:`Scenario`,
:func:`with_changes`, :func:`throughput` and the error types.
"""

from .analysis import FluidResult, throughput
from .errors import ScenarioError, SolverError
from .loading import ScenarioWarning, load_scenario, load_scenario_text, with_changes
from .scenario import Scenario

__all__ = [
    "FluidResult",
    "Scenario",
    "ScenarioError",
    "ScenarioWarning",
    "SolverError",
    "load_scenario",
    "load_scenario_text",
    "throughput",
    "with_changes",
]
