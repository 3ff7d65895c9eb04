"""The fitted pieces written as a scenario (design.md §3), with a comment on every value
saying what it came from.

Without an existing scenario: one source into one queue served by one pool (``calls`` ->
``queue`` -> ``answer`` -> ``talk`` -> ``close``), the profile on the source, patience on the
queue and the hold on the talk. With one (``fill_scenario``): the fields of its source (the
arrivals), waiting place (patience) and holding place (hold) are replaced and the rest kept
(its comments are not: the document is written again). The text returned is checked by
loading it (:func:`fluid.loading.load_scenario_text`).

A day factor fitted from counts is the field ``random_rate: {dist: gamma, cv: C}`` of the
source (a comment instead when its cv lies outside what the format takes,
:data:`fluid.sources.RANDOM_RATE_CV`).
"""

from __future__ import annotations

import copy
import math
from dataclasses import dataclass

from fluid.errors import ScenarioError
from fluid.sources import SMALLEST_RATE_CV, RANDOM_RATE_CV

from .fit_input import clock
from .yaml_notes import to_yaml

__all__ = ["FittedScenario", "records_scenario", "counts_scenario", "fill_scenario", "clock"]

CAUTION_LINE = ("Decision support under the model's assumptions (Poisson arrivals per "
                "interval, independent holds and patience); defer to local regulations and "
                "professional practice when staffing.")


@dataclass(frozen=True)
class FittedScenario:
    """The scenario ``text`` (YAML with comments) and its ``document`` (plain data)."""

    text: str
    document: dict


def _r(x: float) -> float:
    """Six significant digits: what the scenario keeps of a fitted value."""
    return float(f"{x:.6g}")


def _intervals_text(fit) -> str:
    parts = []
    for key, value in fit.params.items():
        if key in fit.intervals:
            lo, hi = fit.intervals[key]
            parts.append(f"{key} {value:.4g} [{lo:.4g}, {hi:.4g}]")
        else:
            parts.append(f"{key} {value:g}")
    return ", ".join(parts)


def family_notes(choice, what: str, basis: str) -> list[str]:
    """Comment lines on a fitted family: the choice, the data, the intervals, the fit."""
    best = choice.chosen
    ranked = sorted(choice.fits, key=lambda f: f.aic)
    others = ", ".join(f"{f.family} {f.aic - best.aic:+.1f}" for f in ranked if f is not best)
    gof = (f"Kolmogorov-Smirnov {best.statistic:.3g} (p {best.p_value:.3g}, optimistic: "
           "fitted on the same data)" if best.p_value is not None
           else f"largest gap to the Kaplan-Meier curve {best.statistic:.3g}")
    close = [f.family for f in ranked if f is not best and f.aic - best.aic < 2]
    caveat = ([f"  within 2 of its AIC: {', '.join(close)}; the data hardly tell them apart "
               "(longer records would)"] if close else [])
    return [f"{what}: {best.family}, chosen by AIC among the format's families (AIC "
            f"difference to it: {others or 'none fitted'})", *caveat,
            f"  maximum likelihood on {basis}",
            f"  {_intervals_text(best)} ({int(best.level * 100)} %, Wald on the log scale from "
            f"the observed information); {gof}"]


def _spec(choice) -> dict:
    return {k: (_r(v) if isinstance(v, float) else v) for k, v in choice.chosen.spec().items()}


def _records_profile(fit) -> tuple[dict, dict, list[str]]:
    p = fit.profile
    stamped = fit.stamped
    labels = []
    for i, n in enumerate(p.counts):
        a, b = p.start + i * p.step, p.start + (i + 1) * p.step
        labels.append(f"{clock(a, fit.time_unit, stamped)}-{clock(b, fit.time_unit, stamped)}"
                      f": {int(n)} arrivals")
    spec = {"step": _r(p.step), "rates": [_r(x) for x in p.rates]}
    after = {("rates", i): f"{labels[i]}, {int(p.level * 100)} % [{lo:.4g}, {hi:.4g}]"
             for i, (lo, hi) in enumerate(zip(p.low, p.high))}
    day = "day" if p.days == 1 else "days"
    notes = [f"arrivals: counted per interval of {p.step:g} {fit.time_unit} from "
             f"{clock(p.start, fit.time_unit, stamped)} (scenario time 0) over {p.days} {day}, "
             f"divided by step x days; Poisson (Garwood) intervals per interval"]
    return spec, after, notes


def _counts_profile(fit, stamped: bool, time_unit: str) -> tuple[dict, dict, list[str]]:
    spec = {"step": _r(fit.step), "rates": [_r(x) for x in fit.rates]}
    after = {("rates", i): f"interval {lab}: mean count {m:.4g}, dispersion {d:.3g}, "
             f"{int(fit.level * 100)} % [{lo:.4g}, {hi:.4g}]"
             for i, (lab, m, d, lo, hi) in enumerate(zip(fit.intervals, fit.mean,
                                                          fit.dispersion, fit.low, fit.high))}
    notes = [f"arrivals: mean count per interval of {fit.step:g} {time_unit} over {fit.days} "
             "days, divided by the step; Poisson (Garwood) intervals; dispersion: the index "
             "of dispersion of the interval's counts across days (1 for Poisson)"]
    return spec, after, notes


