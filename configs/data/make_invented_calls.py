"""Write configs/data/invented-calls.csv: invented call records, simulated from
configs/data/invented-station.yaml (three mornings from 07:00, one replication each).

    .venv/bin/python configs/data/make_invented_calls.py
"""

from __future__ import annotations

import pathlib
import warnings

from compare.study.call_records import station_records
from fluid import load_scenario

HERE = pathlib.Path(__file__).resolve().parent

if __name__ == "__main__":
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # (the profile ends before the horizon: meant so)
        scenario = load_scenario(HERE / "invented-station.yaml")
    records = station_records(scenario, scenario.run.replications, first_day="2026-03-02",
                              day_start=7 * 60.0)
    records.to_csv(HERE / "invented-calls.csv", index=False)
