"""Scale study: how the fluid-approximation gap shrinks as volume and staff grow together.

For each factor k, :func:`scale_scenario` multiplies every arrival rate (Poisson rates and every
value of a profile) by k and every staff level (fixed staff and every schedule value) by k,
rounded to the nearest whole agent; holding times, patience and routing stay. The fluid model
scales exactly (rates × k, loads unchanged), so any change of the relative gap is the
stochastic effect the fluid limit removes. Each factor is simulated with the same seed (common
random numbers) and the same horizon and warm-up.

Gaps measured per factor (rates per the scenario's time unit):

* ``throughput_shortfall`` = (fluid − simulated) / fluid total output rate (the transitions
  that end jobs): the relative amount by which the fluid model overstates the output;
* ``abandonment_gap`` = simulated − fluid overall abandonment (scenarios with patience), the
  fluid figure from the fluid answer's waiting places (:attr:`fluid.analysis.FluidResult.places`:
  the fluid model with abandonment, in steady state or over the window of a time-varying net);
* ``max_transition_gap`` = max over transitions with a positive fluid rate of
  |simulated − fluid| / fluid.

Each is fitted as gap ≈ C·k^b by least squares on log(gap) against log(k); b is reported with
its standard error (needs three points or more; with two, no error). In the square-root
(Halfin–Whitt) regime b is about −1/2; in a regime where the gap vanishes faster (staff well
above the load) b is more negative. Gaps that are zero or negative (the simulation on the other
side of the fluid, usually noise) cannot be put on a log scale: they are left out of the fit and
named in the fit's notes.
"""

from __future__ import annotations

import concurrent.futures as cf
import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Callable

import numpy as np
import pandas as pd

from desim import SimulationSettings, resolve_settings
from fluid.analysis import throughput
from fluid.errors import FieldError, ScenarioError
from fluid.json_values import json_ready
from fluid.loading import with_changes
from fluid.scenario import Scenario

from .gaps import fluid_abandonment, fluid_places, simulated_output
from .sweep import Sweep

__all__ = ["GAP_METRICS", "ScaleFit", "ScaleResult", "fit_exponent", "scale_scenario",
           "scale_study"]

GAP_METRICS = ("throughput_shortfall", "abandonment_gap", "max_transition_gap")


def _round(x: float) -> int:
    return int(math.floor(x + 0.5))  # half up (Python's round() goes to even)


def scale_scenario(scenario: Scenario, factor: float) -> tuple[Scenario, tuple[str, ...]]:
    """``(scaled scenario, notes)``: arrival rates × ``factor``, staff × ``factor`` rounded to
    the nearest whole agent (notes name every level the rounding changed). Raises
    :class:`fluid.errors.ScenarioError` for a trace source, whose recorded arrivals cannot be
    scaled."""
    if not (math.isfinite(factor) and factor > 0):
        raise ValueError(f"scale factor must be a positive number (got {factor!r})")
    doc = scenario.to_document()
    changes: dict = {}
    notes: list[str] = []
    for name, src in scenario.sources.items():
        try:
            scaled = src.arrivals.scaled(factor)
        except FieldError as exc:  # a trace: its recorded arrival times are fixed
            raise ScenarioError(scenario.file, f"sources.{name}", exc.message) from None
        changes |= {f"sources.{name}.{field}": v for field, v in scaled.rate_fields().items()}
    for name, pool in scenario.pools.items():
        spec = doc["pools"][name]
        if pool.schedule is not None:
            exact = [s * factor for s in pool.schedule.staff]
            staff = [_round(x) for x in exact]
            changes[f"pools.{name}.schedule.staff"] = staff
            if any(abs(a - b) > 1e-9 for a, b in zip(exact, staff)):
                notes.append(f"pool {name}: schedule × {factor:g} rounded to whole agents "
                             f"{staff}")
            if isinstance(spec, dict) and "staff" in spec:
                changes[f"pools.{name}.staff"] = _round(pool.staff * factor)
        else:
            exact = pool.staff * factor
            changes[f"pools.{name}"] = _round(exact)
            if abs(exact - _round(exact)) > 1e-9:
                notes.append(f"pool {name}: staff {pool.staff} × {factor:g} = {exact:g} rounded "
                             f"to {_round(exact)}")
    return with_changes(scenario, changes), tuple(notes)


@dataclass(frozen=True)
class ScaleFit:
    """Fit of log(gap) = log(C) + b·log(k): ``exponent`` b, its ``stderr`` (nan with fewer than
    three points), ``intercept`` log(C), ``points`` used, ``notes`` (gaps left out)."""

    metric: str
    exponent: float
    stderr: float
    intercept: float
    points: int
    notes: tuple[str, ...] = ()

    def to_json(self) -> dict:
        def n(x):
            return float(x) if math.isfinite(x) else None

        return {"metric": self.metric, "exponent": n(self.exponent), "stderr": n(self.stderr),
                "intercept": n(self.intercept), "points": self.points, "notes": list(self.notes)}


