"""Scale study: how the fluid-approximation gap shrinks as volume and staff grow together.

For each factor k, :func:`scale_scenario` multiplies every arrival rate (Poisson rates and every
value of a profile) by k; holding times, patience and routing stay. Staff follows one of two
rules (``staffing``), rounded half up to whole agents (the notes name every level the rounding
changed):

* ``"linear"`` (the default): every staff level (fixed staff and every schedule value) × k, so
  every load stays fixed;
* ``"sqrt"`` (square-root staffing): each pool's staff N_k = R_k + β·√R_k with R_k = k·R, R the
  pool's offered work at k = 1 (:func:`fluid.offered.offered_work`, in agents) and
  β = (N − R)/√R from the scenario's own staff N, so k = 1 is the scenario itself; that is
  N_k = k·R + (N − R)·√k (each schedule value likewise). A pool offered no work (R = 0 or
  undefined) is scaled linearly (noted).

The fluid model scales exactly with linear staffing (rates × k, loads unchanged), so any change
of the relative gap is the stochastic effect the fluid limit removes. Each factor is simulated with the same seed (common
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
its least-squares standard error (needs three points or more; with two, no error) and a
bootstrap interval over the replications (:func:`bootstrap_exponents`: the replications are
resampled with replacement, the same replication numbers at every factor since the factors
share their random numbers, the gaps and the fit recomputed; a 95 % percentile interval).

What each regime predicts (:func:`predicted_exponent`):

* square-root staffing: the quality-and-efficiency-driven (QED) regime of Halfin and Whitt
  (1981) and, with abandonment, Garnett, Mandelbaum and Reiman (2002): the chance of waiting
  tends to a constant strictly between 0 and 1 and the queue, waits and abandonment are of
  order √k around a fluid that is exact to first order, so the relative gaps are of order
  k^−1/2: b about −1/2;
* linear staffing with every load below 1 (quality-driven): the chance of waiting falls
  exponentially fast in k (Halfin and Whitt 1981: P(W > 0) → 0 unless staff − load grows like
  √load), so the gaps fall faster than any power the fit sees: b below −1/2, by an amount that
  depends on the range of k and no fixed value is predicted;
* linear staffing with some load above 1 (efficiency-driven, with patience): the fluid model
  is the first-order limit (Whitt 2006) and the fluctuations around it are of order √k, so the
  relative gaps are at most of order k^−1/2: b at most about −1/2 (no sharper value is claimed
  here);
* linear staffing with a load of exactly 1: staff = load, β = 0, a square-root regime: about
  −1/2. Gaps that are zero or negative (the simulation on the other
side of the fluid, usually noise) cannot be put on a log scale: they are left out of the fit and
named in the fit's notes.
"""

from __future__ import annotations

import concurrent.futures as cf
import dataclasses
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
from fluid.structure import output_transitions

from .gaps import fluid_abandonment, fluid_places, simulated_output
from .sweep import Sweep

__all__ = ["BOOTSTRAP_RESAMPLES", "GAP_METRICS", "STAFFING", "ScaleFit", "ScaleResult",
           "bootstrap_exponents", "fit_exponent", "predicted_exponent", "scale_scenario",
           "scale_study"]

GAP_METRICS = ("throughput_shortfall", "abandonment_gap", "max_transition_gap")
STAFFING = ("linear", "sqrt")
#: Bootstrap resamples per study and the seed of their generator (fixed: same study, same
#: interval).
BOOTSTRAP_RESAMPLES = 200
BOOTSTRAP_SEED = 20061
REGIME_SOURCES = ("Halfin and Whitt (1981), Operations Research 29(3):567-588",
                  "Garnett, Mandelbaum and Reiman (2002), MSOM 4(3):208-227",
                  "Whitt (2006), Operations Research 54(1):37-54")


def _round(x: float) -> int:
    return int(math.floor(x + 0.5))  # half up (Python's round() goes to even)


def scale_scenario(scenario: Scenario, factor: float,
                   staffing: str = "linear") -> tuple[Scenario, tuple[str, ...]]:
    """``(scaled scenario, notes)``: arrival rates × ``factor``, staff by the ``staffing`` rule
    (module docstring) rounded to the nearest whole agent (notes name every level the rounding
    changed). Raises :class:`fluid.errors.ScenarioError` for a trace source, whose recorded
    arrivals cannot be scaled."""
    if not (math.isfinite(factor) and factor > 0):
        raise ValueError(f"scale factor must be a positive number (got {factor!r})")
    if staffing not in STAFFING:
        raise ValueError(f"staffing must be 'linear' or 'sqrt' (got {staffing!r})")
    if staffing == "sqrt":
        return _sqrt_scaled(scenario, factor)
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


