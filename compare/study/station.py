"""Station self-check: simulate one station and set each statistic against the exact formula.

:func:`station_check` builds the single-station scenario (one source into a queue, one pool of
``servers`` agents, a talk place holding the agent; with ``class_rates`` one source and queue per
class, the pool serving them in class order, non-preemptive), simulates it with desim and checks
every statistic for which a formula is *exact* under the station's assumptions:

=====================================  ==========================================================
station                                checks (source, as in references.md)
=====================================  ==========================================================
no patience, exponential hold          Erlang C: P(W>0), mean wait, mean queue, service level,
                                       busy λh/c (Erlang 1917; Kleinrock 1975)
exponential patience, exp. hold        Erlang A: P(W>0), P(Ab), mean wait, service level, mean
                                       queue, busy λh(1−P(Ab))/c (Garnett, Mandelbaum and Reiman
                                       2002; Mandelbaum and Zeltyn 2005)
patience 0 (loss system), any hold     Erlang B: blocking per class, busy λh(1−B)/c (Erlang
                                       1917; insensitive to the holding-time distribution)
classes, no patience, exp. hold        Cobham: per-class mean wait; per-class P(W>0) = Erlang C
                                       (arrivals see time averages and the busy-agent count is
                                       that of M/M/c); busy λh/c (Cobham 1954)
=====================================  ==========================================================

Anything not exact is said in ``notes`` (e.g. Erlang C with a non-exponential hold, an unstable
station without patience). In overload with patience, Whitt's (2006) fluid figures are listed as
``informative`` rows, never judged.

The simulated figures: ``p_wait`` per replication is the share of the waits recorded in the
window (``record_waits``) that are positive; ``mean_wait`` is the place's ``wait`` (all jobs,
served or abandoning); ``mean_queue`` its ``queue``; ``service_level`` its ``served_within``
(the target ``within``; abandoned jobs count against); ``p_abandon`` and ``blocking`` its
``abandoned``; ``busy`` the pool's ``busy``.

``agrees``: the formula lies inside the simulated interval at level 1 − 0.05/m, m the number of
judged checks (Bonferroni), so that a correct simulator fails *any* of its m checks in at most
5 % of runs (:data:`FAMILY_WISE_LEVEL`); each interval is a Student t interval over the
per-replication values (n − 1 degrees of freedom). Judging every check at 95 % on its own would
let a correct simulator print a failing check in up to one run in four (six checks:
1 − 0.95⁶ ≈ 0.26). The rows shown for information only keep the 95 % interval. A degenerate
interval (every
replication gave the same value, e.g. nobody waited) agrees when the formula lies within
:data:`DEGENERATE_TOLERANCE` × max(1, |formula|) of that value; an estimate with fewer than two
replications or no data never agrees.

Times are in the station's time unit: ``arrival_rate`` per time unit, ``mean_hold``,
``patience_mean`` and ``within`` in time units. The default ``within`` is a tenth of the mean
hold (e.g. 18 s for a 3-minute call, near the common 20-second goal of call centres; common
practice).
"""

from __future__ import annotations

import concurrent.futures as cf
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, Callable

import pandas as pd

from desim import (Estimate, SettingsError, SimulationResult, SimulationSettings, replicate,
                   resolve_settings)
from fluid.loading import load_scenario_text, with_changes
from fluid.stations import POOL, station_yaml
from fluid.scenario import RunSettings, Scenario

from ..formulas.erlang import erlang_a_queue, erlang_b_loss, erlang_c_queue
from ..formulas.priority import cobham_waits
from ..formulas.whitt import whitt_fluid

__all__ = [
    "DEGENERATE_TOLERANCE",
    "FAMILY_WISE_LEVEL",
    "SOURCES",
    "StationCheck",
    "StationResult",
    "agrees",
    "check_level",
    "station_check",
    "station_run",
    "station_scenario",
    "station_yaml",
]

DEGENERATE_TOLERANCE = 1e-3
#: The chance that a correct simulator passes every judged check (Bonferroni over the checks).
FAMILY_WISE_LEVEL = 0.95


