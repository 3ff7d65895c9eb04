"""Local worker processes that never outlive the process that started them.

Every local process pool of the project (:func:`desim.run_replications`, the sweeps of
``compare.study``) is made by :func:`local_pool`. Each worker runs :func:`watch_parent` first:

* a daemon thread waits on the parent's sentinel (a pipe that reads end-of-file the moment the
  parent is gone, however it died: SIGKILL, a crash, the out-of-memory killer) and checks once
  a second that the parent process id has not changed; either way the worker ends at once with
  ``os._exit``, which also lets go of the caller's stdout and stderr that it inherited;
* SIGINT is ignored (a Ctrl-C reaches the whole process group; the parent alone handles it and
  ends its workers) and SIGTERM has its default action (a parent's SIGTERM handler inherited by
  a forked worker must not run there).

Leaving the ``with`` block by an exception (an interrupt, a failed replication, SIGTERM turned
into an exception by the command line) terminates the workers at once instead of waiting for
the replications they are running; a normal exit shuts the pool down as usual.
"""

from __future__ import annotations

import concurrent.futures as cf
import multiprocessing
import multiprocessing.connection
import os
import signal
import threading
import time
from contextlib import contextmanager
from typing import Iterator

__all__ = ["local_pool", "watch_parent", "stop_workers"]

#: Seconds between two checks of the parent process id (the sentinel answers at once).
POLL = 1.0


def watch_parent() -> None:
    """Process-pool initializer: end this worker when its parent is gone (see the module
    docstring). Safe to call in any child process; does nothing else."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    parent = multiprocessing.parent_process()
    sentinel = getattr(parent, "sentinel", None)
    threading.Thread(target=_watch, args=(os.getppid(), sentinel), daemon=True,
                     name="fluidgap-parent-watch").start()


def _watch(parent_pid: int, sentinel: int | None) -> None:
    while True:
        if sentinel is not None:
            try:
                gone = bool(multiprocessing.connection.wait([sentinel], timeout=POLL))
            except OSError:  # the sentinel itself is unusable: fall back on the process id
                sentinel, gone = None, False
        else:
            threading.Event().wait(POLL)
            gone = False
        if gone or os.getppid() != parent_pid:
            os._exit(1)  # no clean-up in a worker whose caller is gone: nobody reads its result


def stop_workers(pool: cf.ProcessPoolExecutor) -> None:
    """End the workers of ``pool`` now (SIGTERM, then SIGKILL for any still alive a second
    later) and shut it down without waiting for the replications they were running."""
    # before Python 3.14 (terminate_workers) there is no public way to reach the processes
    processes = list((getattr(pool, "_processes", None) or {}).values())
    terminate = getattr(pool, "terminate_workers", None)
    if terminate is not None:
        terminate()
    else:
        pool.shutdown(wait=False, cancel_futures=True)
        for p in processes:
            p.terminate()
    alive = {p.sentinel: p for p in processes}
    deadline = time.monotonic() + 1.0
    while alive and time.monotonic() < deadline:
        for s in multiprocessing.connection.wait(list(alive),
                                                  max(0.0, deadline - time.monotonic())):
            alive.pop(s)
    for p in alive.values():
        p.kill()
    for p in processes:  # reap them, so that none is left a zombie or reported alive (SIGKILL
        p.join(timeout=10.0)  # cannot be refused; the wait only covers a loaded machine)


@contextmanager
def local_pool(workers: int) -> Iterator[cf.ProcessPoolExecutor]:
    """A :class:`concurrent.futures.ProcessPoolExecutor` of ``workers`` processes that each
    watch their parent (:func:`watch_parent`); stopped at once when the block ends by an
    exception (:func:`stop_workers`), shut down normally otherwise."""
    pool = cf.ProcessPoolExecutor(max_workers=workers, initializer=watch_parent)
    try:
        yield pool
    except BaseException:
        stop_workers(pool)
        raise
    pool.shutdown(wait=True)
