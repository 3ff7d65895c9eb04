"""Replications on a Dask cluster, through dask.distributed's ``concurrent.futures`` executor.

Dask is an optional extra (``pip install "fluidgap[dask]"``). Every task is
``run_replication(scenario, r, **settings)`` with the replication index and base seed passed as
arguments, so a replication's numbers do not depend on where it runs: a Dask run gives exactly the
numbers of local workers. Tasks are submitted as impure (``pure=False``): Dask never merges two
submissions into one result or reuses a cached one.

Workers of a remote cluster need fluidgap importable (the same version as here).
"""

from __future__ import annotations

import concurrent.futures as cf
import logging
import os
from contextlib import contextmanager
from typing import Iterator

__all__ = ["DaskError", "DaskUnavailable", "LOCAL", "dask_executor"]

#: The address that asks for a cluster started here, on the loopback interface.
LOCAL = "local"

_NEEDS_EXTRA = 'the --dask option needs the dask extra: pip install "fluidgap[dask]"'


class DaskError(RuntimeError):
    """Dask cannot be used as asked (bad input for the command line: exit 2)."""


class DaskUnavailable(DaskError):
    """dask.distributed is not installed."""


def _import_distributed():
    try:
        from distributed import Client, LocalCluster
    except ImportError as exc:
        raise DaskUnavailable(_NEEDS_EXTRA) from exc
    return Client, LocalCluster


@contextmanager
def dask_executor(address: str, *, workers: int | None = None,
                  timeout: float = 30.0) -> Iterator[cf.Executor]:
    """Yield a ``concurrent.futures`` executor backed by Dask, for
    ``desim.replicate(..., executor=...)``; close it (and any cluster started) on exit.

    ``address``: ``"local"`` starts a :class:`distributed.LocalCluster` on 127.0.0.1 (no port
    opened on other interfaces, no dashboard) with ``workers`` single-threaded worker processes
    (None: one per CPU); anything else is a scheduler address (``tcp://host:8786``) to connect
    to, waiting at most ``timeout`` seconds. Raises :class:`DaskUnavailable` without
    dask.distributed, :class:`DaskError` when the scheduler cannot be reached."""
    Client, LocalCluster = _import_distributed()
    if workers is not None and workers < 1:
        raise DaskError(f"workers must be at least 1 (got {workers!r})")
    cluster = None
    try:
        if address == LOCAL:
            # processes, one thread each: the simulation is pure Python and holds the GIL
            cluster = LocalCluster(host="127.0.0.1", n_workers=workers or os.cpu_count() or 1,
                                   threads_per_worker=1, processes=True, dashboard_address=None,
                                   silence_logs=logging.ERROR)
            client = Client(cluster)
        else:
            client = Client(address, timeout=timeout)
    except (OSError, TimeoutError, ValueError) as exc:
        if cluster is not None:
            cluster.close()
        where = "start a local Dask cluster" if address == LOCAL else \
            f"reach the Dask scheduler at {address!r}"
        raise DaskError(f"cannot {where}: {exc}") from exc
    executor = client.get_executor(pure=False)
    try:
        yield executor
    finally:
        executor.shutdown(wait=False)  # cancels what is left when leaving on an error
        client.close()
        if cluster is not None:
            cluster.close()
