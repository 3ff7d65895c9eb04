"""Run folders kept safe (desim.store, desim.run_folder): one process per folder (a lock that
names the other process), a checksum per replication file (an edited file is refused by name),
stray files named as they are, and file-system failures reported as StoreError (exit 2 on the
command line), never as an internal error.

Everything is deterministic (fixed seeds); the checks are exact.
"""

from __future__ import annotations

import importlib
import json
import os
import pathlib
import shutil
import signal
import subprocess
import sys
import textwrap

import pytest

from compare.cli.main import main
from desim import replicate
from desim.run_folder import LOCK, FolderLock
from desim.store import FORMAT, MANIFEST, SUMMARY, RunStore, StoreError

from .test_store import DESK

REPO = pathlib.Path(__file__).resolve().parents[2]
store_module = importlib.import_module("desim.store")


def desk_file(tmp_path) -> pathlib.Path:
    path = tmp_path / "desk.yaml"
    path.write_text(textwrap.dedent(DESK))
    return path


# --- the lock ------------------------------------------------------------------------------------

HOLDER = textwrap.dedent("""
    import sys, time
    from desim.run_folder import FolderLock

    with FolderLock(sys.argv[1]):
        print("locked", flush=True)
        time.sleep(600)
""")


@pytest.fixture
def held(tmp_path):
    """``held(folder)``: another process holds the lock of ``folder`` (made if missing) until
    the test ends; returns its process id."""
    procs = []

    def hold(folder: pathlib.Path) -> int:
        folder.mkdir(parents=True, exist_ok=True)
        proc = subprocess.Popen([sys.executable, "-c", HOLDER, str(folder)], cwd=tmp_path,
                                stdout=subprocess.PIPE, env=dict(os.environ, PYTHONPATH=str(REPO)))
        procs.append(proc)
        assert proc.stdout.readline() == b"locked\n"
        return proc.pid

    yield hold
    for proc in procs:
        proc.kill()
        proc.wait()


def test_a_folder_in_use_is_refused_naming_it_and_the_other_process(net, tmp_path, held):
    out = tmp_path / "run"
    pid = held(out)
    with pytest.raises(StoreError) as caught:
        replicate(net(DESK), reps=2, horizon=100, workers=1, out=out)
    assert str(caught.value) == (f"{out} is in use by another fluidgap process (pid {pid}); "
                                 "wait for it to end or use another directory")
    assert sorted(p.name for p in out.iterdir()) == [LOCK]  # the other's lock, nothing of ours


def test_a_sweep_locks_its_whole_folder(tmp_path, held, capsys):
    # scale keeps each factor in out/factor-K, and the folder they share is locked as well
    out = tmp_path / "scale"
    pid = held(out)
    code = main(["scale", str(desk_file(tmp_path)), "--factors", "1", "2", "--reps", "2",
                 "--horizon", "100", "--workers", "1", "--quiet", "--out", str(out)])
    _, err = capsys.readouterr()
    assert code == 2
    assert err == (f"{out} is in use by another fluidgap process (pid {pid}); wait for it to "
                   "end or use another directory\n")
    assert sorted(p.name for p in out.iterdir()) == [LOCK]


def test_the_lock_of_a_killed_process_is_free_and_its_file_is_no_obstacle(net, tmp_path):
    out = tmp_path / "run"
    out.mkdir()
    proc = subprocess.Popen([sys.executable, "-c", HOLDER, str(out)], stdout=subprocess.PIPE,
                            env=dict(os.environ, PYTHONPATH=str(REPO)))
    assert proc.stdout.readline() == b"locked\n"
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    assert (out / LOCK).exists()  # left behind by the killed process
    a = replicate(net(DESK), reps=2, horizon=100, workers=1, out=out)
    b = replicate(net(DESK), reps=2, horizon=100, workers=1)
    assert a.to_json() == b.to_json()
    assert sorted(p.name for p in out.iterdir()) == sorted(
        [MANIFEST, "rep-000000.json", "rep-000001.json", SUMMARY])  # released and removed


def test_the_lock_nests_within_one_process_and_is_removed_when_released(tmp_path):
    with FolderLock(tmp_path):
        with FolderLock(tmp_path):
            assert (tmp_path / LOCK).read_text() == f"{os.getpid()}\n"
        assert (tmp_path / LOCK).exists()
    assert not (tmp_path / LOCK).exists()