def check_level(m: int, family_wise: float = FAMILY_WISE_LEVEL) -> float:
    """Level of each of ``m`` checks so that all pass together with chance at least
    ``family_wise`` when the formulas are right: 1 − (1 − family_wise)/m (Bonferroni's
    inequality, P(any fails) <= Σ P(check i fails))."""
    return 1 - (1 - family_wise) / max(1, int(m))

#: Where each formula is published (references.md).
SOURCES = {
    "erlang_c": "Erlang (1917); Kleinrock, Queueing Systems I (1975), M/M/m",
    "erlang_a": "Garnett, Mandelbaum and Reiman (2002); Mandelbaum and Zeltyn (2005)",
    "erlang_b": "Erlang (1917), Erlang B (insensitive to the holding-time distribution)",
    "cobham": "Cobham (1954), Operations Research 2(1):70-76",
    "whitt": "Whitt (2006), Operations Research 54(1):37-54",
}
_POOL = POOL  # the station's pool (fluid.stations)


def agrees(formula: float, est: Estimate) -> bool:
    """True when ``formula`` lies in the estimate's interval (degenerate intervals: see the
    module docstring)."""
    if est.n < 2 or not math.isfinite(est.mean) or not math.isfinite(formula):
        return False
    if est.high - est.low <= 0 or not math.isfinite(est.high - est.low):
        return abs(formula - est.mean) <= DEGENERATE_TOLERANCE * max(1.0, abs(formula))
    return est.low <= formula <= est.high


@dataclass(frozen=True)
class StationCheck:
    """One statistic: ``metric`` at ``where`` (a queue place), the ``formula`` value, the
    ``simulation`` estimate, whether they ``agree``, and the formula's ``source``."""

    metric: str
    where: str
    formula: float
    simulation: Estimate
    agrees: bool
    source: str

    def to_json(self) -> dict:
        return {"metric": self.metric, "where": self.where,
                "formula": self.formula if math.isfinite(self.formula) else None,
                "simulation": self.simulation.to_json(), "agrees": bool(self.agrees),
                "source": self.source}


@dataclass(frozen=True)
class StationResult:
    """Outcome of :func:`station_check`. ``model``: the exact model that applies ("Erlang C",
    "Erlang A", "Erlang B", "Cobham" or "none"); ``checks``: judged rows; ``informative``:
    rows shown but not judged (Whitt's fluid model in overload); ``notes``: what was not checked
    and why; ``simulation``: the :class:`desim.SimulationResult`."""

    servers: int
    arrival_rate: float
    mean_hold: float
    patience_mean: float | None
    hold_cv: float
    class_rates: tuple[float, ...] | None
    within: float
    model: str
    checks: tuple[StationCheck, ...]
    informative: tuple[StationCheck, ...]
    notes: tuple[str, ...]
    simulation: SimulationResult = field(repr=False)
    scenario: Scenario = field(repr=False)
    overrides: Mapping[str, Any] | None = None
    level: float = 0.95  # each judged check's interval level (Bonferroni: check_level)
    family_wise_level: float = FAMILY_WISE_LEVEL

    @property
    def all_agree(self) -> bool:
        return all(c.agrees for c in self.checks)

    def check(self, metric: str, where: str | None = None) -> StationCheck:
        """The check of ``metric`` (at ``where`` when several places have one)."""
        for c in self.checks:
            if c.metric == metric and (where is None or c.where == where):
                return c
        raise KeyError(f"no check of {metric!r}" + (f" at {where!r}" if where else ""))

    def to_frame(self) -> pd.DataFrame:
        """Tidy table: metric, where, formula, mean, low, high, n, agrees, judged, source."""
        rows = [(c.metric, c.where, c.formula, c.simulation.mean, c.simulation.low,
                 c.simulation.high, c.simulation.n, c.agrees, judged, c.source)
                for rows, judged in ((self.checks, True), (self.informative, False))
                for c in rows]
        return pd.DataFrame(rows, columns=["metric", "where", "formula", "mean", "low", "high",
                                           "n", "agrees", "judged", "source"])

    def to_json(self) -> dict:
        """``{"servers", "arrival_rate", "mean_hold", "patience_mean", "hold_cv",
        "class_rates", "within", "time_unit", "model", "checks": [...], "informative": [...],
        "notes": [...], "all_agree", "level" (each judged check's interval), "family_wise_level"
        (all judged checks together, Bonferroni), "replications", "horizon", "warmup",
        "seed", "targets" (what the service level measures: the simulation's targets)}``."""
        sim = self.simulation
        return {
            "servers": self.servers, "arrival_rate": self.arrival_rate,
            "mean_hold": self.mean_hold, "patience_mean": self.patience_mean,
            "hold_cv": self.hold_cv,
            "class_rates": None if self.class_rates is None else list(self.class_rates),
            "within": self.within, "time_unit": self.scenario.time_unit, "model": self.model,
            "checks": [c.to_json() for c in self.checks],
            "informative": [c.to_json() for c in self.informative],
            "notes": list(self.notes), "all_agree": self.all_agree,
            "level": self.level, "family_wise_level": self.family_wise_level,
            "replications": sim.replications, "horizon": sim.horizon, "warmup": sim.warmup,
            "seed": sim.seed,
            "simulate_overrides": None if self.overrides is None else dict(self.overrides),
            "targets": dict(sim.targets),
        }


