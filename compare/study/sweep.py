"""Variants of one scenario simulated with the same settings: common random numbers, one shared
executor, one ``out`` subfolder per variant.

Every study that simulates more than one variant (the scale study, the staffing search, the
simulated overlay of a phase diagram) runs them through a :class:`Sweep`, so that each variant
draws from the same base seed (the variants differ by their parameters only, not by their
luck), the local worker processes are started once for the whole sweep, and a run folder keeps
each variant's replications apart (``out/<label>``) for ``--resume``; the run folder is locked
against a second process for the whole sweep.
"""

from __future__ import annotations

import contextlib
from pathlib import Path
from typing import Callable

import desim
from desim import SimulationResult, SimulationSettings
from desim.pool import local_pool
from desim.run_folder import FolderLock, writing
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
        self._stack = contextlib.ExitStack()

    def __enter__(self) -> "Sweep":
        try:
            self._start()
        except BaseException:
            self._stack.close()
            raise
        return self

    def _start(self) -> None:
        s = self.settings
        if s.out is not None:
            # one process per run folder: each variant's store locks its own subfolder, this
            # keeps a second sweep out of the folder they share
            with writing(Path(s.out)):
                Path(s.out).mkdir(parents=True, exist_ok=True)
            self._stack.enter_context(FolderLock(s.out))
        if s.executor is None and s.local_workers() > 1:
            # the local pool of desim: workers that end with this process, stopped at once
            # when the sweep is left by an exception
            pool = self._stack.enter_context(local_pool(s.local_workers()))
            self.settings = s.with_changes(executor=pool)
        elif s.executor is None:
            self.settings = s.with_changes(workers=1)

    def __exit__(self, *exc) -> None:
        self._stack.__exit__(*exc)

    def run(self, variant: Scenario, label: str, *,
            record_waits: bool = False) -> SimulationResult:
        """Simulate ``variant``; its replications are kept in ``out/<label>`` when the settings
        have a run folder."""
        return desim.replicate(variant, settings=self.settings.in_subfolder(label),
                               progress=self.progress, record_waits=record_waits)