def test_a_store_that_cannot_be_opened_lets_go_of_the_lock(net, tmp_path):
    (tmp_path / "notes.txt").write_text("mine\n")
    with pytest.raises(StoreError, match="not empty and holds no run"):
        replicate(net(DESK), reps=2, horizon=100, workers=1, out=tmp_path)
    with FolderLock(tmp_path):  # free again
        pass


def test_two_commands_started_together_on_one_out_folder(tmp_path):
    # one runs, the other is refused at once with the lock message (exit 2); never exit 1, and
    # the run folder the first one leaves is whole
    scenario = desk_file(tmp_path)
    for trial in range(2):
        out = tmp_path / f"run{trial}"
        argv = [sys.executable, "-m", "compare.cli", "simulate", str(scenario), "--reps", "100",
                "--workers", "1", "--quiet", "--json", "--out", str(out)]
        procs = [subprocess.Popen(argv, cwd=REPO, stdout=subprocess.PIPE,
                                  stderr=subprocess.PIPE) for _ in range(2)]
        results = [(p.pid, *p.communicate(timeout=300), p.returncode) for p in procs]
        codes = sorted(r[3] for r in results)
        assert codes == [0, 2], results
        (winner,) = [r for r in results if r[3] == 0]
        (loser,) = [r for r in results if r[3] == 2]
        assert loser[1] == b""
        assert loser[2].decode() == (
            f"{out} is in use by another fluidgap process (pid {winner[0]}); wait for it to "
            "end or use another directory\n")
        assert json.loads(winner[1])["replications"] == 100
        names = sorted(p.name for p in out.iterdir())
        assert names == sorted([MANIFEST, SUMMARY, *(f"rep-{r:06d}.json" for r in range(100))])


# --- checksums and stray files ------------------------------------------------------------------


def test_the_manifest_records_the_sha256_of_every_replication_file(net, tmp_path):
    import hashlib

    replicate(net(DESK), reps=3, horizon=100, workers=1, out=tmp_path)
    manifest = json.loads((tmp_path / MANIFEST).read_text())
    assert manifest["format"] == FORMAT
    assert manifest["checksums"] == {
        f"rep-{r:06d}.json": hashlib.sha256((tmp_path / f"rep-{r:06d}.json").read_bytes())
        .hexdigest() for r in range(3)}


def test_an_edited_replication_file_is_refused_by_name(net, tmp_path):
    s = net(DESK)
    replicate(s, reps=3, horizon=100, workers=1, out=tmp_path)
    path = tmp_path / "rep-000001.json"
    doc = json.loads(path.read_text())
    doc["run"]["totals"] = {k: (v * 2 if isinstance(v, (int, float)) else v)
                            for k, v in doc["run"]["totals"].items()}  # still valid JSON
    path.write_text(json.dumps(doc, separators=(",", ":")) + "\n")
    with pytest.raises(StoreError) as caught:
        replicate(s, reps=3, horizon=100, workers=1, out=tmp_path, resume=True)
    assert str(caught.value) == (
        f"{path} is damaged or was edited after it was saved (its sha256 differs from the one "
        "in manifest.json); delete it to have that replication run again")


def test_a_stray_replication_file_is_named_as_it_is(net, tmp_path):
    s = net(DESK)
    replicate(s, reps=3, horizon=100, workers=1, out=tmp_path)
    shutil.copy(tmp_path / "rep-000001.json", tmp_path / "rep-5.json")
    with pytest.raises(StoreError) as caught:
        replicate(s, reps=6, horizon=100, workers=1, out=tmp_path, resume=True)
    assert str(caught.value) == (
        f"{tmp_path / 'rep-5.json'} is not a replication file of this run (they are named like "
        "rep-000012.json); move it out of the directory")
    os.unlink(tmp_path / "rep-5.json")
    # well named, but not written by this run: no checksum recorded for it
    shutil.copy(tmp_path / "rep-000001.json", tmp_path / "rep-000005.json")
    with pytest.raises(StoreError) as caught:
        replicate(s, reps=6, horizon=100, workers=1, out=tmp_path, resume=True)
    assert str(caught.value) == (
        f"{tmp_path / 'rep-000005.json'} was not saved by the run described by manifest.json "
        "(no checksum recorded for it); delete it to have that replication run again")


