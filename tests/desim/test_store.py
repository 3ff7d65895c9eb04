"""Run directories (desim.store): exact round trip of a replication, atomic saving as each
replication finishes, refusal of a directory that holds another run, and resuming a run killed
with SIGKILL to numbers identical to an uninterrupted run.

Everything here is deterministic (fixed seeds): the checks are exact equalities.
"""

from __future__ import annotations

import json
import math
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import importlib
from desim import replicate, run_replication
from desim.store import (MANIFEST, SUMMARY, RunStore, StoreError, run_from_json, run_to_json,
                         scenario_fingerprint, write_atomic)
from fluid import with_changes

from .test_runs import CONTACT

REPO = Path(__file__).resolve().parents[2]
# (the package exports a function of the same name, so reach the module itself)
replicate_module = importlib.import_module("desim.replicate")

DESK = """
name: help desk for the store tests (invented)
time_unit: min
run: {horizon: 1000, warmup: 50, replications: 40, seed: 3}
sources:
  calls: {rate: 4.0, into: queue}
pools:
  agents: 9
places:
  queue: {patience: {dist: exponential, mean: 3.0}}
  talk: {hold: {dist: exponential, mean: 2.0}}
transitions:
  answer: {in: [queue, agents], out: [talk]}
  close: {in: [talk], out: [agents]}
targets:
  queue: {within: 0.5, goal: 0.8}
"""


def same(a, b, where="run") -> None:
    """Exact equality, types included; nan equals nan."""
    assert type(a) is type(b), (where, type(a), type(b))
    if isinstance(a, float):
        assert a == b or (math.isnan(a) and math.isnan(b)), (where, a, b)
    elif isinstance(a, np.ndarray):
        assert a.dtype == b.dtype and np.array_equal(a, b, equal_nan=True), where
    elif isinstance(a, pd.DataFrame):
        pd.testing.assert_frame_equal(a, b, check_exact=True)
    elif isinstance(a, dict):
        assert list(a) == list(b), where
        for k in a:
            same(a[k], b[k], f"{where}.{k}")
    elif isinstance(a, (list, tuple)):
        assert len(a) == len(b), where
        for i, (x, y) in enumerate(zip(a, b)):
            same(x, y, f"{where}[{i}]")
    elif hasattr(a, "__dataclass_fields__"):
        for k in a.__dataclass_fields__:
            same(getattr(a, k), getattr(b, k), f"{where}.{k}")
    else:
        assert a == b, (where, a, b)


def reread(run):
    """Through the file format: JSON text and back."""
    return run_from_json(json.loads(json.dumps(run_to_json(run), allow_nan=False)))


def test_a_replication_reads_back_bit_for_bit(net):
    s = net(CONTACT)
    # every optional part: per-interval table, waits, job records; ints and floats
    run = run_replication(s, 2, horizon=120, warmup=20, interval=30, record_waits=True,
                          record_jobs=True)
    same(run, reread(run))
    # a run stopped at the job limit before its window opened: unstable, short series, nan figures
    stopped = run_replication(s, 0, horizon=120, warmup=20, max_jobs=5, interval=30)
    assert stopped.unstable
    assert any(math.isnan(v) for v in stopped.values().values())
    same(stopped, reread(stopped))


def test_replicate_saves_every_replication_and_the_summary(net, tmp_path):
    s = net(DESK)
    out = tmp_path / "run"
    saved = replicate(s, reps=4, horizon=200, workers=2, out=out)
    plain = replicate(s, reps=4, horizon=200, workers=1)
    assert saved.to_json() == plain.to_json()
    assert sorted(p.name for p in out.iterdir()) == [
        MANIFEST, "rep-000000.json", "rep-000001.json", "rep-000002.json", "rep-000003.json",
        SUMMARY]
    assert json.loads((out / SUMMARY).read_text()) == json.loads(json.dumps(plain.to_json()))
    manifest = json.loads((out / MANIFEST).read_text())
    assert manifest["scenario_sha256"] == scenario_fingerprint(s)
    assert (manifest["seed"], manifest["horizon"], manifest["warmup"]) == (3, 200.0, 50.0)
    store = RunStore(out, manifest)
    for r, run in enumerate(plain.runs):
        same(store.load(r), run)


