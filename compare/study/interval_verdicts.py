"""Targets judged interval by interval: the flag kind ``interval_target``.

The whole-day verdict (``target_missed``) can pass while the peak fails. Here every target is
judged in every interval of the comparison's per-interval table (:mod:`compare.study.day_table`):

* a service target at place ``p`` misses in an interval when that interval's whole simulated
  95 % interval lies below the goal (``high < goal``; metric ``service_level``);
* the abandonment maximum misses in an interval when its whole interval lies above the maximum
  (``low > max``; metric ``abandonment``, the share of the interval's callers who ended
  unserved).

One flag per target, not one per interval: the message says in how many of how many intervals
it misses and which (clock ranges, consecutive intervals merged: ``12:30-13:15``), the worst
interval, and what to add there: per interval, the agents that Erlang C (no patience) or Erlang
A (patience taken as exponential with its mean) asks for at the interval's fluid offered load,
less the scheduled staff (:func:`compare.formulas.staffing.erlang_c_min_servers`,
:func:`~compare.formulas.staffing.erlang_a_min_servers`). The estimate needs the target's
place to be served by one pool that serves no other waiting place; otherwise the flag says that
it cannot be estimated. Each interval is taken as if in steady state at its own rates, so the
estimate is a rough guide: a backlog carried over from an earlier interval is not in it.
"""

from __future__ import annotations

import math

import pandas as pd

from fluid.clock import clock_range
from fluid.scenario import Scenario
from fluid.structure import serving_pools, waiting_places

from ..formulas.staffing import erlang_a_min_servers, erlang_c_min_servers
from .day_table import IntervalLoads, day_table
from .flags import STAFF_ADVICE, Flag

__all__ = ["INTERVAL_KIND", "interval_flags", "missed_runs"]

INTERVAL_KIND = "interval_target"


def _f(x: float) -> str:
    return f"{x:.3g}"


def _pct(x: float) -> str:
    return f"{100 * x:.1f} %"


def missed_runs(scenario: Scenario, rows: list[dict]) -> list[str]:
    """Clock ranges of ``rows`` (wide-table rows in interval order), consecutive intervals
    merged into one range."""
    runs: list[list[dict]] = []
    for row in rows:
        if runs and runs[-1][-1]["interval"] + 1 == row["interval"]:
            runs[-1].append(row)
        else:
            runs.append([row])
    return [clock_range(scenario, run[0]["start"], run[-1]["end"]) for run in runs]


def _single_pool(scenario: Scenario, place: str) -> tuple[str | None, str]:
    """(the one pool serving ``place``, "") or (None, why the extra agents cannot be
    estimated)."""
    pools = serving_pools(scenario, place)
    if len(pools) != 1:
        return None, (f"{place} is served by {len(pools)} pools" if pools
                      else f"no pool serves {place}")
    pool = pools[0]
    others = [q for q in waiting_places(scenario)
              if q != place and pool in serving_pools(scenario, q)]
    if others:
        return None, f"pool {pool} also serves {', '.join(others)}"
    return pool, ""


def _needed(scenario: Scenario, loads: IntervalLoads, place: str, pool: str, row: dict, *,
            within=None, goal=None, max_abandon=None) -> int | None:
    """Agents Erlang C/A asks for in the interval of ``row`` (None when it cannot say)."""
    lam = loads.inflow(row["start"], row["end"])[place]
    work = row.get(f"offered.{pool}", math.nan)
    if not (lam > 0 and math.isfinite(lam) and work > 0 and math.isfinite(work)):
        return None
    hold = work / lam  # the agent time each job of the place takes (wrap-up and follow-ups too)
    patience = scenario.places[place].patience
    try:
        if patience is not None:
            if not patience.mean > 0:
                return None
            return erlang_a_min_servers(lam, hold, patience.mean, within=within, goal=goal,
                                        max_abandon=max_abandon)
        if within is None:
            return None
        return erlang_c_min_servers(lam, hold, within, goal)
    except ValueError:  # a goal of 1, a target no finite staff reaches
        return None


def _extras_text(scenario: Scenario, missed: list[dict], needs: list[int | None],
                 pool: str) -> str:
    extras = [None if n is None else max(0, math.ceil(n - row[f"scheduled.{pool}"] - 1e-9))
              for row, n in zip(missed, needs)]
    groups: list[tuple[list[dict], int | None]] = []
    for row, extra in zip(missed, extras):
        if (groups and groups[-1][1] == extra
                and groups[-1][0][-1]["interval"] + 1 == row["interval"]):
            groups[-1][0].append(row)
        else:
            groups.append(([row], extra))
    parts = [f"{clock_range(scenario, g[0]['start'], g[-1]['end'])} "
             + ("n/a" if extra is None else f"+{extra}") for g, extra in groups]
    text = ", ".join(parts)
    if all(e == 0 for e in extras):
        text += (" (the scheduled staff would do in steady state: the miss is a backlog "
                 "carried over from earlier intervals, so add staff before them)")
    return text


