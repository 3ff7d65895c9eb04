"""A killed ``fluidgap simulate --workers 2`` takes its worker processes with it.

The command runs as a subprocess with stdout and stderr on pipes (a caller waiting on the
output); its workers are found in /proc (every process whose parent is the command). SIGKILL
cannot be handled: the workers must notice that their parent is gone and end, letting go of
the pipes they inherited. SIGTERM and SIGINT are handled: one line on stderr, exit 143 or 130,
workers ended first. The deadlines below are generous bounds for a loaded machine, not speed
measurements.
"""

from __future__ import annotations

import os
import pathlib
import signal
import subprocess
import sys
import time

import pytest

ROOT = pathlib.Path(__file__).resolve().parents[3]
DEMO = str(ROOT / "configs" / "utility-line.yaml")
# long enough never to finish on its own within the test (hundreds of replications of the demo)
LONG = ["simulate", DEMO, "--workers", "2", "--reps", "400", "--horizon", "5000", "--quiet"]

pytestmark = pytest.mark.skipif(not os.path.isdir("/proc/self/task"),
                                reason="reads processes from /proc (Linux)")


def children(pid: int) -> set[int]:
    """Processes whose parent is ``pid`` (from /proc/*/stat), zombies left out."""
    out = set()
    for entry in os.listdir("/proc"):
        if not entry.isdigit():
            continue
        try:
            stat = pathlib.Path(f"/proc/{entry}/stat").read_text()
        except OSError:
            continue
        # "pid (comm) state ppid ...": comm may hold spaces, so split after its ")"
        state, ppid = stat.rsplit(")", 1)[1].split()[:2]
        if int(ppid) == pid and state != "Z":
            out.add(int(entry))
    return out


def alive(pid: int) -> bool:
    try:
        stat = pathlib.Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return False
    return stat.rsplit(")", 1)[1].split()[0] != "Z"


def start_with_workers(preexec=None) -> tuple[subprocess.Popen, set[int]]:
    proc = subprocess.Popen([sys.executable, "-m", "compare.cli", *LONG], cwd=ROOT,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            preexec_fn=preexec)
    deadline = time.monotonic() + 120
    while len(workers := children(proc.pid)) < 2:
        assert proc.poll() is None, proc.communicate()
        assert time.monotonic() < deadline, "no two workers within 120 s"
        time.sleep(0.05)
    return proc, workers


def gone_within(pids: set[int], seconds: float) -> set[int]:
    """The processes of ``pids`` still alive after ``seconds`` (empty once all have ended)."""
    deadline = time.monotonic() + seconds
    while (left := {p for p in pids if alive(p)}) and time.monotonic() < deadline:
        time.sleep(0.05)
    return left


def finish(proc: subprocess.Popen, workers: set[int]) -> tuple[bytes, bytes]:
    try:
        # returns only once stdout and stderr are closed by every process holding them
        return proc.communicate(timeout=30)
    finally:
        for p in workers:  # a failed test must not leave them running either
            if alive(p):
                os.kill(p, signal.SIGKILL)
        proc.kill()
        proc.wait()


def test_sigkill_of_the_command_ends_every_worker_and_frees_its_output():
    proc, workers = start_with_workers()
    proc.send_signal(signal.SIGKILL)
    try:
        assert gone_within(workers, 10) == set()
    finally:
        out, err = finish(proc, workers)
    assert proc.returncode == -signal.SIGKILL
    assert out == b""


def test_sigterm_ends_the_workers_and_exits_143_with_one_line():
    proc, workers = start_with_workers()
    proc.send_signal(signal.SIGTERM)
    try:
        out, err = finish(proc, workers)
    finally:
        left = gone_within(workers, 10)
    assert (proc.returncode, out, err) == (143, b"", b"fluidgap: terminated\n")
    assert left == set()


def test_sigint_to_the_command_alone_ends_the_workers_and_exits_130():
    # the workers ignore SIGINT (a Ctrl-C reaches the whole process group): the command ends
    # them itself. SIGINT set back to its default in the child, whatever the test runner's is.
    proc, workers = start_with_workers(
        preexec=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    proc.send_signal(signal.SIGINT)
    try:
        out, err = finish(proc, workers)
    finally:
        left = gone_within(workers, 10)
    assert (proc.returncode, out, err) == (130, b"", b"fluidgap: interrupted\n")
    assert left == set()