# --- the scenario --------------------------------------------------------------------------------


def station_scenario(servers: int, arrival_rate: float, mean_hold: float, **kw) -> Scenario:
    """The single-station :class:`Scenario` of :func:`station_yaml` (same arguments)."""
    return load_scenario_text(station_yaml(servers, arrival_rate, mean_hold, **kw),
                              file="<station>")


# --- checking ------------------------------------------------------------------------------------


def _check_inputs(servers, arrival_rate, mean_hold, patience_mean, hold_cv, hold_dist,
                  class_rates, within):
    if isinstance(servers, bool) or int(servers) != servers or servers < 1:
        raise ValueError(f"servers must be a whole number >= 1 (got {servers!r})")
    for name, v in (("arrival_rate", arrival_rate), ("mean_hold", mean_hold)):
        if not (math.isfinite(v) and v > 0):
            raise ValueError(f"{name} must be a positive number (got {v!r})")
    if patience_mean is not None and not (math.isfinite(patience_mean) and patience_mean >= 0):
        raise ValueError(f"patience_mean must be a number >= 0 (got {patience_mean!r})")
    if not (math.isfinite(hold_cv) and hold_cv >= 0):
        raise ValueError(f"hold_cv must be a number >= 0 (got {hold_cv!r})")
    if hold_dist not in ("lognormal", "gamma"):
        raise ValueError(f"hold_dist must be 'lognormal' or 'gamma' (got {hold_dist!r})")
    if within is not None and not (math.isfinite(within) and within >= 0):
        raise ValueError(f"within must be a number >= 0 (got {within!r})")
    if class_rates is not None:
        rates = [float(r) for r in class_rates]
        if not rates or any(not (math.isfinite(r) and r > 0) for r in rates):
            raise ValueError(f"class_rates must be positive numbers (got {class_rates!r})")
        if abs(sum(rates) - arrival_rate) > 1e-9 * max(1.0, arrival_rate):
            raise ValueError(f"class rates sum to {sum(rates):g}, but the arrival rate is "
                             f"{arrival_rate:g}")


def _p_wait(sim: SimulationResult, place: str) -> Estimate:
    """P(W > 0): the share of jobs not taken the instant they became available (desim's
    ``delayed``), per replication."""
    return sim.places[place]["delayed"]


def station_run(arrival_rate: float, horizon: float | None = None) -> RunSettings:
    """The station's default simulation: 20 replications of about 20 000 arrivals each
    (``horizon = 20000 / arrival_rate`` unless given), a tenth of the horizon as warm-up, base
    seed 1."""
    horizon = 20_000 / arrival_rate if horizon is None else float(horizon)
    return RunSettings(horizon=horizon, warmup=horizon / 10, replications=20, seed=1)