def _advice(scenario: Scenario, place: str | None, missed: list[dict], why: str,
            convention: str = "against", **target) -> str:
    if place is None:
        return f"the extra agents cannot be estimated per interval ({why}); {STAFF_ADVICE}"
    pool, why = _single_pool(scenario, place)
    if pool is None:
        return f"the extra agents cannot be estimated per interval ({why}); {STAFF_ADVICE}"
    loads = IntervalLoads(scenario)
    needs = [_needed(scenario, loads, place, pool, row, **target) for row in missed]
    if all(n is None for n in needs):
        return (f"the extra agents cannot be estimated per interval (no offered load or no "
                f"reachable Erlang target there); {STAFF_ADVICE}")
    formula = ("Erlang A, patience taken as exponential with its mean"
               if scenario.places[place].patience is not None else "Erlang C")
    if convention != "against" and scenario.places[place].patience is not None:
        # (Erlang A's service level counts abandoners against: more agents than the target's
        # own convention needs)
        formula += ", abandoners counted against"
    return (f"agents to add to pool {pool} there ({formula}, at each interval's fluid offered "
            f"load, as if in steady state: a rough guide): "
            f"{_extras_text(scenario, missed, needs, pool)}; {STAFF_ADVICE}")


def _judge(day: pd.DataFrame, key: str, misses) -> tuple[list[dict], int, list[dict]]:
    """(rows that miss, intervals judged, all rows) for the figure ``key``."""
    rows = day.to_dict("records")
    judged = [r for r in rows
              if math.isfinite(r.get(f"{key}.low", math.nan))
              and math.isfinite(r.get(f"{key}.high", math.nan))]
    return [r for r in judged if misses(r)], len(judged), rows


def _count(missed, judged: int, total: int) -> str:
    text = f"in {len(missed)} of {judged} intervals"
    if judged < total:
        text += f" (the other {total - judged} had nothing to measure or no interval)"
    return text


def _worst(scenario: Scenario, key: str, missed: list[dict], lowest: bool) -> str:
    row = (min if lowest else max)(missed, key=lambda r: r[key])
    word = "lowest" if lowest else "highest"
    return (f"{word} {_f(row[key])} [{_f(row[key + '.low'])}, {_f(row[key + '.high'])}] "
            f"at {clock_range(scenario, row['start'], row['end'])}")


def interval_flags(scenario: Scenario, transient: pd.DataFrame | None) -> tuple[Flag, ...]:
    """The ``interval_target`` flags of one comparison's tidy per-interval table (None or empty:
    none): one per service target and one for the abandonment maximum, each only when some
    interval misses. Needs replications enough for intervals (the caller judges that)."""
    if transient is None or len(transient) == 0:
        return ()
    day = day_table(scenario, transient)
    unit = scenario.time_unit
    flags: list[Flag] = []
    for place, target in scenario.targets.service.items():
        key = f"service_level.{place}"
        if key not in day.columns:
            continue
        missed, judged, rows = _judge(day, key, lambda r: r[key + ".high"] < target.goal)
        if not missed:
            continue
        describe = getattr(target, "describe", None)
        what = describe(unit) if describe else f"within {target.within:g} {unit}"
        flags.append(Flag(INTERVAL_KIND, place, (
            f"service level ({what}) at {place} lies wholly below the goal "
            f"{_pct(target.goal)} {_count(missed, judged, len(rows))}: "
            f"{', '.join(missed_runs(scenario, missed))} ({_worst(scenario, key, missed, True)}); "
            + _advice(scenario, place, missed, "", getattr(target, "abandoned", "against"),
                      within=target.within, goal=target.goal))))
    cap = scenario.targets.abandonment_max
    if cap is not None and "abandonment" in day.columns:
        missed, judged, rows = _judge(day, "abandonment", lambda r: r["abandonment.low"] > cap)
        if missed:
            impatient = [p for p in waiting_places(scenario)
                         if scenario.places[p].patience is not None]
            place = impatient[0] if len(impatient) == 1 else None
            why = ("" if place is not None else "no place has patience" if not impatient
                   else f"{len(impatient)} places have patience")
            flags.append(Flag(INTERVAL_KIND, "abandonment", (
                f"abandonment lies wholly above the maximum {_pct(cap)} "
                f"{_count(missed, judged, len(rows))}: "
                f"{', '.join(missed_runs(scenario, missed))} "
                f"({_worst(scenario, 'abandonment', missed, False)}); "
                + _advice(scenario, place, missed, why, max_abandon=cap))))
    return tuple(flags)
