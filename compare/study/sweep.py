"""Variants of one scenario simulated with the same settings: common random numbers, one shared
executor, one ``out`` subfolder per variant.

Every study that simulates more than one variant (the scale study, the staffing search, the
simulated overlay of a phase diagram) runs them through a :class:`Sweep`, so that each variant
draws from the same base seed (the variants differ by their parameters only, not by their
luck), the local worker processes are started once for the whole sweep, and a run folder keeps
each variant's replications apart (``out/<label>``) for ``--resume``.
"""

from __future__ import annotations

import concurrent.futures as cf
from typing import Callable

import desim
from desim import SimulationResult, SimulationSettings
from fluid.scenario import Scenario

__all__ = ["Sweep"]


class Sweep:
    """Run variants of a scenario with ``settings`` (see module docstring). Use as a context
    manager; :meth:`run` simulates one variant. ``progress()`` is called once per finished
    replication of every variant."""

    def __init__(self, settings: SimulationSettings,
                 progress: Callable[[], object] | None = None):
        self.settings = settings
        self.progress = progress
        self._own_pool: cf.ProcessPoolExecutor | None = None

    def __enter__(self) -> "Sweep":
        s = self.settings
        if s.executor is None and s.local_workers() > 1:
            self._own_pool = cf.ProcessPoolExecutor(max_workers=s.local_workers())
            self.settings = s.with_changes(executor=self._own_pool)
        elif s.executor is None:
            self.settings = s.with_changes(workers=1)
        return self

    def __exit__(self, *exc) -> None:
        if self._own_pool is not None:
            self._own_pool.shutdown(cancel_futures=True)
            self._own_pool = None

    def run(self, variant: Scenario, label: str, *,
            record_waits: bool = False) -> SimulationResult:
        """Simulate ``variant``; its replications are kept in ``out/<label>`` when the settings
        have a run folder."""
        return desim.replicate(variant, settings=self.settings.in_subfolder(label),
                               progress=self.progress, record_waits=record_waits)
