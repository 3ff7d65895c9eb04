"""Output written whole or not at all (compare.present.swap, and write_report built on it).

A report folder is replaced by a complete new folder swapped in at once. The tests fail every
step of a write in turn (each file written, each rename, each fsync, the swap itself) and kill
the writing process at every step (a forked child that ends with ``os._exit`` there, so no
clean-up runs); each time the destination holds the old folder or the new one, whole, and after
the next write nothing is left behind. Both ways of swapping are tested: renameat2
RENAME_EXCHANGE, and the two renames used where it is missing.
"""

from __future__ import annotations

import os
import pathlib

import pandas as pd
import pytest

import compare.present.swap as swap
from compare.present.html import ReportFolderError, write_report

OLD = {"report.html": b"<old page>", "result.json": b'{"v": 1}', "per_interval.csv": b"old\n",
       "gaps.csv": b"old gaps\n"}
NEW = {"report.html": b"<new page>", "result.json": b'{"v": 2}', "gaps.csv": b"new gaps\n"}


def contents(folder: pathlib.Path) -> dict[str, bytes] | None:
    if not folder.is_dir():
        return None
    return {p.name: p.read_bytes() for p in folder.iterdir()}


def hidden_siblings(folder: pathlib.Path) -> list[str]:
    return sorted(p.name for p in folder.parent.iterdir() if p.name.startswith(".fluidgap-"))


@pytest.fixture(params=["exchange", "two renames"])
def mode(request, monkeypatch):
    if request.param == "two renames":
        monkeypatch.setattr(swap, "_exchange", lambda a, b: False)
    return request.param


class Steps:
    """Every step of a write counted; step ``fail_at`` calls ``on_fail`` instead."""

    NAMES = ("_write", "_fsync_dir", "_exchange")

    def __init__(self, monkeypatch, fail_at: int, on_fail):
        self.count = 0
        self.fail_at = fail_at
        self.on_fail = on_fail
        for name in self.NAMES:
            monkeypatch.setattr(swap, name, self.wrap(getattr(swap, name)))
        for name in ("replace", "rename", "mkdir"):
            monkeypatch.setattr(os, name, self.wrap(getattr(os, name)))

    def wrap(self, real):
        def step(*args, **kwargs):
            here = self.count
            self.count += 1
            if here == self.fail_at:
                self.on_fail()
            return real(*args, **kwargs)
        return step


def raise_injected():
    raise OSError("injected failure")


def test_an_interrupted_swap_leaves_the_old_or_the_new_folder_whole(tmp_path, mode,
                                                                      monkeypatch):
    report = tmp_path / "report"
    seen = set()
    for i in range(100):
        swap.replace_folder(report, OLD.items())
        with monkeypatch.context() as m:
            steps = Steps(m, i, raise_injected)
            try:
                swap.replace_folder(report, NEW.items())
            except OSError as exc:
                assert str(exc) == "injected failure"
        got = contents(report)
        assert got in (OLD, NEW), (i, got)
        seen.add("old" if got == OLD else "new")
        assert hidden_siblings(report) == [], i
        if steps.count <= i:  # the write has fewer steps: each one was failed once
            break
    assert i > 5 and seen == {"old", "new"}


def test_a_kill_at_any_step_leaves_a_whole_folder_and_the_next_write_cleans_up(tmp_path, mode,
                                                                             monkeypatch):
    report = tmp_path / "report"
    outcomes = set()
    for i in range(100):
        swap.replace_folder(report, OLD.items())
        pid = os.fork()
        if pid == 0:  # the writer, killed at step i (os._exit: no finally, no clean-up)
            try:
                Steps(monkeypatch, i, lambda: os._exit(9))
                swap.replace_folder(report, NEW.items())
            finally:
                os._exit(0)
        _, status = os.waitpid(pid, 0)
        killed = os.waitstatus_to_exitcode(status) == 9  # else it had fewer than i + 1 steps
        got = contents(report)
        if got is None:
            # only between the two renames: the old folder waits aside, whole
            assert mode == "two renames"
            aside = [p for p in report.parent.iterdir() if p.name.endswith(".old")]
            assert [contents(p) for p in aside] == [OLD]
            swap.clean_leftovers(report)  # what the next write does first: put it back
            got = contents(report)
            outcomes.add("missing")
        assert got in (OLD, NEW), (i, got)
        outcomes.add("old" if got == OLD else "new")
        swap.replace_folder(report, NEW.items())  # the next write
        assert contents(report) == NEW
        assert hidden_siblings(report) == [], i
        if not killed:
            break
    assert i > 5
    assert outcomes == ({"old", "new", "missing"} if mode == "two renames" else {"old", "new"})


def test_leftovers_of_a_running_process_are_not_touched(tmp_path):
    report = tmp_path / "report"
    mine = report.parent / f".fluidgap-{swap._tag(report)}-{os.getppid()}-0a0a0a0a.new"
    mine.mkdir()  # as if our parent process (alive) were building a report there
    swap.replace_folder(report, NEW.items())
    assert mine.is_dir()


def test_the_new_folder_keeps_the_old_ones_permissions_and_a_link_is_followed(tmp_path):
    real = tmp_path / "real"
    swap.replace_folder(real, OLD.items())
    os.chmod(real, 0o750)
    link = tmp_path / "link"
    link.symlink_to(real)
    swap.replace_folder(link, NEW.items())
    assert link.is_symlink() and contents(real) == NEW
    assert oct(real.stat().st_mode & 0o777) == oct(0o750)


def test_replace_file_interrupted_at_every_step(tmp_path, monkeypatch):
    path = tmp_path / "figure.png"
    for i in range(20):
        path.write_bytes(b"old")
        with monkeypatch.context() as m:
            steps = Steps(m, i, raise_injected)
            try:
                swap.replace_file(path, b"new")
            except OSError as exc:
                assert str(exc) == "injected failure"
        assert path.read_bytes() in (b"old", b"new")
        assert sorted(p.name for p in tmp_path.iterdir()) == ["figure.png"]
        if steps.count <= i:
            break
    assert path.read_bytes() == b"new" and i > 1


# --- the report writer ----------------------------------------------------------------------------


def _report(directory, tables, **kw):
    return write_report(directory, title="t", summary_lines=[], tables=tables, figures={},
                        json_doc={}, caution="", **kw)


def test_nothing_of_an_earlier_report_survives(tmp_path):
    table = pd.DataFrame({"a": [1.0]})
    _report(tmp_path / "r", {"gaps": table, "per_interval": table})
    (tmp_path / "r" / ".report.html.abc123.tmp").write_text("left by an older writer\n")
    files = _report(tmp_path / "r", {"gaps": table})
    assert sorted(p.name for p in files.directory.iterdir()) == [
        "gaps.csv", "report.html", "result.json"]
    assert hidden_siblings(tmp_path / "r") == []


@pytest.mark.parametrize("layout, message", [
    ({"notes.txt": "mine"}, r"holds files that are not part of a fluidgap report \(notes.txt\)"),
    ({"data.csv": "1,2"}, "holds files but no report.html or result.json"),
    ({"report.html": "x", "manifest.json": "{}"}, r"not part of a fluidgap report "
                                                   r"\(manifest.json\)"),
])
def test_a_folder_holding_anything_but_a_report_is_never_replaced(tmp_path, layout, message):
    folder = tmp_path / "mine"
    folder.mkdir()
    for name, text in layout.items():
        (folder / name).write_text(text)
    with pytest.raises(ReportFolderError, match=message):
        _report(folder, {"gaps": pd.DataFrame({"a": [1.0]})})
    assert {p.name: p.read_text() for p in folder.iterdir()} == layout