def station_check(servers: int, arrival_rate: float, mean_hold: float, *,
                  patience_mean: float | None = None, hold_cv: float = 1.0,
                  hold_dist: str = "lognormal", class_rates: Sequence[float] | None = None,
                  within: float | None = None, settings: SimulationSettings | None = None,
                  reps: int | None = None, horizon: float | None = None,
                  warmup: float | None = None, seed: int | None = None,
                  workers: int | None = None, executor: cf.Executor | None = None,
                  progress: Callable[[], object] | None = None, time_unit: str = "min",
                  _simulate_overrides: Mapping[str, Any] | None = None,
                  out=None, resume: bool = False) -> StationResult:
    """Simulate the single station and check it against the formulas that are exact for it.

    ``servers`` agents; Poisson arrivals at ``arrival_rate`` per time unit (split over
    ``class_rates``, highest priority first, when given: they must sum to ``arrival_rate``);
    holds of mean ``mean_hold`` and coefficient of variation ``hold_cv`` (``hold_dist`` when not
    1 or 0); exponential patience of mean ``patience_mean`` (None: nobody abandons; 0: a loss
    system); service level within ``within`` (default ``mean_hold / 10``). Simulation:
    ``settings`` and the keywords as in :func:`compare.compare`, unset ones from
    :func:`station_run` (20 replications of about 20 000 arrivals, a tenth as warm-up, seed 1);
    at least two replications (an interval needs them).

    ``_simulate_overrides``: changes (``--set`` paths, e.g. ``{"sources.calls.rate": 1.2}``)
    applied to the simulated scenario only, leaving the formulas at the declared parameters —
    a hook for tests that feed the simulation a wrong parameter on purpose.
    """
    _check_inputs(servers, arrival_rate, mean_hold, patience_mean, hold_cv, hold_dist,
                  class_rates, within)
    within = mean_hold / 10 if within is None else float(within)
    cfg = resolve_settings(station_run(arrival_rate, horizon), settings, reps=reps, horizon=horizon, warmup=warmup, seed=seed,
                           workers=workers, executor=executor, out=out, resume=resume or None)
    if cfg.replications < 2:
        raise SettingsError("replications", f"must be >= 2 for an interval (got "
                            f"{cfg.replications})")
    classes = None if class_rates is None else tuple(float(r) for r in class_rates)
    scenario = station_scenario(servers, arrival_rate, mean_hold, patience_mean=patience_mean,
                                hold_cv=hold_cv, hold_dist=hold_dist, class_rates=classes,
                                within=within, time_unit=time_unit)
    simulated = scenario if not _simulate_overrides else with_changes(scenario,
                                                                      dict(_simulate_overrides))
    sim = replicate(simulated, settings=cfg, progress=progress, record_waits=True)
    places = ["queue"] if classes is None else [f"queue_{k}" for k in range(1, len(classes) + 1)]
    model, formulas, informative, notes = _formulas(
        servers, arrival_rate, mean_hold, patience_mean, hold_cv, classes, within, places)
    level = check_level(len(formulas))
    checks = tuple(_judge(sim, *f, level=level) for f in formulas)
    info = tuple(_judge(sim, *f) for f in informative)
    info = tuple(StationCheck(c.metric, c.where, c.formula, c.simulation, False, c.source)
                 for c in info)
    return StationResult(
        servers=int(servers), arrival_rate=float(arrival_rate), mean_hold=float(mean_hold),
        patience_mean=patience_mean, hold_cv=float(hold_cv), class_rates=classes, within=within,
        model=model, checks=checks, informative=info, notes=tuple(notes), simulation=sim,
        scenario=scenario,
        overrides=None if not _simulate_overrides else dict(_simulate_overrides),
        level=level,
    )


def _judge(sim: SimulationResult, metric: str, where: str, formula: float,
           source: str, level: float = 0.95) -> StationCheck:
    """One check: the Student t interval at ``level`` over the per-replication values."""
    if metric == "p_wait":
        kind, name = "place", "delayed"  # (see _p_wait)
    elif metric == "busy":
        kind, name = "pool", "busy"
    else:
        kind = "place"
        name = {"mean_wait": "wait", "mean_queue": "queue", "service_level": "served_within",
                "p_abandon": "abandoned", "blocking": "abandoned"}[metric]
    est = Estimate.from_values(sim.raw(kind, where, name), level=level)
    return StationCheck(metric, where, float(formula), est, agrees(float(formula), est), source)


