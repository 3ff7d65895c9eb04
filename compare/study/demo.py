"""The built-in demo scenario (invented data: a utility company's customer line)."""

from __future__ import annotations

from importlib import resources

from fluid.scenario import Scenario

__all__ = ["demo_path", "load_demo"]


def demo_path() -> str:
    """Path of the built-in demo scenario file (a copy of ``configs/utility-line.yaml``)."""
    return str(resources.files("compare").joinpath("demo/utility-line.yaml"))


def load_demo(overrides=()) -> Scenario:
    """The built-in demo as a validated :class:`~fluid.scenario.Scenario` (``overrides``:
    ``PATH=VALUE`` strings as with ``--set``)."""
    from fluid.loading import load_scenario

    return load_scenario(demo_path(), overrides=overrides)
