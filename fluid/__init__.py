"""fluid: the scenario model and the deterministic (fluid) semantics of a timed Petri net.

Public API (design.md §5): :func:`load_scenario`, :func:`load_scenario_text`, :class:`Scenario`,
:func:`with_changes`, :func:`throughput` (-> :class:`FluidResult`), :func:`phase_diagram`
(-> :class:`PhaseDiagram`), :func:`staff` (the fluid staffing plan, -> :class:`FluidPlan`) and
the error types. Each result has ``to_frame()``, a tidy pandas table.

The names are imported on first use (PEP 562), so ``import fluid`` costs next to nothing and a
command pays only for what it calls (``throughput`` brings in the LP and scipy.optimize when it
first solves one; pandas comes with the first ``to_frame()``).
"""

# (the module's own imports carry a leading underscore: its public names are exactly __all__)
import importlib as _importlib
import typing as _typing

#: public name -> (module of this package, name there)
_EXPORTS = {
    "FluidPlan": ("staffing", "FluidPlan"),
    "FluidResult": ("analysis", "FluidResult"),
    "PhaseDiagram": ("phases", "PhaseDiagram"),
    "Scenario": ("scenario", "Scenario"),
    "ScenarioError": ("errors", "ScenarioError"),
    "ScenarioWarning": ("loading", "ScenarioWarning"),
    "SolverError": ("errors", "SolverError"),
    "load_scenario": ("loading", "load_scenario"),
    "load_scenario_text": ("loading", "load_scenario_text"),
    "phase_diagram": ("phases", "phase_diagram"),
    "staff": ("staffing", "fluid_plan"),
    "throughput": ("analysis", "throughput"),
    "with_changes": ("loading", "with_changes"),
}

__all__ = sorted(_EXPORTS)


def __getattr__(name: str):
    try:
        module, attr = _EXPORTS[name]
    except KeyError:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}") from None
    value = getattr(_importlib.import_module(f".{module}", __name__), attr)
    globals()[name] = value  # later look-ups skip this function
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))


if _typing.TYPE_CHECKING:  # what type checkers and editors see
    from .analysis import FluidResult, throughput
    from .errors import ScenarioError, SolverError
    from .loading import ScenarioWarning, load_scenario, load_scenario_text, with_changes
    from .phases import PhaseDiagram, phase_diagram
    from .scenario import Scenario
    from .staffing import FluidPlan
    from .staffing import fluid_plan as staff