def _factor_notes(fit) -> list[str]:
    f = fit.factor
    return [f"random_rate: the day-level gamma factor of the whole profile (Jongbloed and "
            f"Koole 2001), cv {f.cv:.4g} [{f.low:.4g}, {f.high:.4g}] ({int(f.level * 100)} %, "
            f"profile likelihood of the negative binomial daily totals; moments: "
            f"{f.moments_cv:.4g}) from {f.days} days; index of dispersion of the daily "
            f"totals {fit.total_dispersion:.4g} (1 for Poisson)"]


def _source_entry(spec: dict, after: dict, notes: list[str], path: tuple, into: str,
                  counts_fit, keep: dict | None = None) -> tuple[dict, dict, dict]:
    """The source's mapping with its profile (and day factor), and the comments at ``path``."""
    entry = {k: v for k, v in (keep or {}).items()
             if k not in ("rate", "profile", "trace", "random_rate")}
    entry["profile"] = spec
    entry.setdefault("into", into)
    above = {path + ("profile",): notes}
    aft = {path + ("profile",) + k: v for k, v in after.items()}
    if counts_fit is not None:
        factor = {"dist": "gamma", "cv": _r(counts_fit.factor.cv)}
        lines = _factor_notes(counts_fit)
        if SMALLEST_RATE_CV <= factor["cv"] <= RANDOM_RATE_CV:
            entry["random_rate"] = factor
            above[path + ("random_rate",)] = lines
        else:  # (outside what the format takes: said, not written as a field)
            why = (f"above the format's largest cv {RANDOM_RATE_CV:g}" if factor["cv"] > 1
                   else "too small to tell from Poisson")
            lines = lines + [f"random_rate: cv {factor['cv']!r} is {why}; not set"]
            above[path + ("into",)] = above.get(path + ("into",), []) + lines
    return entry, above, aft


def _check(text: str, file: str, base_dir: str | None) -> None:
    import warnings

    from fluid.loading import load_scenario_text

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        load_scenario_text(text, file=file, base_dir=base_dir)


def records_scenario(fit, *, name: str | None = None, staff: int | None = None,
                     counts_fit=None) -> FittedScenario:
    """The one-queue, one-pool scenario of a :class:`~compare.study.fit_records.RecordsFit`."""
    if fit.hold is None:
        raise ScenarioError(fit.file, "column ended", "no answered call of positive length: "
                            "the hold cannot be fitted, so no scenario is written")
    spec, after, notes = _records_profile(fit)
    horizon = _r(fit.profile.step * fit.profile.counts.size)
    doc = {"name": name or f"Fitted from {fit.file}", "time_unit": fit.time_unit,
           "run": {"horizon": horizon, "warmup": 0.0, "replications": 20, "seed": 1},
           "sources": {}, "pools": {}, "places": {}, "transitions": {}}
    entry, above, aft = _source_entry(spec, after, notes, ("sources", "calls"), "queue",
                                      counts_fit)
    doc["sources"]["calls"] = entry
    doc["pools"]["agents"] = int(staff if staff is not None else max(fit.most_in_talk, 1))
    above[("pools", "agents")] = (
        ["staff: given with --staff"] if staff is not None else
        [f"staff: {fit.most_in_talk}, the most answered calls in progress at once in the "
         "records (a lower bound on the staff that was on duty): set the staff to study"])
    queue: dict = {}
    if fit.patience is not None:
        queue["patience"] = _spec(fit.patience)
        above[("places", "queue")] = family_notes(
            fit.patience, "patience",
            f"{fit.patience.observed} waits of callers who gave up and "
            f"{fit.patience.censored} waits of answered callers (right-censored), with the "
            "Kaplan-Meier estimate beside it")
    else:
        above[("places", "queue")] = ["no patience: no caller gave up after waiting in the "
                                      "records"]
    doc["places"]["queue"] = queue
    doc["places"]["talk"] = {"hold": _spec(fit.hold)}
    above[("places", "talk")] = family_notes(fit.hold, "hold",
                                             f"{fit.hold.observed} answered calls "
                                             "(ended - answered)")
    doc["transitions"] = {"answer": {"in": ["queue", "agents"], "out": ["talk"]},
                          "close": {"in": ["talk"], "out": ["agents"]}}
    above[("run",)] = ["run: one day of the profile, starting empty"]
    header = [f"Fitted by fluidgap fit from {fit.file}: {fit.calls} calls over "
              f"{fit.profile.days} day(s), {fit.served} answered, {fit.abandoned} gave up.",
              CAUTION_LINE]
    text = to_yaml(doc, header=header, above=above, after=aft)
    _check(text, "<fitted scenario>", None)
    return FittedScenario(text=text, document=doc)


