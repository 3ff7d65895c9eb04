"""Replications on a Dask cluster (desim.dask_executor): the numbers of local workers, exactly.

One LocalCluster on the loopback interface serves the whole module. Each replication's streams
depend only on (scenario, seed, replication index), which are passed to every task, so the
results must be identical to a run in this process: the checks are exact equalities.
"""

from __future__ import annotations

import json
import logging
import socket
import sys

import pytest

pytest.importorskip("distributed")  # dask is an optional extra

from desim import replicate, run_replications  # noqa: E402
from desim.dask_executor import DaskError, DaskUnavailable, dask_executor  # noqa: E402
from desim.store import SUMMARY, run_to_json  # noqa: E402

from .test_runs import CONTACT  # noqa: E402

logging.getLogger("distributed").setLevel(logging.ERROR)


@pytest.fixture(scope="module")
def executor():
    with dask_executor("local", workers=2) as ex:
        yield ex


def _where_am_i() -> tuple[str, str]:
    """Runs on a worker: its own address and its scheduler's."""
    from distributed import get_worker

    w = get_worker()
    return w.address, w.scheduler.address


def test_the_local_cluster_listens_on_loopback_only(executor):
    worker, scheduler = executor.submit(_where_am_i).result(timeout=60)
    assert worker.startswith("tcp://127.0.0.1:")
    assert scheduler.startswith("tcp://127.0.0.1:")


def test_dask_gives_the_numbers_of_a_single_process(executor, net):
    s = net(CONTACT)
    settings = dict(reps=5, horizon=90, warmup=10, interval=30, record_waits=True)
    on_dask = replicate(s, executor=executor, **settings)
    here = replicate(s, workers=1, **settings)
    assert json.dumps(on_dask.to_json()) == json.dumps(here.to_json())
    for a, b in zip(on_dask.runs, here.runs):  # every per-replication figure, bit for bit
        assert json.dumps(run_to_json(a)) == json.dumps(run_to_json(b))


def test_results_come_back_in_the_order_asked(executor, net):
    s = net(CONTACT)
    got = run_replications(s, [3, 0, 2], executor=executor, horizon=60, warmup=10, seed=9)
    assert [r.replication for r in got] == [3, 0, 2]
    # the same index submitted twice (impure tasks: two keys, no caching) gives the same numbers
    twice = run_replications(s, [1, 1], executor=executor, horizon=60, warmup=10, seed=9)
    assert json.dumps(run_to_json(twice[0])) == json.dumps(run_to_json(twice[1]))


def test_a_dask_run_saves_and_resumes(executor, net, tmp_path):
    s = net(CONTACT)
    out = tmp_path / "run"
    replicate(s, reps=2, horizon=60, warmup=10, executor=executor, out=out)
    resumed = replicate(s, reps=4, horizon=60, warmup=10, executor=executor, out=out, resume=True)
    here = replicate(s, reps=4, horizon=60, warmup=10, workers=1)
    assert resumed.to_json() == here.to_json()
    assert json.loads((out / SUMMARY).read_text()) == json.loads(json.dumps(here.to_json()))


def test_without_distributed_the_message_names_the_extra(monkeypatch):
    monkeypatch.setitem(sys.modules, "distributed", None)  # import distributed -> ImportError
    with pytest.raises(DaskUnavailable, match=r'pip install "fluidgap\[dask\]"') as info:
        with dask_executor("local"):
            pass
    assert isinstance(info.value, RuntimeError)


def test_an_unreachable_scheduler_is_a_clear_error():
    with socket.socket() as sock:  # a loopback port nobody listens on
        sock.bind(("127.0.0.1", 0))
        port = sock.getsockname()[1]
    address = f"tcp://127.0.0.1:{port}"
    with pytest.raises(DaskError, match=f"cannot reach the Dask scheduler at '{address}'"):
        with dask_executor(address, timeout=1):
            pass
