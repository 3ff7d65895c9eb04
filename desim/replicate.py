"""Independent replications, run in parallel on any ``concurrent.futures`` executor.

Replication r of a run with base seed S draws every stream from ``SeedSequence(S, spawn_key=(r,
...))`` (see :mod:`desim.streams`), so a replication's numbers depend only on (scenario, S, r):
identical whichever process runs it and however many workers there are. Results are combined in
replication order. With an ``out`` directory every replication is saved as it finishes and a
killed run can be resumed (:mod:`desim.store`).
"""

from __future__ import annotations

import concurrent.futures as cf
import contextlib
import os
from pathlib import Path
from typing import Callable

from fluid.scenario import Scenario

from .pool import local_pool
from .results import SimulationResult, summarize
from .run import DEFAULT_PERCENTILES, RunResult, check_percentiles, run_replication
from .settings import SettingsError, SimulationSettings, resolve_settings
from .store import RunStore

__all__ = ["replicate", "run_replications"]


def _collect(futures: list, progress: Callable[[], object] | None,
             on_result: Callable[[RunResult], object] | None = None) -> list[RunResult]:
    try:
        if progress is not None or on_result is not None:
            # completion order where possible, so that a saved replication is never held back
            done = (cf.as_completed(futures) if all(isinstance(f, cf.Future) for f in futures)
                    else futures)  # futures of another kind: in order
            for f in done:
                run = f.result()  # raise at once if a replication failed
                if on_result is not None:
                    on_result(run)
                if progress is not None:
                    progress()
        return [f.result() for f in futures]
    except BaseException:
        for f in futures:
            f.cancel()
        raise


def run_replications(scenario: Scenario, replications: range | list[int], *,
                     executor: cf.Executor | None = None, workers: int | None = None,
                     progress: Callable[[], object] | None = None,
                     on_result: Callable[[RunResult], object] | None = None,
                     **settings) -> list[RunResult]:
    """Run the given replication indices of ``scenario`` (``settings`` are passed to
    :func:`desim.run_replication`) and return their results in the order given.

    ``executor``: any executor with ``submit`` (e.g. ``dask.distributed.Client.get_executor()``);
    otherwise a local process pool with ``workers`` processes (None: one per CPU, at most one per
    replication; 1: run here, in this process), from :func:`desim.pool.local_pool`: its workers
    end when this process does, and at once when the run is interrupted. ``progress()`` is called once per finished
    replication. ``on_result(run)`` is called in this process with each replication as it finishes
    (in completion order), before ``progress()``."""
    reps = list(replications)
    if executor is None:
        if workers is None:
            workers = min(len(reps), os.cpu_count() or 1)
        if workers < 1:
            raise ValueError(f"workers must be at least 1 (got {workers!r})")
        if workers == 1 or len(reps) <= 1:
            out = []
            for r in reps:
                out.append(run_replication(scenario, r, **settings))
                if on_result is not None:
                    on_result(out[-1])
                if progress is not None:
                    progress()
            return out
        with local_pool(min(workers, len(reps))) as pool:
            return _collect([pool.submit(run_replication, scenario, r, **settings) for r in reps],
                            progress, on_result)
    return _collect([executor.submit(run_replication, scenario, r, **settings) for r in reps],
                    progress, on_result)


def replicate(scenario: Scenario, *, reps: int | None = None, horizon: float | None = None,
              warmup: float | None = None, seed: int | None = None,
              executor: cf.Executor | None = None, workers: int | None = None,
              interval: float | None = None, max_jobs: int | None = None,
              progress: Callable[[], object] | None = None,
              record_waits: bool = False, out: str | os.PathLike | None = None,
              resume: bool = False, shortcuts: bool = True,
              settings: SimulationSettings | None = None,
              percentiles=None) -> SimulationResult:
    """Simulate ``reps`` independent replications of ``scenario`` over [0, horizon], measure each
    over [warmup, horizon] and return estimates with 95 % Student t intervals.

    Times are in the scenario's time unit. ``settings``: a :class:`desim.SimulationSettings`
    (see :func:`desim.resolve_settings`); each keyword given wins over it, and anything left
    unset comes from ``scenario.run``.
    ``executor``/``workers``: where replications run (see :func:`run_replications`); the numbers
    do not depend on it. ``interval``: also build per-interval tables of that length (from 0).
    ``max_jobs``: jobs allowed inside a run at once before it is stopped and reported unstable
    (default :data:`desim.run.DEFAULT_MAX_JOBS`). ``progress``: called once per finished
    replication (or read back from ``out``). ``record_waits``: keep every wait in the window
    (``result.runs[i].waits``). ``percentiles``: the wait percentiles (in percent) reported per
    place (None: :data:`desim.run.DEFAULT_PERCENTILES`); a bad one raises
    :class:`desim.SettingsError` naming ``percentiles``.

    ``out``: a run directory (:class:`desim.store.RunStore`); every replication is saved there as
    it finishes, and the combined result as ``summary.json`` at the end. Without ``resume`` it
    must be new or empty. ``resume``: reuse the replications already saved in ``out`` (same
    scenario and settings, else :class:`desim.store.StoreError`) and run only the missing ones;
    the numbers are identical to an uninterrupted run. Bad settings raise
    :class:`desim.SettingsError` (a ValueError) naming the setting.

    ``shortcuts``: let the engine use its shortcuts (the default); False runs the general firing
    logic alone (see :func:`desim.net.build_net`). The numbers are the same either way.
    """
    cfg = resolve_settings(scenario.run, settings, reps=reps, horizon=horizon, warmup=warmup,
                           seed=seed, executor=executor, workers=workers, interval=interval,
                           max_jobs=max_jobs, out=out, resume=resume or None)
    reps = cfg.replications
    run_settings = dict(horizon=cfg.horizon, warmup=cfg.warmup, seed=cfg.seed,
                        interval=cfg.interval, max_jobs=cfg.max_jobs, record_waits=record_waits)
    if percentiles is not None:
        try:
            wanted = check_percentiles(percentiles)
        except ValueError as exc:
            raise SettingsError("percentiles", str(exc).removeprefix("a wait percentile ")) from None
        # (only other percentiles than the default are a setting of the run directory, so a
        # folder saved before percentiles existed is still resumed with the default)
        if wanted != DEFAULT_PERCENTILES:
            run_settings["percentiles"] = list(wanted)
    store = (None if cfg.out is None
             else RunStore.open(Path(cfg.out), scenario, run_settings, resume=cfg.resume))
    with contextlib.nullcontext() if store is None else store:  # closing it lets go of its lock
        saved = {} if store is None else store.load_all(range(reps))
        if progress is not None:
            for _ in saved:
                progress()
        todo = [r for r in range(reps) if r not in saved]
        # (shortcuts change no number, so they are no setting of the run directory: a run saved
        # with them can be resumed without them)
        runs = run_replications(scenario, todo, executor=cfg.executor, workers=cfg.workers,
                                progress=progress,
                                on_result=None if store is None else store.save,
                                shortcuts=shortcuts, **run_settings) if todo else []
        runs = sorted([*saved.values(), *runs], key=lambda r: r.replication)
        result = summarize(runs, scenario_name=scenario.name, time_unit=scenario.time_unit,
                           steady_state=not scenario.has_time_variation,
                           targets={p: t.to_json(scenario.time_unit)
                                    for p, t in scenario.targets.service.items()})
        if store is not None:
            store.save_summary(result)
    return result