def counts_scenario(fit, *, time_unit: str, stamped: bool, name: str | None = None
                    ) -> FittedScenario:
    """A one-queue scenario of a :class:`~compare.study.fit_counts.CountsFit`: the counts say
    nothing of holds or staff, so those are placeholders, marked so."""
    spec, after, notes = _counts_profile(fit, stamped, time_unit)
    horizon = _r(fit.step * len(fit.rates))
    doc = {"name": name or f"Fitted from {fit.file}", "time_unit": time_unit,
           "run": {"horizon": horizon, "warmup": 0.0, "replications": 20, "seed": 1},
           "sources": {}, "pools": {"agents": 1},
           "places": {"queue": {}, "talk": {"hold": {"dist": "exponential", "mean": 1.0}}},
           "transitions": {"answer": {"in": ["queue", "agents"], "out": ["talk"]},
                           "close": {"in": ["talk"], "out": ["agents"]}}}
    entry, above, aft = _source_entry(spec, after, notes, ("sources", "calls"), "queue", fit)
    doc["sources"]["calls"] = entry
    placeholder = ("PLACEHOLDER, not from the counts: replace it (or fill an existing "
                   "scenario with --into)")
    above[("pools", "agents")] = [f"staff: {placeholder}"]
    above[("places", "talk")] = [f"hold: {placeholder}"]
    header = [f"Fitted by fluidgap fit --counts from {fit.file}: {fit.days} days of "
              f"{len(fit.rates)} intervals.", CAUTION_LINE]
    text = to_yaml(doc, header=header, above=above, after=aft)
    _check(text, "<fitted scenario>", None)
    return FittedScenario(text=text, document=doc)


def fill_scenario(scenario, *, records_fit=None, counts_fit=None, source: str | None = None,
                  queue: str | None = None, hold: str | None = None,
                  time_unit: str | None = None, stamped: bool = False) -> FittedScenario:
    """The existing ``scenario`` (a loaded :class:`fluid.scenario.Scenario`) with its fields
    filled from the fit: the arrivals of ``source`` (default: the one source into ``queue``),
    the patience of ``queue`` and the hold of ``hold``. Raises ScenarioError naming the flag
    when a name is not in it."""
    import json

    file = scenario.file
    doc = copy.deepcopy(json.loads(scenario.document))
    sources = doc.get("sources") or {}
    places = doc.get("places") or {}
    for flag, place in (("--queue", queue), ("--hold", hold)):
        if place is not None and place not in places:
            raise ScenarioError(file, flag, f"{place} is not a place of the scenario; its "
                                "places are " + ", ".join(places))
    if time_unit is not None and doc.get("time_unit", "min") != time_unit:
        raise ScenarioError(file, "time_unit", f"is {doc.get('time_unit')!s} while the data "
                            f"are read in {time_unit} (give --time-unit "
                            f"{doc.get('time_unit')})")
    above: dict = {}
    after: dict = {}
    header = [f"Filled by fluidgap fit from {(records_fit or counts_fit).file} into {file} "
              "(the comments of the original are not kept).", CAUTION_LINE]
    if source is None and (queue is not None or counts_fit is not None):
        feeding = [n for n, s in sources.items() if isinstance(s, dict) and
                   (queue is None or s.get("into") == queue)]
        if len(feeding) != 1:
            where = f"into {queue}" if queue is not None else "in the scenario"
            raise ScenarioError(file, "--source", f"{len(feeding)} sources {where}: name the "
                                "one whose arrivals the data give with --source")
        source = feeding[0]
    if source is not None:
        if source not in sources:
            raise ScenarioError(file, "--source", f"{source} is not a source of the "
                                "scenario; its sources are " + ", ".join(sources))
        if records_fit is not None:
            spec, aft, notes = _records_profile(records_fit)
        else:
            spec, aft, notes = _counts_profile(counts_fit, stamped, time_unit or "min")
        entry, ab, af = _source_entry(spec, aft, notes, ("sources", source),
                                      sources[source].get("into"), counts_fit,
                                      keep=sources[source])
        sources[source] = entry
        above.update(ab)
        after.update(af)
    if records_fit is not None and queue is not None and records_fit.patience is not None:
        places[queue] = {**(places[queue] or {}), "patience": _spec(records_fit.patience)}
        above[("places", queue)] = family_notes(
            records_fit.patience, "patience",
            f"{records_fit.patience.observed} waits of callers who gave up and "
            f"{records_fit.patience.censored} waits of answered callers (right-censored)")
    if records_fit is not None and hold is not None:
        if records_fit.hold is None:
            raise ScenarioError(records_fit.file, "--hold", "no answered call of positive "
                                "length: the hold cannot be fitted")
        places[hold] = {**(places[hold] or {}), "hold": _spec(records_fit.hold)}
        above[("places", hold)] = family_notes(records_fit.hold, "hold",
                                               f"{records_fit.hold.observed} answered calls")
    text = to_yaml(doc, header=header, above=above, after=after)
    _check(text, file, scenario.base_dir)
    return FittedScenario(text=text, document=doc)