def _sqrt_scaled(scenario: Scenario, k: float) -> tuple[Scenario, tuple[str, ...]]:
    """Square-root staffing: N_k = k·R + (N − R)·√k per staff level (module docstring)."""
    from fluid.offered import offered_work

    doc = scenario.to_document()
    changes: dict = {}
    notes: list[str] = []
    for name, src in scenario.sources.items():
        try:
            scaled = src.arrivals.scaled(k)
        except FieldError as exc:
            raise ScenarioError(scenario.file, f"sources.{name}", exc.message) from None
        changes |= {f"sources.{name}.{field}": v for field, v in scaled.rate_fields().items()}
    work = offered_work(scenario)
    for name, pool in scenario.pools.items():
        r = work.get(name, math.nan)
        if not (math.isfinite(r) and r > 0):
            def rule(n):
                return n * k
            notes.append(f"pool {name}: no offered work, staff scaled linearly")
        else:
            def rule(n, r=r):
                return max(0.0, k * r + (n - r) * math.sqrt(k))
        spec = doc["pools"][name]
        levels = list(pool.schedule.staff) if pool.schedule is not None else [pool.staff]
        exact = [rule(n) for n in levels]
        staff = [_round(x) for x in exact]
        if pool.schedule is not None:
            changes[f"pools.{name}.schedule.staff"] = staff
            if isinstance(spec, dict) and "staff" in spec:
                changes[f"pools.{name}.staff"] = _round(rule(pool.staff))
        else:
            changes[f"pools.{name}"] = staff[0]
        if any(abs(a - b) > 1e-9 for a, b in zip(exact, staff)):
            shown = staff if pool.schedule is not None else staff[0]
            notes.append(f"pool {name}: square-root staff at × {k:g} "
                         f"({', '.join(f'{x:.4g}' for x in exact)}) rounded to whole agents "
                         f"{shown}")
    return with_changes(scenario, changes), tuple(notes)


def predicted_exponent(staffing: str, max_load: float) -> dict:
    """What the staffing regime predicts for the fitted exponent b (module docstring):
    ``{"regime", "exponent" (a number or None), "relation" ("about", "below" or "at most"),
    "statement", "sources"}``. ``max_load``: the largest pool load at k = 1 (offered work over
    staff)."""
    half = "relative gaps of order k^-1/2"
    if staffing == "sqrt":
        out = ("square-root (QED, Halfin-Whitt)", -0.5, "about",
               f"square-root staffing: {half}, exponent about -1/2 (Halfin and Whitt 1981; "
               "Garnett, Mandelbaum and Reiman 2002)")
    elif not math.isfinite(max_load):
        out = ("unknown", None, "about", "linear staffing, load undefined: no prediction")
    elif abs(max_load - 1) <= 1e-9:
        out = ("critical load (square-root with beta = 0)", -0.5, "about",
               f"linear staffing at load 1: {half}, exponent about -1/2 (Halfin and Whitt 1981)")
    elif max_load < 1:
        out = ("quality-driven (linear staffing, load < 1)", -0.5, "below",
               "linear staffing below load 1: queueing effects vanish exponentially fast in k, "
               "so the exponent is expected below -1/2, no fixed value (Halfin and Whitt 1981)")
    else:
        out = ("efficiency-driven (linear staffing, load > 1)", -0.5, "at most",
               f"linear staffing above load 1: fluctuations of order k^1/2 around the fluid "
               f"limit, {half} at most, exponent at most about -1/2 (Whitt 2006)")
    regime, b, rel, text = out
    return {"regime": regime, "exponent": b, "relation": rel, "statement": text,
            "sources": list(REGIME_SOURCES)}


