"""The result of a set of replications: estimates with confidence intervals, tables, warnings.

Built by :func:`desim.replicate` from the per-replication :class:`~desim.run.RunResult` objects,
kept in ``runs`` in replication order. Every figure is an :class:`~desim.estimate.Estimate` over the
replications (mean and a 95 % Student t interval on per-replication values, cut at the figure's
natural bounds: see :data:`BOUNDS`). Times are in the scenario's ``time_unit``; rates per that
unit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from .estimate import NON_NEGATIVE, SHARE, Estimate, interval_method
from .run import (ABANDONED_PREFIX, DEFAULT_PERCENTILES, SERVED_PREFIX, RunResult,
                  percentile_metric)
from .warmup import mser5

if TYPE_CHECKING:  # pandas is imported where a table is built (importing it is slow)
    import pandas as pd

__all__ = ["SimulationResult", "WarmupSuggestion", "summarize"]

#: Metrics reported (as estimates) per kind of node; per-replication values hold a few more.
PLACE_METRICS = ("wait", "abandoned", "queue", "served_within", "delayed")
#: Place metrics of the waits' distribution: the average speed of answer (mean wait of the jobs
#: taken) and the wait percentiles, ``wait_p50`` ... (those a run reports, by default
#: :data:`desim.run.DEFAULT_PERCENTILES`).
WAIT_METRICS = ("asa",)
SOURCE_METRICS = ("arrivals", "completed", "abandoned", "abandoned_share", "total_wait", "lost",
                  "callers_served", "callers_abandoned", "callers_lost", "rate_factor")
#: The per-caller outcome shares among SOURCE_METRICS, by outcome (the JSON's ``outcomes``).
CALLER_OUTCOMES = {"served": "callers_served", "abandoned": "callers_abandoned",
                   "lost": "callers_lost"}
#: Natural bounds of each figure, by kind and metric (per-interval metrics under "interval"):
#: shares, service levels and busy fractions lie in [0, 1]; counts, rates, waits and queues are
#: at least 0. Every interval is cut at them (see :class:`~desim.estimate.Estimate`).
BOUNDS = {
    "transitions": {"rate": NON_NEGATIVE},
    "places": {"wait": NON_NEGATIVE, "abandoned": SHARE, "queue": NON_NEGATIVE,
               "served_within": SHARE, "delayed": SHARE, "asa": NON_NEGATIVE,
               **{percentile_metric(q): NON_NEGATIVE for q in DEFAULT_PERCENTILES}},
    "pools": {"busy": SHARE},
    "sources": {"arrivals": NON_NEGATIVE, "completed": NON_NEGATIVE, "abandoned": NON_NEGATIVE,
                "abandoned_share": SHARE, "total_wait": NON_NEGATIVE, "lost": NON_NEGATIVE,
                "callers_served": SHARE, "callers_abandoned": SHARE, "callers_lost": SHARE,
                "rate_factor": NON_NEGATIVE},
    "interval": {"arrivals": NON_NEGATIVE, "completed": NON_NEGATIVE, "abandoned": NON_NEGATIVE,
                 "service_level": SHARE, "abandonment": SHARE, "wait": NON_NEGATIVE,
                 "queue": NON_NEGATIVE, "busy": SHARE, "staff": NON_NEGATIVE},
}

_CALLER_METRICS = frozenset(CALLER_OUTCOMES.values())
#: Every wait percentile's prefix: all jobs that left, served only, abandoners only.
_WAIT_PREFIXES = ("wait_p", SERVED_PREFIX, ABANDONED_PREFIX)


@dataclass(frozen=True)
class WarmupSuggestion:
    """MSER-5 on the total-queue series. ``time``: truncation suggested by MSER-5 on the series
    averaged over the replications (less noisy than any one replication); ``per_replication``: the
    truncation found in each replication; ``median``: their median; ``late_minimum``: replications
    whose MSER minimum lay in the second half of the run (too short to judge); ``ensemble_late``:
    the same for the averaged series; ``steady_state``: False when the scenario varies in time
    (profiles, traces, schedules), where a warm-up in the MSER sense does not apply and no
    warning is given. Times in the scenario's time unit."""

    time: float
    per_replication: tuple[float, ...]
    median: float
    late_minimum: int
    ensemble_late: bool
    sample_step: float
    steady_state: bool = True

    def to_json(self) -> dict:
        return {"time": self.time if math.isfinite(self.time) else None, "median": self.median,
                "per_replication": list(self.per_replication),
                "late_minimum": self.late_minimum, "ensemble_late": self.ensemble_late,
                "sample_step": self.sample_step, "steady_state": self.steady_state}