def count_runs(monkeypatch) -> list[int]:
    """Replications actually computed (in this process, workers=1)."""
    done: list[int] = []
    real = replicate_module.run_replication

    def counted(scenario, replication, **settings):
        done.append(replication)
        return real(scenario, replication, **settings)

    monkeypatch.setattr(replicate_module, "run_replication", counted)
    return done


def test_resume_runs_only_what_is_missing(net, tmp_path, monkeypatch):
    s = net(DESK)
    out = tmp_path / "run"
    replicate(s, reps=3, horizon=200, workers=1, out=out)
    done = count_runs(monkeypatch)
    ticks = []
    resumed = replicate(s, reps=7, horizon=200, workers=1, out=out, resume=True,
                        progress=lambda: ticks.append(1))
    assert done == [3, 4, 5, 6]
    assert len(ticks) == 7  # the three read back count as finished
    done.clear()
    # asking for fewer than are saved reuses the first ones and computes nothing
    fewer = replicate(s, reps=5, horizon=200, workers=1, out=out, resume=True)
    assert done == []
    monkeypatch.undo()
    assert resumed.to_json() == replicate(s, reps=7, horizon=200, workers=1).to_json()
    assert fewer.to_json() == replicate(s, reps=5, horizon=200, workers=1).to_json()


def test_resume_of_a_new_or_empty_directory_starts_afresh(net, tmp_path):
    s = net(DESK)
    (tmp_path / "empty").mkdir()
    a = replicate(s, reps=2, horizon=100, workers=1, out=tmp_path / "empty", resume=True)
    b = replicate(s, reps=2, horizon=100, workers=1, out=tmp_path / "new" / "deep", resume=True)
    assert a.to_json() == b.to_json()


def test_a_directory_holding_a_run_is_refused_without_resume(net, tmp_path):
    s = net(DESK)
    replicate(s, reps=2, horizon=100, workers=1, out=tmp_path)
    with pytest.raises(StoreError, match="already holds a run; use --resume or another directory"):
        replicate(s, reps=2, horizon=100, workers=1, out=tmp_path)


def test_a_directory_with_other_files_is_refused(net, tmp_path):
    (tmp_path / "notes.txt").write_text("mine\n")
    with pytest.raises(StoreError, match="not empty and holds no run"):
        replicate(net(DESK), reps=2, horizon=100, workers=1, out=tmp_path)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["notes.txt"]  # nothing written
    with pytest.raises(StoreError, match="not a directory"):
        replicate(net(DESK), reps=2, horizon=100, workers=1, out=tmp_path / "notes.txt")


@pytest.mark.parametrize(
    "change, message",
    [
        (dict(seed=4), r"seed 3, this run has seed 4"),
        (dict(horizon=150), r"horizon 100\.0, this run has horizon 150\.0"),
        (dict(warmup=10), r"warmup 50\.0, this run has warmup 10\.0"),
        (dict(interval=25), r"interval None, this run has interval 25\.0"),
        (dict(max_jobs=500), r"max_jobs 1000000, this run has max_jobs 500"),
        (dict(record_waits=True), r"record_waits False, this run has record_waits True"),
    ],
)
def test_resume_refuses_other_settings(net, tmp_path, change, message):
    s = net(DESK)
    replicate(s, reps=2, horizon=100, workers=1, out=tmp_path)
    settings = dict(reps=2, horizon=100, workers=1, out=tmp_path, resume=True) | change
    with pytest.raises(StoreError, match=message):
        replicate(s, **settings)


def test_resume_refuses_another_scenario(net, tmp_path):
    s = net(DESK)
    replicate(s, reps=2, horizon=100, workers=1, out=tmp_path)
    other = with_changes(s, {"pools.agents": 10})
    with pytest.raises(StoreError, match="holds a run of a different scenario"):
        replicate(other, reps=2, horizon=100, workers=1, out=tmp_path, resume=True)
    # the run section is not part of the fingerprint: its settings are compared one by one
    assert scenario_fingerprint(with_changes(s, {"run.replications": 5})) == \
        scenario_fingerprint(s)
    assert scenario_fingerprint(other) != scenario_fingerprint(s)