def test_checksums_of_a_killed_run_are_read_from_its_journal(net, tmp_path, monkeypatch):
    # the journal holds one line per saved file; a killed process never folds it into the
    # manifest, the next open does
    from desim import run_replication

    s = net(DESK)
    settings = dict(horizon=100.0, warmup=50.0, seed=3, interval=None, max_jobs=None,
                    record_waits=False)
    store = RunStore.open(tmp_path, s, settings)
    runs = [run_replication(s, r, **settings) for r in range(2)]
    for run in runs:
        store.save(run)
    # as the kernel does for a killed process: its files closed, its lock gone, nothing folded
    os.close(store._journal)
    store._lock.release()
    assert json.loads((tmp_path / MANIFEST).read_text())["checksums"] == {}
    journal = (tmp_path / store_module.JOURNAL).read_text().splitlines()
    assert [line.split()[1] for line in journal] == ["rep-000000.json", "rep-000001.json"]
    with open(tmp_path / store_module.JOURNAL, "a") as f:
        f.write("0123abc")  # a line torn by the kill: ignored
    replicate_module = importlib.import_module("desim.replicate")
    done = []
    real = replicate_module.run_replication
    monkeypatch.setattr(replicate_module, "run_replication",
                        lambda sc, r, **kw: done.append(r) or real(sc, r, **kw))
    resumed = replicate(s, reps=3, horizon=100, workers=1, out=tmp_path, resume=True)
    assert done == [2]
    monkeypatch.undo()
    assert resumed.to_json() == replicate(s, reps=3, horizon=100, workers=1).to_json()
    assert sorted(json.loads((tmp_path / MANIFEST).read_text())["checksums"]) == [
        "rep-000000.json", "rep-000001.json", "rep-000002.json"]
    assert not (tmp_path / store_module.JOURNAL).exists()


def test_a_kill_between_checksum_and_file_leaves_a_replication_to_run_again(net, tmp_path,
                                                                           monkeypatch):
    s = net(DESK)
    real = store_module.write_atomic

    def dies_on_the_third_file(path, text):
        if pathlib.Path(path).name == "rep-000002.json":
            raise KeyboardInterrupt  # the checksum is in the manifest, the file is not written
        return real(path, text)

    monkeypatch.setattr(store_module, "write_atomic", dies_on_the_third_file)
    with pytest.raises(KeyboardInterrupt):
        replicate(s, reps=4, horizon=100, workers=1, out=tmp_path)
    monkeypatch.undo()
    assert "rep-000002.json" in json.loads((tmp_path / MANIFEST).read_text())["checksums"]
    resumed = replicate(s, reps=4, horizon=100, workers=1, out=tmp_path, resume=True)
    assert resumed.to_json() == replicate(s, reps=4, horizon=100, workers=1).to_json()


def test_a_run_folder_of_the_earlier_layout_is_refused(net, tmp_path):
    s = net(DESK)
    replicate(s, reps=2, horizon=100, workers=1, out=tmp_path)
    manifest = json.loads((tmp_path / MANIFEST).read_text())
    manifest["format"] = 1
    del manifest["checksums"]
    (tmp_path / MANIFEST).write_text(json.dumps(manifest))
    with pytest.raises(StoreError, match="holds a run with file layout 1, this run has file "
                                         f"layout {FORMAT}"):
        replicate(s, reps=2, horizon=100, workers=1, out=tmp_path, resume=True)


# --- the file system says no ---------------------------------------------------------------------


def test_a_folder_that_cannot_be_made_is_a_store_error(net, tmp_path):
    (tmp_path / "file").write_text("x\n")
    with pytest.raises(StoreError, match=f"cannot write {tmp_path / 'file' / 'run'}: "):
        replicate(net(DESK), reps=2, horizon=100, workers=1, out=tmp_path / "file" / "run")
    target = tmp_path / "gone"
    (tmp_path / "link").symlink_to(target)
    with pytest.raises(StoreError, match="is a symbolic link to nothing"):
        replicate(net(DESK), reps=2, horizon=100, workers=1, out=tmp_path / "link")


def test_a_full_disk_while_saving_is_a_store_error(net, tmp_path, monkeypatch):
    import errno

    s = net(DESK)
    real = store_module.write_atomic

    def full(path, text):
        if pathlib.Path(path).name.startswith("rep-"):
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return real(path, text)

    monkeypatch.setattr(store_module, "write_atomic", full)
    with pytest.raises(StoreError) as caught:
        replicate(s, reps=2, horizon=100, workers=1, out=tmp_path)
    assert str(caught.value) == f"cannot write {tmp_path / 'rep-000000.json'}: No space left on device"
    assert not (tmp_path / LOCK).exists()  # the lock went with the exception
