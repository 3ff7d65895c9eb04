"""Every destination (--report, --out, --png) is checked before anything is computed: a bad one
is exit 2 with one line naming the flag and the path, nothing on stdout, and no replication
run (the runs asked for here would take hours: a replication starting would fail the test at
once). --png never overwrites an input of the run, and a report folder never swallows one.

A read-only file system and a full disk are real ones where the system allows it (a tmpfs
mounted in a user namespace with ``unshare -rm``); the permission case also runs as a plain
user (chmod). See compare/cli/destinations.py.
"""

from __future__ import annotations

import errno
import importlib
import json
import os
import pathlib
import shutil
import subprocess
import sys
import textwrap

import pytest

from compare.cli.main import main

ROOT = pathlib.Path(__file__).resolve().parents[3]
SINGLE = str(ROOT / "configs" / "single-station.yaml")
HUGE = ["--reps", "1000000000", "--quiet"]
replicate_module = importlib.import_module("desim.replicate")


@pytest.fixture(autouse=True)
def no_replication(monkeypatch):
    def refuse(*args, **kwargs):
        raise AssertionError("a replication ran before the destinations were checked")

    monkeypatch.setattr(replicate_module, "run_replication", refuse)


def run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def refused(capsys, *argv) -> str:
    code, out, err = run(capsys, *argv)
    assert (code, out) == (2, ""), err
    assert err.count("\n") == 1 and "Traceback" not in err
    return err.strip()


LONG = "x" * 301


@pytest.mark.parametrize("command", [["compare", SINGLE, *HUGE], ["scale", SINGLE, *HUGE]])
def test_bad_report_folders(capsys, tmp_path, command):
    cmd = f"fluidgap {command[0]}"
    (tmp_path / "file").write_text("x\n")
    (tmp_path / "dangling").symlink_to(tmp_path / "nowhere")
    (tmp_path / "mine").mkdir()
    (tmp_path / "mine" / "notes.txt").write_text("mine\n")
    cases = {
        tmp_path / "file": "is a file, not a folder",
        tmp_path / "dangling": f"is a symbolic link to nothing ({tmp_path / 'nowhere'})",
        tmp_path / LONG: f"the name '{'x' * 37}...' is 301 bytes, longer than the 255 the file "
                         "system allows",
        tmp_path / "file" / "sub": f"{tmp_path / 'file'} is a file, so the folder cannot be made",
        tmp_path / "mine": "holds files that are not part of a fluidgap report (notes.txt) and "
                           "would be lost: use a new or empty folder",
    }
    for path, problem in cases.items():
        assert refused(capsys, *command, "--report", path) == f"{cmd}: --report {path}: {problem}"
    assert (tmp_path / "mine" / "notes.txt").read_text() == "mine\n"


def test_bad_run_folders(capsys, tmp_path):
    (tmp_path / "file").write_text("x\n")
    (tmp_path / "dangling").symlink_to(tmp_path / "nowhere")
    cases = {
        tmp_path / "file": "is a file, not a folder",
        tmp_path / "dangling": f"is a symbolic link to nothing ({tmp_path / 'nowhere'})",
        tmp_path / "ok" / LONG: f"the name '{'x' * 37}...' is 301 bytes, longer than the 255 "
                                "the file system allows",
    }
    for path, problem in cases.items():
        assert refused(capsys, "simulate", SINGLE, *HUGE, "--out", path) == (
            f"fluidgap simulate: --out {path}: {problem}")
    assert not (tmp_path / "ok").exists()


def test_bad_png_files(capsys, tmp_path):
    cases = {
        tmp_path / "missing" / "x.png": f"the folder {tmp_path / 'missing'} does not exist",
        tmp_path: "is a folder, not a file",
        tmp_path / (LONG + ".png"): f"the name '{'x' * 37}...' is 305 bytes, longer than the 255 "
                                    "the file system allows",
        pathlib.Path("/dev/null"): "is not a regular file",
    }
    for path, problem in cases.items():
        assert refused(capsys, "staff", SINGLE, *HUGE, "--png", path) == (
            f"fluidgap staff: --png {path}: {problem}")


def test_png_never_overwrites_an_input(capsys, tmp_path):
    scenario = tmp_path / "desk.yaml"
    scenario.write_text(textwrap.dedent("""
        name: desk with recorded arrivals (invented)
        time_unit: min
        run: {horizon: 100, warmup: 10, replications: 2, seed: 1}
        sources:
          calls: {trace: arrivals.txt, into: queue}
        pools:
          agents: 2
        places:
          queue: {}
          talk: {hold: {dist: empirical, file: holds.txt}}
        transitions:
          answer: {in: [queue, agents], out: [talk]}
          close: {in: [talk], out: [agents]}
    """))
    (tmp_path / "arrivals.txt").write_text("1\n2\n3\n")
    (tmp_path / "holds.txt").write_text("0.5\n1.5\n")
    before = {p.name: p.read_bytes() for p in tmp_path.iterdir()}
    (tmp_path / "link.png").symlink_to(tmp_path / "holds.txt")
    for target in ("desk.yaml", "arrivals.txt", "holds.txt", "link.png"):
        path = tmp_path / target
        real = os.path.realpath(path)
        assert refused(capsys, "staff", scenario, *HUGE, "--png", path) == (
            f"fluidgap staff: --png {path}: is an input of this run ({real}); it is never "
            "overwritten")
    # a report folder holding an input would lose it when replaced whole
    assert refused(capsys, "phases", scenario, "--axes", "agents", "--report", tmp_path) == (
        f"fluidgap phases: --report {tmp_path}: holds files that are not part of a fluidgap "
        "report (arrivals.txt, desk.yaml, holds.txt, ...) and would be lost: use a new or empty "
        "folder")
    (tmp_path / "link.png").unlink()
    assert {p.name: p.read_bytes() for p in tmp_path.iterdir()} == before