def test_resume_refuses_a_run_of_another_version(net, tmp_path, monkeypatch):
    import desim.store as store_module

    s = net(DESK)
    monkeypatch.setattr(store_module, "_version", lambda: "0.1.0")
    replicate(s, reps=2, horizon=100, workers=1, out=tmp_path)
    monkeypatch.setattr(store_module, "_version", lambda: "0.2.0")
    with pytest.raises(StoreError, match="fluidgap version '0.1.0', this run has fluidgap "
                                         "version '0.2.0'"):
        replicate(s, reps=2, horizon=100, workers=1, out=tmp_path, resume=True)


def test_resume_needs_a_directory(net):
    with pytest.raises(ValueError, match="resume needs --out DIR, the run directory"):
        replicate(net(DESK), reps=2, horizon=100, workers=1, resume=True)


def test_a_damaged_replication_file_is_named(net, tmp_path):
    s = net(DESK)
    replicate(s, reps=2, horizon=100, workers=1, out=tmp_path)
    (tmp_path / "rep-000001.json").write_text('{"format": 1, "run": {"replic')
    with pytest.raises(StoreError, match=r"rep-000001\.json is damaged"):
        replicate(s, reps=2, horizon=100, workers=1, out=tmp_path, resume=True)


def test_write_atomic_replaces_whole_files(tmp_path):
    path = tmp_path / "x.json"
    write_atomic(path, "one\n")
    write_atomic(path, "two\n")
    assert path.read_text() == "two\n"
    assert [p.name for p in tmp_path.iterdir()] == ["x.json"]  # no temporary left behind


# --- a run killed with SIGKILL, then resumed --------------------------------------------------------

KILLED = textwrap.dedent("""
    import sys
    from fluid import load_scenario_text
    from desim import replicate

    if __name__ == "__main__":
        scenario = load_scenario_text(open(sys.argv[1]).read())
        replicate(scenario, reps=40, workers=1, out=sys.argv[2])
""")


def test_a_killed_run_resumes_to_the_uninterrupted_numbers(net, tmp_path, monkeypatch):
    s = net(DESK)
    (tmp_path / "desk.yaml").write_text(DESK)
    (tmp_path / "killed.py").write_text(KILLED)
    out = tmp_path / "killed"
    env = dict(os.environ, PYTHONPATH=str(REPO))
    proc = subprocess.Popen([sys.executable, str(tmp_path / "killed.py"),
                             str(tmp_path / "desk.yaml"), str(out)], env=env, cwd=tmp_path)
    try:
        deadline = time.monotonic() + 120
        while len(list(out.glob("rep-*.json"))) < 3:
            assert proc.poll() is None, "the run ended before it could be killed"
            assert time.monotonic() < deadline, "no replication saved within 120 s"
            time.sleep(0.005)
        proc.send_signal(signal.SIGKILL)
    finally:
        proc.kill()
        proc.wait()
    assert proc.returncode == -signal.SIGKILL

    before = {p.name: (p.stat().st_mtime_ns, p.read_bytes()) for p in out.glob("rep-*.json")}
    assert 3 <= len(before) < 40 and not (out / SUMMARY).exists()
    for name, (_, data) in before.items():  # killed at any instant, every file is whole
        json.loads(data)

    done = count_runs(monkeypatch)
    resumed = replicate(s, workers=1, out=out, resume=True)
    finished = sorted(int(n[4:10]) for n in before)
    assert sorted(done) == [r for r in range(40) if r not in finished]  # nothing redone
    for name, (mtime, data) in before.items():  # nothing rewritten
        p = out / name
        assert (p.stat().st_mtime_ns, p.read_bytes()) == (mtime, data)
    assert not list(out.glob(".tmp-*"))

    monkeypatch.undo()
    whole = replicate(s, workers=1, out=tmp_path / "whole")
    assert resumed.to_json() == whole.to_json()
    assert len(resumed.runs) == 40
    for r in range(40):  # the saved replications are byte for byte those of the whole run
        name = f"rep-{r:06d}.json"
        assert (out / name).read_bytes() == (tmp_path / "whole" / name).read_bytes()
    assert (out / SUMMARY).read_bytes() == (tmp_path / "whole" / SUMMARY).read_bytes()
