"""Local worker pools (desim.pool): one function makes every pool of the project, its workers
watch their parent, and a pool left by an exception ends its workers at once.

What happens when the command itself is killed is tested end to end in
tests/compare/cli/test_signals.py.
"""

from __future__ import annotations

import importlib
import os
import pathlib
import re
import signal
import time

import pytest

import desim.pool as pool_module
from compare.cli.main import main

from .test_store import DESK

ROOT = pathlib.Path(__file__).resolve().parents[2]
SINGLE = str(ROOT / "configs" / "single-station.yaml")
replicate_module = importlib.import_module("desim.replicate")
sweep_module = importlib.import_module("compare.study.sweep")


def test_every_local_pool_is_made_by_local_pool():
    made_here = []
    for package in ("desim", "compare", "fluid"):
        for path in sorted((ROOT / package).rglob("*.py")):
            if re.search(r"ProcessPoolExecutor\s*\(", path.read_text()):
                made_here.append(str(path.relative_to(ROOT)))
    assert made_here == ["desim/pool.py"]


def _sleep(seconds: float) -> int:
    time.sleep(seconds)
    return os.getpid()


def test_workers_ignore_sigint_and_take_the_default_sigterm():
    def handler(signum, frame):  # a parent's handler must not run in a forked worker
        raise AssertionError("parent handler ran")

    old = signal.signal(signal.SIGTERM, handler)
    try:
        with pool_module.local_pool(1) as pool:
            dispositions = pool.submit(_dispositions).result()
    finally:
        signal.signal(signal.SIGTERM, old)
    assert dispositions == (signal.SIG_IGN, signal.SIG_DFL, True)


def _dispositions():
    import threading

    watching = any(t.name == "fluidgap-parent-watch" for t in threading.enumerate())
    return signal.getsignal(signal.SIGINT), signal.getsignal(signal.SIGTERM), watching


def _running(pid: int) -> bool:
    """True while ``pid`` is a live process (not gone, not a zombie)."""
    try:
        with open(f"/proc/{pid}/stat") as f:
            return f.read().rsplit(")", 1)[1].split()[0] != "Z"
    except FileNotFoundError:
        return False


def test_a_pool_left_by_an_exception_ends_its_workers_at_once():
    with pytest.raises(KeyboardInterrupt):
        with pool_module.local_pool(2) as pool:
            futures = [pool.submit(_sleep, 600) for _ in range(2)]
            processes = list(pool._processes.values())
            assert len(processes) == 2
            raise KeyboardInterrupt
    # stop_workers returns once every worker has ended (SIGTERM, SIGKILL after a second). Read
    # the process table, not Process.is_alive(): the executor's own thread may reap a worker
    # first, and is_alive() then cannot tell (waitpid fails) and answers True
    assert [_running(p.pid) for p in processes] == [False, False]
    assert all(f.cancelled() or f.done() for f in futures)


def test_replicate_and_sweeps_use_the_watched_pool(net, monkeypatch, capsys):
    made = []
    real = pool_module.local_pool

    def recording(workers):
        made.append(workers)
        return real(workers)

    monkeypatch.setattr(replicate_module, "local_pool", recording)
    monkeypatch.setattr(sweep_module, "local_pool", recording)
    replicate_module.replicate(net(DESK), reps=3, horizon=200, workers=2)
    assert made == [2]
    made.clear()
    # staff uses --workers like every other command: one pool of that size for the whole search
    code = main(["staff", SINGLE, "--workers", "2", "--reps", "2", "--horizon", "100",
                 "--warmup", "10", "--quiet", "--json"])
    capsys.readouterr()
    assert code == 0 and made == [2]
    made.clear()
    code = main(["staff", SINGLE, "--workers", "1", "--reps", "2", "--horizon", "100",
                 "--warmup", "10", "--quiet", "--json"])
    capsys.readouterr()
    assert code == 0 and made == []  # one worker: in this process, no pool
