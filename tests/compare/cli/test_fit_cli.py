"""``fluidgap fit`` on the command line: the scenario written, the report, and bad input
(one line naming the file and the column or line, exit code 2, nothing written)."""

from __future__ import annotations

import json
import pathlib
import warnings

import pytest

from compare.cli.main import main
from fluid.loading import load_scenario

ROOT = pathlib.Path(__file__).resolve().parents[3]

#: Invented records (times in minutes as plain numbers): four answered, two gave up.
RECORDS = """arrival,answered,ended,abandoned
0.5,0.5,3.5,
1.0,1.2,2.0,
2.0,,,2.5
4.0,4.5,9.0,
6.0,,,7.5
8.0,8.0,8.4,
"""


def run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def _write(tmp_path, text, name="calls.csv"):
    path = tmp_path / name
    path.write_text(text)
    return path


def test_fit_writes_a_scenario_that_loads(capsys, tmp_path):
    records = _write(tmp_path, RECORDS)
    out_file = tmp_path / "fitted.yaml"
    code, out, err = run(capsys, "fit", records, "--step", 5, "--write-scenario", out_file,
                         "--json")
    assert code == 0, err
    doc = json.loads(out)
    assert doc["written"] == str(out_file)
    rec = doc["records"]
    assert (rec["calls"], rec["served"], rec["abandoned"]) == (6, 4, 2)
    # profile from 0 in steps of 5: arrivals at 0.5, 1, 2, 4 | 6, 8 -> rates 4/5, 2/5
    assert rec["profile"]["counts"] == [4, 2]
    assert rec["profile"]["rates"] == pytest.approx([0.8, 0.4])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        s = load_scenario(out_file)
    assert s.places["talk"].hold.name == rec["hold"]["chosen"]
    assert out_file.read_text() == doc["scenario"]
    # the most calls in talk at once: [0.5, 3.5] and [1.2, 2.0] overlap -> 2
    assert s.pools["agents"].staff == 2


def test_fit_report_has_the_figures(capsys, tmp_path):
    records = _write(tmp_path, RECORDS)
    code, out, err = run(capsys, "fit", records, "--step", 5, "--report", tmp_path / "rep")
    assert code == 0, err
    html = (tmp_path / "rep" / "report.html").read_text()
    assert html.count("<img") == 3  # profile, hold QQ, patience Kaplan-Meier
    assert "(write the fitted scenario with --write-scenario FILE)" in out


def test_fit_into_an_existing_scenario(capsys, tmp_path):
    records = _write(tmp_path, RECORDS)
    out_file = tmp_path / "filled.yaml"
    code, out, err = run(capsys, "fit", records, "--step", 5, "--into",
                         ROOT / "configs" / "single-station.yaml", "--queue", "queue",
                         "--hold", "talk", "--write-scenario", out_file)
    assert code == 0, err
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        s = load_scenario(out_file)
        original = load_scenario(ROOT / "configs" / "single-station.yaml")
    assert s.pools["agents"].staff == original.pools["agents"].staff  # kept
    assert s.sources["calls"].arrivals.rates == pytest.approx((0.8, 0.4))
    assert s.run == original.run


@pytest.mark.parametrize("text, flags, words", [
    ("", (), ["calls.csv", "empty"]),
    ("arrival,answered,ended\n", (), ["calls.csv", "no rows"]),
    ("start,answered,ended\n1,1,2\n", (), ["calls.csv", "column arrival", "--arrival"]),
    ("arrival,answered,ended\n1,1,2\nsoon,3,4\n", (), ["calls.csv", "line 3",
                                                       "column arrival"]),
    ("arrival,answered,ended\n1,1,2\n2,3,2.5\n", (), ["calls.csv", "line 3",
                                                      "column ended", "negative hold"]),
    ("arrival,answered,ended\n1,0.5,2\n", (), ["calls.csv", "line 2", "column answered",
                                               "negative wait"]),
    ("arrival,answered,ended\n1,1,2\n2026-03-02T07:00,1,2\n", (), ["calls.csv", "line 3"]),
    ("arrival,answered,ended\n2026-03-02T07:00,2026-03-02T07:01,2026-03-02T07:02\n"
     "2026-03-02T07:00,2026-03-02T07:01,tomorrow\n", (), ["calls.csv", "line 3",
                                                          "column ended", "ISO 8601"]),
    ("arrival,answered,ended\n2026-03-02T07:00,1,2\n", (), ["calls.csv", "line 2",
                                                           "column answered"]),
    ("a,b\n1\n", (), ["calls.csv", "line 2", "cells"]),
])
def test_bad_records_exit_2_with_one_line_and_nothing_written(capsys, tmp_path, text, flags,
                                                              words):
    records = _write(tmp_path, text)
    out_file = tmp_path / "fitted.yaml"
    code, out, err = run(capsys, "fit", records, "--write-scenario", out_file, *flags)
    assert code == 2
    assert out == "" and err.count("\n") == 1
    for w in words:
        assert w in err
    assert not out_file.exists()