@dataclass(frozen=True)
class SimulationResult:
    """Estimates over ``replications`` runs of scenario ``scenario_name``, each over [0, horizon]
    measured over [warmup, horizon], base seed ``seed``.

    ``transitions`` {t: {"rate"}}, ``places`` {p: {"wait", "abandoned", "queue",
    "served_within" (places with a target only), "delayed" (share not taken the instant they
    became available: P(W > 0)), "asa" (average speed of answer: mean wait of the jobs taken),
    "wait_p50", "wait_p80", ... (wait percentiles of every job that left, taken or abandoning;
    each an estimate over the per-replication percentiles, never pooled across replications)}},
    ``pools`` {r: {"busy"}}, ``sources``
    {s: {"arrivals", "completed", "abandoned", "abandoned_share", "total_wait", "lost",
    "callers_served", "callers_abandoned", "callers_lost", "rate_factor" (sources with a
    ``random_rate`` only: the day factors drawn)}} (see :mod:`desim.run`; the JSON
    gathers the three caller shares under ``outcomes``): each value an
    :class:`Estimate`. ``intervals``: tidy per-interval table (columns interval, start, end,
    metric, name, mean, low, high, n) or None. ``unstable``: per-replication flags of runs stopped
    at the job limit; ``unstable_replications`` their count. ``runs``: the per-replication results.
    :meth:`overall_abandonment`: the abandonment share over all sources.
    """

    scenario_name: str
    time_unit: str
    replications: int
    horizon: float
    warmup: float
    seed: int
    transitions: dict
    places: dict
    pools: dict
    sources: dict
    intervals: pd.DataFrame | None
    warmup_suggestion: WarmupSuggestion
    warnings: list
    unstable: tuple
    runs: tuple = field(repr=False)
    #: the scenario's service targets as JSON, ``{place: {"within", "goal", "abandoned",
    #: "excluded_within", "describes"}}`` (what each ``served_within`` measures)
    targets: dict = field(default_factory=dict)

    @property
    def unstable_replications(self) -> int:
        return int(sum(self.unstable))

    def raw(self, kind: str, name: str, metric: str) -> np.ndarray:
        """Per-replication values of one figure, in replication order (nan where unmeasured)."""
        return np.array([r.values().get((kind, name, metric), math.nan) for r in self.runs])

    def overall_abandonment(self) -> Estimate:
        """The simulated abandonment share over all sources: per replication, the jobs that
        abandoned in the window over the jobs that ended in it, Σ abandoned / Σ (completed +
        abandoned) over the sources (nan for a replication where no job ended), as an
        :class:`~desim.estimate.Estimate`. (Each source's own share is its
        ``abandoned_share``.)"""
        names = list(self.sources)
        if not names:
            return Estimate.from_values([], bounds=SHARE)
        ab = np.sum([self.raw("source", s, "abandoned") for s in names], axis=0)
        done = np.sum([self.raw("source", s, "completed") for s in names], axis=0)
        ended = ab + done
        share = np.where(ended > 0, ab / np.where(ended > 0, ended, 1.0), np.nan)
        return Estimate.from_values(share, bounds=SHARE)

    def interval_methods(self) -> dict:
        """How each figure's interval was made, ``{kind: {metric: method}}`` (kind transitions,
        places, pools, sources, or interval for the per-interval table), e.g. "student t, cut at
        the natural bounds [0, 1]" for a share (see :data:`BOUNDS`)."""
        return {kind: {m: interval_method(b) for m, b in metrics.items()}
                for kind, metrics in BOUNDS.items()}

    def wait_distribution_json(self) -> dict:
        """The waits' figures of each waiting place as JSON: ``{p: {"asa": est,
        "wait_percentiles": {"50": est, "80": est, ...}, "served_wait_percentiles": {...},
        "abandoned_wait_percentiles": {...}}}`` (percentile in percent as the key, each estimate
        ``{"mean", "low", "high", "n"}`` over the replications; times in the scenario's time
        unit). ``wait_percentiles`` are over every job that left (taken or abandoning);
        ``served_wait_percentiles`` over the taken jobs' waits; ``abandoned_wait_percentiles``
        over the abandoners' times to abandon (n counts the replications that had any)."""
        out = {}
        for name, ms in self.places.items():
            if "asa" not in ms:
                continue
            doc = {"asa": ms["asa"].to_json()}
            for key, prefix in (("wait_percentiles", "wait_p"),
                                ("served_wait_percentiles", SERVED_PREFIX),
                                ("abandoned_wait_percentiles", ABANDONED_PREFIX)):
                found = {m.removeprefix(prefix): e.to_json() for m, e in ms.items()
                         if m.startswith(prefix)}
                if found or key == "wait_percentiles":  # (older runs have only the first)
                    doc[key] = found
            out[name] = doc
        return out

    def per_replication(self) -> pd.DataFrame:
        """Tidy table of every per-replication figure: replication, kind, name, metric, value."""
        import pandas as pd

        rows = [(r.replication, k, n, m, v) for r in self.runs for (k, n, m), v in r.values().items()]
        return pd.DataFrame(rows, columns=["replication", "kind", "name", "metric", "value"])

    def to_frame(self) -> pd.DataFrame:
        """Tidy table, one row per simulated figure: kind (transition, place, pool, source),
        name, metric, mean, low, high (the 95 % interval), n (replications measured)."""
        import pandas as pd

        rows = []
        for kind, table in (("transition", self.transitions), ("place", self.places),
                            ("pool", self.pools), ("source", self.sources)):
            for name, metrics in table.items():
                for metric, est in metrics.items():
                    rows.append((kind, name, metric, est.mean, est.low, est.high, est.n))
        return pd.DataFrame(rows, columns=["kind", "name", "metric", "mean", "low", "high", "n"])

    def _sources_json(self) -> dict:
        """Per source its figures, the per-caller shares gathered under ``outcomes``."""
        out = {}
        for name, metrics in self.sources.items():
            doc = {m: e.to_json() for m, e in metrics.items() if m not in _CALLER_METRICS}
            doc["outcomes"] = {k: metrics[m].to_json() for k, m in CALLER_OUTCOMES.items()
                               if m in metrics}
            out[name] = doc
        return out

    def to_json(self) -> dict:
        """The ``simulate --json`` document (design.md §5), with more keys (the waits' figures of
        each waiting place under ``wait_distribution``, see :meth:`wait_distribution_json`;
        ``places`` keeps its keys); nan becomes null."""

        def table(t: dict) -> dict:
            return {n: {m: e.to_json() for m, e in ms.items()} for n, ms in t.items()}

        def pinned_places() -> dict:  # (design.md §5's keys; the waits' figures go apart)
            return {n: {m: e.to_json() for m, e in ms.items() if not _is_wait_metric(m)}
                    for n, ms in self.places.items()}

        intervals = None
        if self.intervals is not None:
            intervals = [
                {k: (None if isinstance(v, float) and not math.isfinite(v) else v)
                 for k, v in rec.items()}
                for rec in self.intervals.to_dict("records")
            ]
        return {
            "scenario": self.scenario_name,
            "time_unit": self.time_unit,
            "replications": self.replications,
            "horizon": self.horizon,
            "warmup": self.warmup,
            "seed": self.seed,
            "transitions": table(self.transitions),
            "places": pinned_places(),
            "targets": self.targets,
            "wait_distribution": self.wait_distribution_json(),
            "pools": table(self.pools),
            "sources": self._sources_json(),
            "intervals": intervals,
            "interval_methods": self.interval_methods(),
            "warmup_suggestion": self.warmup_suggestion.to_json(),
            "unstable_replications": self.unstable_replications,
            "warnings": list(self.warnings),
        }


