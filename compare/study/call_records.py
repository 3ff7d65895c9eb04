"""Call records of a simulated station, as a call centre's system would log them.

For tests of ``fluidgap fit`` (the round trip: simulate known distributions, write the
records, fit them) and for the invented demo records of the README. One replication of the
scenario is one day; each caller becomes one row with the times it arrived, was answered and
ended (hang-up after the talk) or gave up, read from the engine's trace
(:class:`desim.engine.Engine`). Times in the scenario's time unit, or as ISO 8601 timestamps
from a given first day and clock time.
"""

from __future__ import annotations

import numpy as np

__all__ = ["station_records"]


def station_records(scenario, days: int, *, source: str = "calls", answer: str = "answer",
                    close: str = "close", queue: str = "queue", horizon: float | None = None,
                    first_day: str | None = None, day_start: float = 0.0,
                    seconds_per_unit: float = 60.0):
    """A pandas DataFrame of the records of ``days`` replications of ``scenario`` (replication
    d is day d), one row per caller arriving from ``source``: ``arrival``, ``answered`` (the
    firing of ``answer``), ``ended`` (the firing of ``close``) and ``abandoned`` (patience ran
    out at ``queue``); empty where it did not happen; callers still inside at the horizon are
    left out. With ``first_day`` (``"2026-03-02"``) the times are timestamps: day d's time t is
    ``first_day`` + d days + ``day_start`` + t (``day_start`` and t in the time unit of
    ``seconds_per_unit`` seconds); otherwise numbers (day d shifted by d × the horizon)."""
    import pandas as pd

    from desim.run import run_replication

    horizon = float(scenario.run.horizon if horizon is None else horizon)
    frames = []
    for d in range(days):
        trace: list = []
        run_replication(scenario, d, horizon=horizon, warmup=0.0, trace=trace)
        arrival, answered, ended, abandoned = {}, {}, {}, {}
        for t, what, name, job in trace:
            if what == "arrive" and name == source:
                arrival[job] = t
            elif what == "fire" and name == answer:
                answered[job] = t
            elif what == "fire" and name == close:
                ended[job] = t
            elif what == "abandon" and name == queue:
                abandoned[job] = t
        ids = [j for j in arrival if j in ended or j in abandoned]
        frame = pd.DataFrame({
            "arrival": [arrival[j] for j in ids],
            "answered": [answered.get(j, np.nan) for j in ids],
            "ended": [ended.get(j, np.nan) for j in ids],
            "abandoned": [abandoned.get(j, np.nan) for j in ids]})
        if first_day is None:
            frame += d * horizon
        else:
            base = pd.Timestamp(first_day) + pd.Timedelta(days=d)
            for col in frame:
                secs = (frame[col] + day_start) * seconds_per_unit
                stamps = base + pd.to_timedelta(secs, unit="s")
                frame[col] = stamps.dt.strftime("%Y-%m-%dT%H:%M:%S.%f").str[:-3].where(
                    frame[col].notna(), "")
        frames.append(frame)
    return pd.concat(frames, ignore_index=True)
