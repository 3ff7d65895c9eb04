"""``simulate --csv DIR``, ``--report DIR``, ``--per-replication`` and ``compare --csv DIR``:
tidy tables (one row per figure), Parquet beside the CSV when pyarrow is installed, folders
swapped in whole and checked before anything runs."""

from __future__ import annotations

import json
import math
import pathlib

import numpy as np
import pandas as pd
import pytest

from compare.cli.main import main
from compare.present import tidy

ROOT = pathlib.Path(__file__).resolve().parents[3]
STATION = str(ROOT / "configs" / "single-station.yaml")
SHORT = ["--reps", "3", "--horizon", "200", "--warmup", "20", "--workers", "1", "--quiet"]


def run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def read(path):
    return pd.read_csv(path, dtype={"interval": "Int64"}, keep_default_na=False,
                       na_values={"interval": [""], "mean": [""], "low": [""], "high": [""],
                                  "value": [""]})


def test_simulate_csv_is_tidy_and_matches_the_json(capsys, tmp_path, monkeypatch):
    monkeypatch.setattr(tidy, "parquet_available", lambda: False)
    out = tmp_path / "tables"
    code, text, err = run(capsys, "simulate", STATION, *SHORT, "--interval", "50", "--csv", out,
                          "--json")
    assert code == 0, err
    doc = json.loads(text)
    assert doc["csv"] == str(out)
    assert sorted(p.name for p in out.iterdir()) == ["estimates.csv", "result.json"]
    est = read(out / "estimates.csv")
    assert list(est.columns) == tidy.ESTIMATE_COLUMNS
    # one row per figure: no (kind, name, metric, interval) twice
    assert not est.duplicated(["kind", "name", "metric", "interval"]).any()
    row = est[(est.kind == "place") & (est.name == "queue") & (est.metric == "wait")].iloc[0]
    assert pd.isna(row.interval)
    assert row["mean"] == doc["places"]["queue"]["wait"]["mean"]
    assert row["n"] == doc["places"]["queue"]["wait"]["n"] == 3
    per = est[est.interval.notna()]
    assert sorted(per.interval.unique()) == [0, 1, 2, 3]  # 200 / 50 intervals, from time 0
    arrivals = per[(per.metric == "arrivals")].sort_values("interval")
    assert arrivals.kind.unique().tolist() == ["total"]
    first = [r for r in doc["intervals"] if r["metric"] == "arrivals"][0]
    assert arrivals.iloc[0]["mean"] == first["mean"]
    assert json.loads((out / "result.json").read_text())["replications"] == 3


def test_per_replication_values(capsys, tmp_path, monkeypatch):
    monkeypatch.setattr(tidy, "parquet_available", lambda: False)
    out = tmp_path / "t"
    code, _, err = run(capsys, "simulate", STATION, *SHORT, "--csv", out, "--per-replication")
    assert code == 0, err
    per = read(out / "per_replication.csv")
    assert list(per.columns) == tidy.PER_REPLICATION_COLUMNS
    waits = per[(per.name == "queue") & (per.metric == "wait")].sort_values("replication")
    assert waits.replication.tolist() == [0, 1, 2]
    est = read(out / "estimates.csv")
    mean = est[(est.name == "queue") & (est.metric == "wait")]["mean"].iloc[0]
    assert math.isclose(waits.value.mean(), mean, rel_tol=1e-12)


def test_day_factor_per_replication(capsys, tmp_path, monkeypatch):
    monkeypatch.setattr(tidy, "parquet_available", lambda: False)
    out = tmp_path / "t"
    code, _, err = run(capsys, "simulate", STATION, *SHORT, "--csv", out, "--per-replication",
                       "--set", "sources.calls.random_rate.cv=0.2")
    assert code == 0, err
    per = read(out / "per_replication.csv")
    factors = per[(per.kind == "source") & (per.metric == "rate_factor")]
    assert len(factors) == 3 and (factors.value > 0).all()