def _estimates(runs: list[RunResult], kind_table: str, metrics: tuple[str, ...] | None) -> dict:
    out: dict = {}
    names = getattr(runs[0], kind_table)
    bounds = BOUNDS.get(kind_table, {})
    for name, first in names.items():
        wanted = [m for m in (metrics or first) if m in first]
        if kind_table == "places":
            # (the waits' figures come after the pinned ones; a run saved before they existed
            # has none of them)
            wanted += [m for m in first if _is_wait_metric(m)]
        out[name] = {m: Estimate.from_values([getattr(r, kind_table)[name].get(m, math.nan)
                                              for r in runs],
                                             bounds=bounds.get(m, _wait_bounds(m)))
                     for m in wanted}
    return out


def _is_wait_metric(metric: str) -> bool:
    return metric in WAIT_METRICS or metric.startswith(_WAIT_PREFIXES)


def _wait_bounds(metric: str) -> tuple[float, float] | None:
    """Bounds of a wait figure not named in :data:`BOUNDS` (a percentile asked for)."""
    return NON_NEGATIVE if metric.startswith(_WAIT_PREFIXES) else None


def _interval_estimates(runs: list[RunResult]) -> pd.DataFrame | None:
    if runs[0].intervals is None:
        return None
    import pandas as pd

    frame = pd.concat([r.intervals.assign(replication=r.replication) for r in runs])
    rows = []
    for (i, metric, name), g in frame.groupby(["interval", "metric", "name"], sort=False):
        est = Estimate.from_values(g["value"], bounds=BOUNDS["interval"].get(metric))
        rows.append((i, g["start"].iloc[0], g["end"].max(), metric, name,
                     est.mean, est.low, est.high, est.n))
    out = pd.DataFrame(rows, columns=["interval", "start", "end", "metric", "name",
                                      "mean", "low", "high", "n"])
    return out.sort_values(["interval"], kind="stable").reset_index(drop=True)