def _formulas(servers, lam, hold, patience, cv, classes, within, places):
    """``(model, checks, informative, notes)``; each check a tuple (metric, where, formula,
    source)."""
    load = lam * hold
    checks: list[tuple] = []
    informative: list[tuple] = []
    notes: list[str] = []
    exp_hold = cv == 1.0

    if patience == 0:
        b = erlang_b_loss(servers, lam, hold)
        for p in places:
            checks.append(("blocking", p, b, SOURCES["erlang_b"]))
        checks.append(("busy", _POOL, load * (1 - b) / servers, SOURCES["erlang_b"]))
        notes.append("patience 0: a loss system; Erlang B blocking holds for any holding-time "
                     "distribution with this mean (waits are zero by construction)")
        if classes is not None:
            notes.append("every class sees the same blocking (Poisson arrivals see time "
                         "averages; priority plays no part without a queue)")
        return "Erlang B", checks, informative, notes

    if patience is None:
        if load >= servers:
            notes.append(f"offered load {load:g} >= {servers} agents without patience: no steady "
                         "state, the queue grows; nothing is judged")
            return "none", checks, informative, notes
        if not exp_hold:
            notes.append(f"hold cv {cv:g} != 1: Erlang C and Cobham are exact only for "
                         "exponential holds; waits, queue and service level are not judged")
            checks.append(("busy", _POOL, load / servers, SOURCES["erlang_c"]))
            notes.append("busy = λh/c holds for any hold distribution (no abandonment)")
            return "none", checks, informative, notes
        c = erlang_c_queue(servers, lam, hold)
        if classes is None:
            p = places[0]
            checks += [("p_wait", p, c.p_wait, SOURCES["erlang_c"]),
                       ("mean_wait", p, c.mean_wait, SOURCES["erlang_c"]),
                       ("mean_queue", p, c.mean_queue, SOURCES["erlang_c"]),
                       ("service_level", p, c.service_level(within), SOURCES["erlang_c"]),
                       ("busy", _POOL, c.utilisation, SOURCES["erlang_c"])]
            return "Erlang C", checks, informative, notes
        waits = cobham_waits(servers, classes, hold)
        for p, rate, w in zip(places, classes, waits):
            checks.append(("p_wait", p, c.p_wait, SOURCES["cobham"]))
            checks.append(("mean_wait", p, w, SOURCES["cobham"]))
        checks.append(("busy", _POOL, c.utilisation, SOURCES["erlang_c"]))
        notes.append("per-class service levels and queues have no closed form under priority; "
                     "not judged")
        return "Cobham", checks, informative, notes

    # exponential patience
    if load > servers:
        from fluid.distributions import Exponential

        fl = whitt_fluid(lam, servers, hold, Exponential(patience).cdf)
        for p in places[:1] if classes is None else ():
            informative += [("p_abandon", p, fl.p_abandon, SOURCES["whitt"]),
                            ("mean_queue", p, fl.queue, SOURCES["whitt"])]
        notes.append("overloaded with patience: Whitt's fluid figures are listed for "
                     "information only (exact only in the many-server limit)")
    if classes is not None:
        notes.append("priority classes with patience: no exact formula; nothing is judged")
        return "none", checks, informative, notes
    if not exp_hold:
        notes.append(f"hold cv {cv:g} != 1: Erlang A is exact only for exponential holds; "
                     "nothing is judged (the busy fraction needs the exact P(Ab))")
        return "none", checks, informative, notes
    a = erlang_a_queue(servers, lam, hold, patience)
    p = places[0]
    src = SOURCES["erlang_a"]
    checks += [("p_wait", p, a.p_wait, src), ("p_abandon", p, a.p_abandon, src),
               ("mean_wait", p, a.mean_wait, src), ("mean_queue", p, a.mean_queue, src),
               ("service_level", p, a.service_level(within), src),
               ("busy", _POOL, lam * hold * (1 - a.p_abandon) / servers, src)]
    return "Erlang A", checks, informative, notes