def test_simulate_report(capsys, tmp_path, monkeypatch):
    monkeypatch.setattr(tidy, "parquet_available", lambda: False)
    out = tmp_path / "report"
    code, text, err = run(capsys, "simulate", STATION, *SHORT, "--interval", "50", "--report",
                          out, "--per-replication")
    assert code == 0, err
    assert sorted(p.name for p in out.iterdir()) == [
        "estimates.csv", "per_replication.csv", "report.html", "result.json"]
    page = (out / "report.html").read_text()
    assert "fluidgap simulate" in page and 'id="fig-waits"' in page
    assert 'id="fig-per_interval"' in page and "Decision support" in page
    assert "report written to" in text


def test_parquet_beside_the_csv(capsys, tmp_path):
    pytest.importorskip("pyarrow")
    out = tmp_path / "t"
    code, _, err = run(capsys, "simulate", STATION, *SHORT, "--interval", "50", "--csv", out,
                       "--per-replication")
    assert code == 0, err
    for name in ("estimates", "per_replication"):
        pq = pd.read_parquet(out / f"{name}.parquet")
        csv = read(out / f"{name}.csv")
        assert list(pq.columns) == list(csv.columns)
        assert str(pq["interval"].dtype) == "Int64"
        np.testing.assert_array_equal(pq["interval"].isna(), csv["interval"].isna())
        num = "value" if name == "per_replication" else "mean"
        np.testing.assert_array_equal(pq[num].to_numpy(float), csv[num].to_numpy(float))


def test_compare_csv(capsys, tmp_path, monkeypatch):
    monkeypatch.setattr(tidy, "parquet_available", lambda: False)
    out = tmp_path / "c"
    code, text, err = run(capsys, "compare", STATION, *SHORT, "--csv", out, "--json")
    assert code == 0, err
    assert sorted(p.name for p in out.iterdir()) == [
        "estimates.csv", "flags.csv", "gaps.csv", "result.json"]
    gaps = read(out / "gaps.csv")
    assert list(gaps.columns) == tidy.GAP_COLUMNS
    rate = gaps[(gaps.kind == "transition") & (gaps.name == "answer")].iloc[0]
    doc = json.loads(text)
    assert rate.fluid == doc["gaps"]["transitions"]["answer"]["fluid"]


def test_compare_csv_of_a_day_holds_the_wide_per_interval_table(capsys, tmp_path, monkeypatch):
    # issue 11 item 1: the wide per-interval table in the CSV too, one row per interval, the
    # same rows as the tidy per-interval estimates
    monkeypatch.setattr(tidy, "parquet_available", lambda: False)
    out = tmp_path / "d"
    day = str(ROOT / "configs" / "day-with-shifts.yaml")
    code, text, err = run(capsys, "compare", day, "--reps", "2", "--horizon", "120",
                          "--workers", "1", "--quiet", "--csv", out)
    assert code == 0, err
    assert "per_interval_day.csv" in {p.name for p in out.iterdir()}
    wide = pd.read_csv(out / "per_interval_day.csv")
    assert list(wide["clock"]) == ["08:00-08:30", "08:30-09:00", "09:00-09:30", "09:30-10:00"]
    est = read(out / "estimates.csv")
    sl = est[(est.metric == "service_level") & (est.name == "queue")].sort_values("interval")
    assert np.allclose(wide["service_level.queue"], sl["mean"].astype(float), equal_nan=True)


def test_foreign_folder_refused_before_running(capsys, tmp_path):
    out = tmp_path / "mine"
    out.mkdir()
    (out / "notes.txt").write_text("keep me")
    code, text, err = run(capsys, "simulate", STATION, *SHORT, "--csv", out)
    assert code == 2 and text == ""
    assert err.startswith(f"fluidgap simulate: --csv {out}: holds files that are not part")
    assert (out / "notes.txt").read_text() == "keep me"


def test_csv_and_report_apart(capsys, tmp_path):
    code, _, err = run(capsys, "simulate", STATION, *SHORT, "--report", tmp_path / "r",
                       "--csv", tmp_path / "r" / "t")
    assert code == 2 and "overlap" in err


def test_csv_rewritten_whole(capsys, tmp_path, monkeypatch):
    monkeypatch.setattr(tidy, "parquet_available", lambda: False)
    out = tmp_path / "t"
    assert run(capsys, "simulate", STATION, *SHORT, "--csv", out, "--per-replication")[0] == 0
    assert run(capsys, "simulate", STATION, *SHORT, "--csv", out)[0] == 0
    assert sorted(p.name for p in out.iterdir()) == ["estimates.csv", "result.json"]