def _warmup_suggestion(runs: list[RunResult], steady_state: bool) -> WarmupSuggestion:
    step = runs[0].sample_step
    per = tuple(r.mser.truncation * step for r in runs)
    full = [r.queue_series for r in runs if not r.unstable]
    if full:
        n = min(len(s) for s in full)
        ensemble = mser5(np.mean([s[:n] for s in full], axis=0))
        time, late = ensemble.truncation * step, ensemble.late_minimum
    else:
        time, late = math.nan, False
    return WarmupSuggestion(time=time, per_replication=per, median=float(np.median(per)),
                            late_minimum=sum(r.mser.late_minimum for r in runs),
                            ensemble_late=late, sample_step=step, steady_state=steady_state)


def summarize(runs: list[RunResult], *, scenario_name: str, time_unit: str,
              steady_state: bool = True, targets: dict | None = None) -> SimulationResult:
    """Combine per-replication results (in replication order) into a :class:`SimulationResult`.
    ``steady_state``: the scenario has constant rates and staff, so MSER-5 warnings apply.
    ``targets``: the service targets as JSON (:attr:`SimulationResult.targets`)."""
    first = runs[0]
    suggestion = _warmup_suggestion(runs, steady_state)
    warnings: list[str] = []
    unstable = tuple(r.unstable for r in runs)
    if any(unstable):
        k = sum(unstable)
        warnings.append(
            f"{k} of {len(runs)} replications were stopped early because the jobs inside exceeded "
            "the job limit (inflow above capacity?); their figures come from the partial runs")
    late = suggestion.late_minimum
    # (a day with profiles or shifts has no steady state to warm up to: no warning then)
    if steady_state and (suggestion.ensemble_late or (late and 2 * late >= len(runs))):
        warnings.append(
            f"MSER-5 finds no reliable end of the warm-up ({late} of {len(runs)} replications have "
            "their minimum in the second half): the queue may still be drifting; run longer")
    elif steady_state and math.isfinite(suggestion.time) and first.warmup < suggestion.time:
        warnings.append(
            f"the warm-up used ({first.warmup:g}) looks too short: MSER-5 suggests discarding the "
            f"first {suggestion.time:g} time units")
    return SimulationResult(
        scenario_name=scenario_name, time_unit=time_unit, replications=len(runs),
        horizon=first.horizon, warmup=first.warmup, seed=first.seed,
        transitions=_estimates(runs, "transitions", ("rate",)),
        places=_estimates(runs, "places", PLACE_METRICS),
        pools=_estimates(runs, "pools", ("busy",)),
        sources=_estimates(runs, "sources", SOURCE_METRICS),
        intervals=_interval_estimates(runs),
        warmup_suggestion=suggestion, warnings=warnings, unstable=unstable, runs=tuple(runs),
        targets=dict(targets or {}),
    )