def test_missing_file_and_bad_flags(capsys, tmp_path):
    code, out, err = run(capsys, "fit", tmp_path / "none.csv")
    assert code == 2 and "none.csv" in err and "no such file" in err
    records = _write(tmp_path, RECORDS)
    code, out, err = run(capsys, "fit", records, "--queue", "queue")
    assert code == 2 and "--into" in err
    code, out, err = run(capsys, "fit", records, "--write-scenario", records)
    assert code == 2 and "input" in err
    code, out, err = run(capsys, "fit", records, "--day-start", "25:00")
    assert code == 2 and "--day-start" in err


def test_counts_wide_layout(capsys, tmp_path):
    # invented counts of three days in three intervals of 10 min
    counts = _write(tmp_path, "day,08:00,08:10,08:20\nmon,10,20,30\ntue,12,18,36\n"
                    "wed,8,22,24\n", "counts.csv")
    code, out, err = run(capsys, "fit", counts, "--counts", "--step", 10, "--json")
    assert code == 0, err
    doc = json.loads(out)["counts"]
    assert doc["mean_counts"] == pytest.approx([10, 20, 30])
    assert doc["rates"] == pytest.approx([1, 2, 3])
    # daily totals 60, 66, 54: mean 60, sample variance (0 + 36 + 36) / 2 = 36 (by hand)
    assert doc["total_dispersion"] == pytest.approx(36 / 60)
    assert doc["intervals"] == ["08:00", "08:10", "08:20"]


def test_counts_long_layout_with_its_own_column_names(capsys, tmp_path):
    counts = _write(tmp_path, "date,slot,n\n1,0,4\n1,1,6\n2,0,6\n2,1,10\n", "long.csv")
    code, out, err = run(capsys, "fit", counts, "--counts", "--day", "date", "--interval",
                         "slot", "--count", "n", "--step", 2, "--json")
    assert code == 0, err
    doc = json.loads(out)["counts"]
    assert doc["mean_counts"] == pytest.approx([5, 8])
    code, out, err = run(capsys, "fit", counts, "--counts", "--day", "date", "--interval",
                         "slot", "--count", "n")
    assert code == 2 and "--step" in err
    bad = _write(tmp_path, "date,slot,n\n1,0,4\n1,1,6\n2,0,6\n", "gap.csv")
    code, out, err = run(capsys, "fit", bad, "--counts", "--day", "date", "--interval",
                         "slot", "--count", "n", "--step", 2)
    assert code == 2 and "no count for interval" in err
    neg = _write(tmp_path, "date,slot,n\n1,0,4\n2,0,-1\n", "neg.csv")
    code, out, err = run(capsys, "fit", neg, "--counts", "--day", "date", "--interval",
                         "slot", "--count", "n", "--step", 2)
    assert code == 2 and "line 3, column n" in err


def test_hostile_files_end_fast_with_one_line(capsys, tmp_path):
    import os

    code, out, err = run(capsys, "fit", "/dev/zero")
    assert code == 2 and "a device" in err and out == ""
    fifo = tmp_path / "pipe.csv"
    os.mkfifo(fifo)
    code, out, err = run(capsys, "fit", fifo)  # opened without blocking, refused at once
    assert code == 2 and "FIFO" in err
    records = _write(tmp_path, RECORDS)
    code, out, err = run(capsys, "fit", records, "--max-file-values", 3)
    assert code == 2 and "--max-file-values" in err
    long_line = _write(tmp_path, "arrival\n" + "1" * 70_000 + "\n", "long.csv")
    code, out, err = run(capsys, "fit", long_line)
    assert code == 2 and "line 2" in err and "longer than" in err
    binary = tmp_path / "binary.csv"
    binary.write_bytes(b"arrival\n\xff\xfe\n")
    code, out, err = run(capsys, "fit", binary)
    assert code == 2 and "UTF-8" in err
    code, out, err = run(capsys, "fit", records, "--step", "1e-9")
    assert code == 2 and "--max-intervals" in err


def test_counts_long_layout_with_timestamps(capsys, tmp_path):
    # invented 15-minute counts of two days; the step is the spacing of the timestamps
    rows = ["start,calls"]
    for day, counts in (("2026-03-02", (3, 5, 7)), ("2026-03-03", (5, 9, 5))):
        for i, n in enumerate(counts):
            rows.append(f"{day}T08:{15 * i:02d}:00,{n}")
    counts = _write(tmp_path, "\n".join(rows) + "\n", "stamped.csv")
    code, out, err = run(capsys, "fit", counts, "--counts", "--count", "calls", "--timestamp",
                         "start", "--json")
    assert code == 0, err
    doc = json.loads(out)["counts"]
    assert doc["step"] == 15.0 and doc["start"] == 480.0 and doc["days"] == 2
    assert doc["intervals"] == ["08:00", "08:15", "08:30"]
    assert doc["mean_counts"] == pytest.approx([4, 7, 6])
    assert doc["rates"] == pytest.approx([4 / 15, 7 / 15, 6 / 15])
    # daily totals 15 and 19: mean 17, sample variance 8 (by hand)
    assert doc["total_dispersion"] == pytest.approx(8 / 17)