def test_the_report_folder_holds_no_other_destination(capsys, tmp_path):
    report = tmp_path / "report"
    assert refused(capsys, "compare", SINGLE, *HUGE, "--report", report,
                   "--out", report / "runs") == (
        f"fluidgap compare: --out {report / 'runs'} and --report {report} overlap (the report "
        "folder is replaced whole): keep them apart")
    assert refused(capsys, "staff", SINGLE, *HUGE, "--report", report,
                   "--png", report / "f.png").startswith("fluidgap staff: --png ")
    assert not report.exists()


@pytest.mark.skipif(os.geteuid() == 0, reason="root writes into read-only folders")
def test_a_folder_without_write_permission(capsys, tmp_path):
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o555)
    try:
        for flag, path in (("--report", locked / "r"), ("--out", locked / "o"),
                           ("--out", locked)):
            assert refused(capsys, "compare", SINGLE, *HUGE, flag, path) == (
                f"fluidgap compare: {flag} {path}: cannot write in {locked}: Permission denied")
    finally:
        locked.chmod(0o755)


# --- a read-only file system and a full disk: tmpfs in a user namespace -------------------------

def _unshare_works() -> bool:
    if shutil.which("unshare") is None:
        return False
    try:
        return subprocess.run(["unshare", "-rm", "true"], capture_output=True,
                              timeout=30).returncode == 0
    except (OSError, subprocess.TimeoutExpired):
        return False


def in_namespace(mount: str, fill: bool, argv: list[str]) -> subprocess.CompletedProcess:
    """Run the command with a tmpfs mounted at ``mount`` (read-only, or full when ``fill``)."""
    setup = (f"mount -t tmpfs -o size=64k none {mount} && "
             f"dd if=/dev/zero of={mount}/fill bs=4096 count=64 2>/dev/null; "
             if fill else f"mount -t tmpfs -o size=64k,ro none {mount} && ")
    script = setup + "exec " + " ".join(f"'{a}'" for a in [sys.executable, "-m", "compare.cli",
                                                            *argv])
    return subprocess.run(["unshare", "-rm", "sh", "-c", script], cwd=ROOT, capture_output=True,
                          text=True, timeout=300)


@pytest.mark.skipif(not _unshare_works(), reason="needs unshare -rm (user namespaces)")
@pytest.mark.parametrize("fill, problem", [(False, "Read-only file system"),
                                           (True, "No space left on device")])
def test_a_read_only_or_full_file_system(tmp_path, fill, problem):
    mount = tmp_path / "mnt"
    mount.mkdir()
    for flag, path, where in (("--report", mount / "report", mount),
                              ("--out", mount / "runs", mount),
                              ("--png", mount / "f.png", mount)):
        command = "staff" if flag == "--png" else "compare"
        proc = in_namespace(str(mount), fill, [command, SINGLE, *HUGE, flag, str(path)])
        assert (proc.returncode, proc.stdout) == (2, ""), proc.stderr
        assert proc.stderr == (f"fluidgap {command}: {flag} {path}: cannot write in {where}: "
                               f"{problem}\n")


# --- a write that fails after the run all the same --------------------------------------------------


def test_a_report_that_cannot_be_written_after_the_run_is_one_line(capsys, tmp_path,
                                                                  monkeypatch):
    import compare.present.html as html_module

    def full(directory, contents):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(html_module, "replace_folder", full)
    report = tmp_path / "report"
    assert refused(capsys, "staff", SINGLE, "--fluid-only", "--report", report) == (
        f"fluidgap staff: --report {report}: cannot write (No space left on device)")


def test_a_good_report_folder_is_replaced_whole(capsys, tmp_path):
    report = tmp_path / "report"
    for _ in range(2):
        code, out, err = run(capsys, "staff", SINGLE, "--fluid-only", "--json",
                             "--report", report, "--png", tmp_path / "plans.png")
        assert code == 0, err
    assert sorted(p.name for p in report.iterdir()) == [
        "fluid_plan.csv", "report.html", "result.json", "staffing.png"]
    assert json.loads((report / "result.json").read_text()) == json.loads(out)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["plans.png", "report"]