def fit_exponent(factors: Sequence[float], gaps: Sequence[float], metric: str = "gap") -> ScaleFit:
    """Least-squares fit of log(gap) against log(factor); non-positive or undefined gaps are
    left out (and named in the notes)."""
    keep, notes = [], []
    for k, g in zip(factors, gaps):
        if g is None or not math.isfinite(g):
            notes.append(f"factor {k:g}: {metric} undefined, left out")
        elif g <= 0:
            notes.append(f"factor {k:g}: {metric} {g:.3g} <= 0 cannot be put on a log scale, "
                         "left out")
        else:
            keep.append((math.log(k), math.log(g)))
    if len(keep) < 2 or len({x for x, _ in keep}) < 2:
        notes.append("fewer than two usable points: no fit")
        return ScaleFit(metric, math.nan, math.nan, math.nan, len(keep), tuple(notes))
    x, y = np.array(keep).T
    xm = x.mean()
    sxx = float(((x - xm) ** 2).sum())
    slope = float(((x - xm) * (y - y.mean())).sum() / sxx)
    intercept = float(y.mean() - slope * xm)
    if len(keep) > 2:
        resid = y - (intercept + slope * x)
        stderr = math.sqrt(float((resid ** 2).sum()) / (len(keep) - 2) / sxx)
    else:
        stderr = math.nan
        notes.append("two points: no standard error")
    return ScaleFit(metric, slope, stderr, intercept, len(keep), tuple(notes))


@dataclass(frozen=True)
class ScaleResult:
    """Outcome of :func:`scale_study`. ``table``: one row per factor with columns factor,
    arrivals (total fluid arrival rate), fluid_output, output_mean, output_low, output_high, n,
    throughput_shortfall (with _low/_high from the output interval), fluid_abandonment,
    abandonment_mean, abandonment_low, abandonment_high, abandonment_gap (with _low/_high),
    max_transition_gap, max_transition, max_load, unstable_replications; ``fits``: metric ->
    :class:`ScaleFit`; ``notes``: rounding of staff and other caveats."""

    scenario_name: str
    time_unit: str
    factors: tuple[float, ...]
    table: pd.DataFrame
    fits: dict
    notes: tuple[str, ...]
    replications: int
    horizon: float
    warmup: float
    seed: int

    def to_frame(self) -> pd.DataFrame:
        """Tidy: one row per factor and figure, columns factor, metric, fluid (the fluid value,
        nan for a gap), mean, low, high, n (the simulated estimate over n replications, or the
        gap with the interval it inherits from it). Metrics: output (rate of jobs ending, per
        time unit), abandonment (share of arrivals), throughput_shortfall and abandonment_gap
        (see the module docstring), max_transition_gap (no interval), max_load (fluid)."""
        nan = math.nan
        rows = []
        for r in self.table.to_dict("records"):
            k, n = r["factor"], r["n"]
            rows += [
                (k, "output", r["fluid_output"], r["output_mean"], r["output_low"],
                 r["output_high"], n),
                (k, "abandonment", r["fluid_abandonment"], r["abandonment_mean"],
                 r["abandonment_low"], r["abandonment_high"], n),
                (k, "throughput_shortfall", nan, r["throughput_shortfall"],
                 r["throughput_shortfall_low"], r["throughput_shortfall_high"], n),
                (k, "abandonment_gap", nan, r["abandonment_gap"], r["abandonment_gap_low"],
                 r["abandonment_gap_high"], n),
                (k, "max_transition_gap", nan, r["max_transition_gap"], nan, nan, n),
                (k, "max_load", r["max_load"], nan, nan, nan, 0),
            ]
        return pd.DataFrame(rows, columns=["factor", "metric", "fluid", "mean", "low", "high",
                                           "n"])

    def fits_frame(self) -> pd.DataFrame:
        """metric, exponent, stderr, intercept, points."""
        return pd.DataFrame([(f.metric, f.exponent, f.stderr, f.intercept, f.points)
                             for f in self.fits.values()],
                            columns=["metric", "exponent", "stderr", "intercept", "points"])

    def to_json(self) -> dict:
        """``{"scenario", "time_unit", "factors", "replications", "horizon", "warmup", "seed",
        "table": [row, ...], "fits": {metric: fit}, "notes"}``; nan becomes null."""
        rows = json_ready(self.table.to_dict("records"))
        return {"scenario": self.scenario_name, "time_unit": self.time_unit,
                "factors": list(self.factors), "replications": self.replications,
                "horizon": self.horizon, "warmup": self.warmup, "seed": self.seed,
                "table": rows, "fits": {m: f.to_json() for m, f in self.fits.items()},
                "notes": list(self.notes)}