@dataclass(frozen=True)
class ScaleFit:
    """Fit of log(gap) = log(C) + b·log(k): ``exponent`` b, its ``stderr`` (nan with fewer than
    three points), ``intercept`` log(C), ``points`` used, ``notes`` (gaps left out);
    ``low``/``high``: the bootstrap 95 % percentile interval of b (nan when not bootstrapped or
    too few resamples gave a fit), from ``resamples`` usable resamples."""

    metric: str
    exponent: float
    stderr: float
    intercept: float
    points: int
    notes: tuple[str, ...] = ()
    low: float = math.nan
    high: float = math.nan
    resamples: int = 0

    def to_json(self) -> dict:
        def n(x):
            return float(x) if math.isfinite(x) else None

        return {"metric": self.metric, "exponent": n(self.exponent), "stderr": n(self.stderr),
                "intercept": n(self.intercept), "points": self.points, "notes": list(self.notes),
                "bootstrap_low": n(self.low), "bootstrap_high": n(self.high),
                "bootstrap_resamples": self.resamples}


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
class _Replicas:
    """One factor's per-replication figures, to recompute its gaps from any resample."""

    fluid_output: float
    output: np.ndarray  # per replication: total rate of the transitions that end jobs
    fluid_abandonment: float
    abandonment: np.ndarray  # per replication: overall abandonment share
    transitions: tuple  # (fluid rate, per-replication simulated rates) per positive fluid rate

    def gaps(self, idx: np.ndarray | None = None) -> dict:
        """The gaps of the replications ``idx`` (default all), as in the scale table."""
        def mean(x):
            x = x if idx is None else x[idx]
            x = x[np.isfinite(x)]
            return float(x.mean()) if x.size else math.nan

        f = self.fluid_output
        worst = math.nan
        for rate, reps in self.transitions:
            g = abs(mean(reps) - rate) / rate
            if not (g <= worst):
                worst = g
        return {"throughput_shortfall": (f - mean(self.output)) / f if f > 0 else math.nan,
                "abandonment_gap": mean(self.abandonment) - self.fluid_abandonment,
                "max_transition_gap": worst}


