"""Service-level conventions (``targets.PLACE.abandoned``): the loader, ``ServiceTarget.
describe`` and the fluid figures under each convention.

Loader and wording are the project's own contract (deterministic, exact). The fluid figures of
an overloaded impatient place follow Whitt (2006), Operations Research 54(1): served jobs all
wait w with F(w) = 1 − c/λ, the abandoners are those whose patience is below w; each
convention's closed form is derived in the comment above its check.
"""

from __future__ import annotations

import math
import textwrap

import pytest
import yaml

from fluid import ScenarioError, load_scenario_text, with_changes
from fluid.places import convention_share, stationary_place
from fluid.scenario import ServiceTarget

BASE = textwrap.dedent(
    """
    name: one queue (invented)
    time_unit: min
    run: {horizon: 100, warmup: 10, replications: 3, seed: 1}
    sources:
      calls: {rate: 3.0, into: queue}
    pools:
      agents: 2
    places:
      queue: {patience: {dist: exponential, mean: 2.0}}
      talk: {hold: 1.0}
    transitions:
      answer: {in: [queue, agents], out: [talk]}
      close: {in: [talk], out: [agents]}
    targets:
      queue: {within: 0.5, goal: 0.8}
    """
)


def load(abandoned=None):
    doc = yaml.safe_load(BASE)
    if abandoned is not None:
        doc["targets"]["queue"]["abandoned"] = abandoned
    return load_scenario_text(yaml.safe_dump(doc), file="x.yaml")


def test_default_convention_is_against():
    t = load().targets.service["queue"]
    assert (t.abandoned, t.excluded_within) == ("against", None)
    assert t.describe("min") == "within 0.5 min, abandoners counted against"


def test_each_convention_loads_and_describes_itself():
    assert load("against").targets.service["queue"].abandoned == "against"
    t = load("excluded").targets.service["queue"]
    assert (t.abandoned, t.excluded_within) == ("excluded", None)
    assert t.describe("min") == "within 0.5 min, abandoners excluded"
    t = load({"excluded_within": 0.1}).targets.service["queue"]
    assert (t.abandoned, t.excluded_within) == ("excluded_within", 0.1)
    assert t.describe("s") == ("within 0.5 s, abandoners within 0.1 s excluded (later ones "
                               "counted against)")
    assert t.to_json("min") == {"within": 0.5, "goal": 0.8, "abandoned": "excluded_within",
                                "excluded_within": 0.1, "describes": t.describe("min")}
    assert load({"excluded_within": 0}).targets.service["queue"].excluded_within == 0.0


def test_convention_survives_overrides_and_variants():
    s = load("excluded")
    assert with_changes(s, {"pools.agents": 3}).targets.service["queue"].abandoned == "excluded"


@pytest.mark.parametrize("value,field,words", [
    ("never", "targets.queue.abandoned", "must be against, excluded or {excluded_within: T}"),
    (1, "targets.queue.abandoned", "must be against"),
    ({"excluded_within": -1}, "targets.queue.abandoned.excluded_within", ">= 0"),
    ({"excluded_within": "soon"}, "targets.queue.abandoned.excluded_within", "number"),
    ({}, "targets.queue.abandoned.excluded_within", "is required"),
    ({"excluded_within": 1, "also": 2}, "targets.queue.abandoned.also", "unknown key"),
])
def test_bad_conventions_name_the_field(value, field, words):
    with pytest.raises(ScenarioError) as info:
        load(value)
    assert info.value.path == field
    assert str(info.value).startswith("x.yaml: ")
    assert words in str(info.value)


def test_convention_share_by_convention():
    # 6 taken within, 8 taken, 10 left (2 abandoned, 1 of them after the threshold)
    against = ServiceTarget("q", 1.0, 0.8)
    excluded = ServiceTarget("q", 1.0, 0.8, "excluded")
    late = ServiceTarget("q", 1.0, 0.8, "excluded_within", 0.2)
    assert convention_share(against, 6, 8, 10, 1) == 0.6
    assert convention_share(excluded, 6, 8, 10, 1) == 0.75
    assert convention_share(late, 6, 8, 10, 1) == pytest.approx(6 / 9)
    assert math.isnan(convention_share(excluded, 0, 0, 2, 0))


@pytest.mark.parametrize("within", [0.5, 3.0])
def test_whitt_overloaded_place_under_each_convention(within):
    # λ = 3 per min on 2 agents of hold 1 (c = 2), patience exponential of mean 2 (θ = 0.5):
    # P(Ab) = 1 − c/λ = 1/3; the served wait w solves F(w) = 1/3, w = 2 ln 1.5 ≈ 0.811 min.
    # Against: P(served, W <= t) = 2/3 if w <= t else 0. Excluded: 1 or 0. Excluded within
    # T2 = 0.2: taken / (taken + P(T2 < patience < w)) = (2/3) / (1 − F(T2)) if w <= t, else 0.
    w = 2 * math.log(1.5)
    scenarios = {c: with_changes(load(c), {"targets.queue.within": within})
                 for c in ("against", "excluded")}
    scenarios["late"] = with_changes(load({"excluded_within": 0.2}),
                                     {"targets.queue.within": within})
    rates = {"answer": 2.0, "close": 2.0}
    got = {k: stationary_place(s, rates, {"calls": 3.0}, "queue") for k, s in scenarios.items()}
    assert got["against"].wait_served == pytest.approx(w, rel=1e-10)
    ok = w <= within
    assert got["against"].served_within == pytest.approx(2 / 3 if ok else 0.0, abs=1e-12)
    assert got["excluded"].served_within == pytest.approx(1.0 if ok else 0.0, abs=1e-12)
    f_t2 = 1 - math.exp(-0.2 / 2)
    assert got["late"].served_within == pytest.approx((2 / 3) / (1 - f_t2) if ok else 0.0,
                                                      abs=1e-12)


def test_cohort_service_level_under_each_convention():
    # The same place from the dynamics with abandonment (age-structured queue), read by cohorts
    # over [60, 80] min, long after the fluid queue has settled (Whitt 2006 as above, t = 3):
    # excluded, every served cohort waits w < t: exactly 1; against and excluded within T2 count
    # the same cohorts taken within t, over 1 and over taken + (F(w) − F(T2)) = 1 − F(T2)
    # (taken = 1 − F(w)), so their ratio is 1 − F(T2) = exp(−0.1), up to the grid's rounding
    # of the waits (half a step; the survival changes by θ·dt/2 across it).
    from fluid.counters import WITH_ABANDONMENT, integrate_counters
    from fluid.places import cohort_service_level

    got = {}
    for key, convention in (("against", "against"), ("excluded", "excluded"),
                            ("late", {"excluded_within": 0.2})):
        s = with_changes(load(convention), {"targets.queue.within": 3.0})
        sol = integrate_counters(s, horizon=100, model=WITH_ABANDONMENT)
        got[key] = cohort_service_level(s, sol, "queue", 3.0, 60, 80, s.targets.service["queue"])
    assert got["excluded"] == 1.0
    assert got["against"] / got["late"] == pytest.approx(math.exp(-0.1), abs=0.5 * 0.5 * sol.dt)
    assert got["against"] == pytest.approx(2 / 3, abs=0.5 * sol.dt)