def scale_study(scenario: Scenario, factors: Sequence[float] = (1, 2, 4, 8, 16),
                settings: SimulationSettings | None = None, *,
                reps: int | None = None, horizon: float | None = None,
                warmup: float | None = None, seed: int | None = None,
                workers: int | None = None, executor: cf.Executor | None = None,
                progress: Callable[[], object] | None = None,
                max_jobs: int | None = None, out=None, resume: bool = False) -> ScaleResult:
    """Run the fluid model and the simulation of ``scenario`` scaled by each factor (see
    :func:`scale_scenario`) with the same settings and seed, tabulate the gaps and fit their
    decay exponents (see the module docstring). ``settings`` and the keywords as in
    :func:`compare.compare` (unset: ``scenario.run``); times in the scenario's time unit.
    ``progress()`` is called once per finished replication, so ``reps × len(factors)`` times in
    all. With a run folder ``out``, factor k keeps its replications in ``out/factor-k``."""
    factors = tuple(float(k) for k in factors)
    if not factors:
        raise ValueError("give at least one scale factor")
    settings = resolve_settings(scenario.run, settings, reps=reps, horizon=horizon,
                                warmup=warmup, seed=seed, workers=workers, executor=executor,
                                max_jobs=max_jobs, out=out, resume=resume or None)
    base = scenario
    rows, notes = [], []
    with_patience = scenario.has_patience
    with Sweep(settings, progress) as sweep:
        for k in factors:
            scaled, rounding = scale_scenario(base, k)
            notes += rounding
            fluid = throughput(scaled, window=settings.window)
            sim = sweep.run(scaled, f"factor-{k:g}")
            rows.append(_scale_row(k, scaled, fluid, sim, with_patience))
            if sim.unstable_replications:
                notes.append(f"factor {k:g}: {sim.unstable_replications} replications stopped "
                             "at the job cap")
    table = pd.DataFrame(rows)
    metrics = GAP_METRICS if with_patience else ("throughput_shortfall", "max_transition_gap")
    if not with_patience:
        notes.append("no patience in the scenario: no abandonment gap")
    fits = {m: fit_exponent(factors, table[m].tolist(), m) for m in metrics}
    if any(scenario.pools[r].staff == 0 for r in scenario.pools):
        notes.append("pools with no staff stay at zero")
    return ScaleResult(
        scenario_name=scenario.name, time_unit=scenario.time_unit, factors=factors,
        table=table, fits=fits, notes=tuple(dict.fromkeys(notes)), replications=settings.replications,
        horizon=settings.horizon, warmup=settings.warmup, seed=settings.seed,
    )


def _scale_row(k: float, scaled: Scenario, fluid, sim, with_patience: bool) -> dict:
    """One row of the scale table: factor k's fluid and simulated figures and their gaps."""
    out = simulated_output(scaled, sim)
    f_out = fluid.output_rate

    def shortfall(x):
        return (f_out - x) / f_out if f_out > 0 else math.nan

    places = fluid_places(scaled, fluid)
    f_ab = fluid_abandonment(scaled, places, fluid) if with_patience else math.nan
    ab = sim.overall_abandonment()
    worst, worst_q = math.nan, ""
    for q, rate in fluid.rates.items():
        if rate > 0:
            g = abs(sim.transitions[q]["rate"].mean - rate) / rate
            if not (g <= worst):  # also replaces the initial nan
                worst, worst_q = g, q
    loads = [v for v in fluid.load.values() if math.isfinite(v)]
    return {
        "factor": k, "arrivals": sum(fluid.source_rates.values()),
        "fluid_output": f_out, "output_mean": out.mean, "output_low": out.low,
        "output_high": out.high, "n": out.n,
        "throughput_shortfall": shortfall(out.mean),
        "throughput_shortfall_low": shortfall(out.high),
        "throughput_shortfall_high": shortfall(out.low),
        "fluid_abandonment": f_ab,
        "abandonment_mean": ab.mean if with_patience else math.nan,
        "abandonment_low": ab.low if with_patience else math.nan,
        "abandonment_high": ab.high if with_patience else math.nan,
        "abandonment_gap": ab.mean - f_ab if with_patience else math.nan,
        "abandonment_gap_low": ab.low - f_ab if with_patience else math.nan,
        "abandonment_gap_high": ab.high - f_ab if with_patience else math.nan,
        "max_transition_gap": worst, "max_transition": worst_q,
        "max_load": max(loads) if loads else math.nan,
        "unstable_replications": sim.unstable_replications,
    }