def bootstrap_exponents(factors: Sequence[float], replicas: Sequence[_Replicas],
                        metrics: Sequence[str], resamples: int = BOOTSTRAP_RESAMPLES,
                        seed: int = BOOTSTRAP_SEED) -> dict:
    """metric -> ``(low, high, usable resamples)``: the 95 % percentile bootstrap interval of
    the fitted exponent. Each resample draws replication numbers with replacement, the same
    numbers at every factor (the factors share their random numbers, replication r with
    replication r), recomputes every factor's gaps and refits; resamples where the fit fails
    (fewer than two positive gaps) are dropped, and with fewer than half usable the interval
    is nan. ``seed`` fixes the generator, so the interval is reproducible."""
    rng = np.random.default_rng(seed)
    n = min(len(r.output) for r in replicas)
    slopes: dict = {m: [] for m in metrics}
    for _ in range(resamples if n >= 2 else 0):
        idx = rng.integers(0, n, n)
        per = [r.gaps(idx) for r in replicas]
        for m in metrics:
            b = fit_exponent(factors, [g[m] for g in per], m).exponent
            if math.isfinite(b):
                slopes[m].append(b)
    out = {}
    for m, bs in slopes.items():
        if len(bs) < max(1, resamples // 2) or n < 2:
            out[m] = (math.nan, math.nan, len(bs))
        else:
            lo, hi = np.percentile(bs, [2.5, 97.5])
            out[m] = (float(lo), float(hi), len(bs))
    return out


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
    staffing: str = "linear"
    prediction: dict | None = None

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
        """metric, exponent, stderr, intercept, points, bootstrap_low, bootstrap_high."""
        return pd.DataFrame([(f.metric, f.exponent, f.stderr, f.intercept, f.points, f.low,
                              f.high) for f in self.fits.values()],
                            columns=["metric", "exponent", "stderr", "intercept", "points",
                                     "bootstrap_low", "bootstrap_high"])

    def to_json(self) -> dict:
        """``{"scenario", "time_unit", "factors", "replications", "horizon", "warmup", "seed",
        "table": [row, ...], "fits": {metric: fit}, "notes", "staffing" (linear or sqrt),
        "prediction" (:func:`predicted_exponent`)}``; nan becomes null."""
        rows = json_ready(self.table.to_dict("records"))
        return {"scenario": self.scenario_name, "time_unit": self.time_unit,
                "factors": list(self.factors), "replications": self.replications,
                "horizon": self.horizon, "warmup": self.warmup, "seed": self.seed,
                "table": rows, "fits": {m: f.to_json() for m, f in self.fits.items()},
                "notes": list(self.notes), "staffing": self.staffing,
                "prediction": json_ready(self.prediction)}


def scale_study(scenario: Scenario, factors: Sequence[float] = (1, 2, 4, 8, 16),
                settings: SimulationSettings | None = None, *,
                reps: int | None = None, horizon: float | None = None,
                warmup: float | None = None, seed: int | None = None,
                workers: int | None = None, executor: cf.Executor | None = None,
                progress: Callable[[], object] | None = None,
                max_jobs: int | None = None, out=None, resume: bool = False,
                staffing: str = "linear", bootstrap: int = BOOTSTRAP_RESAMPLES,
                bootstrap_seed: int = BOOTSTRAP_SEED) -> ScaleResult:
    """Run the fluid model and the simulation of ``scenario`` scaled by each factor (see
    :func:`scale_scenario`) with the same settings and seed, tabulate the gaps and fit their
    decay exponents (see the module docstring). ``settings`` and the keywords as in
    :func:`compare.compare` (unset: ``scenario.run``); times in the scenario's time unit.
    ``progress()`` is called once per finished replication, so ``reps × len(factors)`` times in
    all. With a run folder ``out``, factor k keeps its replications in ``out/factor-k``.
    ``staffing``: "linear" or "sqrt" (module docstring); ``bootstrap`` resamples (seeded by
    ``bootstrap_seed``) give each exponent its interval (0: none)."""
    if staffing not in STAFFING:
        raise ValueError(f"staffing must be 'linear' or 'sqrt' (got {staffing!r})")
    factors = tuple(float(k) for k in factors)
    if not factors:
        raise ValueError("give at least one scale factor")
    settings = resolve_settings(scenario.run, settings, reps=reps, horizon=horizon,
                                warmup=warmup, seed=seed, workers=workers, executor=executor,
                                max_jobs=max_jobs, out=out, resume=resume or None)
    base = scenario
    rows, notes, replicas = [], [], []
    with_patience = scenario.has_patience
    with Sweep(settings, progress) as sweep:
        for k in factors:
            scaled, rounding = scale_scenario(base, k, staffing)
            notes += rounding
            fluid = throughput(scaled, window=settings.window)
            sim = sweep.run(scaled, f"factor-{k:g}")
            row, reps = _scale_row(k, scaled, fluid, sim, with_patience)
            rows.append(row)
            replicas.append(reps)
            if sim.unstable_replications:
                notes.append(f"factor {k:g}: {sim.unstable_replications} replications stopped "
                             "at the job cap")
    table = pd.DataFrame(rows)
    metrics = GAP_METRICS if with_patience else ("throughput_shortfall", "max_transition_gap")
    if not with_patience:
        notes.append("no patience in the scenario: no abandonment gap")
    fits = {m: fit_exponent(factors, table[m].tolist(), m) for m in metrics}
    if bootstrap > 0:
        intervals = bootstrap_exponents(factors, replicas, metrics, bootstrap, bootstrap_seed)
        fits = {m: dataclasses.replace(f, low=intervals[m][0], high=intervals[m][1],
                                       resamples=intervals[m][2]) for m, f in fits.items()}
    if any(scenario.pools[r].staff == 0 for r in scenario.pools):
        notes.append("pools with no staff stay at zero")
    if staffing == "sqrt":
        notes.append("square-root staffing: staff = R_k + beta sqrt(R_k) per pool, beta from "
                     "the scenario's staff at k = 1, rounded half up to whole agents")
    base_loads = [v for v in throughput(base, window=settings.window).load.values()
                  if math.isfinite(v)]
    prediction = predicted_exponent(staffing, max(base_loads) if base_loads else math.nan)
    return ScaleResult(
        scenario_name=scenario.name, time_unit=scenario.time_unit, factors=factors,
        table=table, fits=fits, notes=tuple(dict.fromkeys(notes)), replications=settings.replications,
        horizon=settings.horizon, warmup=settings.warmup, seed=settings.seed,
        staffing=staffing, prediction=prediction,
    )


def _abandonment_shares(sim) -> np.ndarray:
    """Per replication, the overall abandonment share (as
    :meth:`desim.SimulationResult.overall_abandonment`)."""
    names = list(sim.sources)
    if not names:
        return np.full(len(sim.runs), math.nan)
    ab = np.sum([sim.raw("source", s, "abandoned") for s in names], axis=0)
    ended = ab + np.sum([sim.raw("source", s, "completed") for s in names], axis=0)
    return np.where(ended > 0, ab / np.where(ended > 0, ended, 1.0), np.nan)


def _scale_row(k: float, scaled: Scenario, fluid, sim, with_patience: bool):
    """``(row, replicas)``: one row of the scale table (factor k's fluid and simulated figures
    and their gaps) and the per-replication figures the bootstrap resamples."""
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
    replicas = _Replicas(
        fluid_output=f_out,
        output=np.sum([sim.raw("transition", q, "rate") for q in output_transitions(scaled)],
                      axis=0),
        fluid_abandonment=f_ab,
        abandonment=_abandonment_shares(sim) if with_patience else np.full(len(sim.runs),
                                                                           math.nan),
        transitions=tuple((rate, sim.raw("transition", q, "rate"))
                          for q, rate in fluid.rates.items() if rate > 0))
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
    }, replicas
