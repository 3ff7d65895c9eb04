"""The scenario format of design.md §3: loading, overrides, validation errors, frozen variants.

These are deterministic checks of the project's own contract (design.md §3 is the reference);
the invalid scenarios are each a minimal edit of a small valid net.
"""

from __future__ import annotations

import dataclasses
import pathlib
import textwrap

import pytest
import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fluid import ScenarioError, load_scenario, load_scenario_text, with_changes
from fluid.loading import ScenarioWarning
from fluid.structure import route_share

ROOT = pathlib.Path(__file__).resolve().parents[2]
CONFIGS = sorted((ROOT / "configs").glob("*.yaml"))

BASE = textwrap.dedent(
    """
    name: tiny desk
    time_unit: min
    run: {horizon: 100, warmup: 10, replications: 3, seed: 1}
    sources:
      calls: {rate: 1.0, into: queue}
    pools:
      agents: 3
    places:
      queue: {patience: {dist: exponential, mean: 2.0}}
      talk: {hold: {dist: exponential, mean: 2.0}, route: {close: 0.7, escalate: 0.3}}
      second: {hold: 1.5}
    transitions:
      answer: {in: [queue, agents], out: [talk]}
      close: {in: [talk], out: [agents]}
      escalate: {in: [talk], out: [second]}
      second_done: {in: [second], out: [agents]}
    targets:
      queue: {within: 0.5, goal: 0.8}
      abandonment: {max: 0.1}
    """
)


def base_doc() -> dict:
    return yaml.safe_load(BASE)


def load_doc(doc: dict, **kw):
    return load_scenario_text(yaml.safe_dump(doc), file="x.yaml", **kw)


def test_every_config_loads():
    assert len(CONFIGS) >= 4
    for path in CONFIGS:
        s = load_scenario(path)
        assert s.transitions and s.sources


def test_builtin_demo_is_the_config():
    assert (ROOT / "compare" / "demo" / "utility-line.yaml").read_text() == (
        ROOT / "configs" / "utility-line.yaml"
    ).read_text()


def test_base_is_valid_and_structure():
    s = load_scenario_text(BASE)
    assert s.outputs_of("talk") == ("close", "escalate")
    assert s.inputs_of("agents") == ("close", "second_done")
    assert s.job_input("answer") == "queue" and s.job_output("answer") == "talk"
    assert s.ending_transitions == ("close", "second_done")
    assert route_share(s, "talk", "escalate") == pytest.approx(0.3)
    assert s.places["second"].hold.mean == 1.5 and s.places["second"].hold.cv == 0
    assert s.targets.service["queue"].goal == 0.8
    assert s.targets.abandonment_max == 0.1


def test_scenario_is_frozen_and_variants_are_copies():
    s = load_scenario_text(BASE)
    with pytest.raises(dataclasses.FrozenInstanceError):
        s.name = "other"
    with pytest.raises(TypeError):
        s.pools["agents"] = 4
    v = with_changes(s, {"pools.agents": 5, "sources.calls.rate": 2.0})
    assert v.pools["agents"].staff == 5 and v.sources["calls"].arrivals.rate == 2.0
    assert s.pools["agents"].staff == 3 and s.sources["calls"].arrivals.rate == 1.0


def test_set_overrides_parse_yaml_scalars_and_keep_long_form_pools():
    s = load_scenario_text(BASE, overrides=["pools.agents=4", "sources.calls.rate=2.5",
                                            "places.queue.patience={dist: exponential, mean: 9}"])
    assert s.pools["agents"].staff == 4
    assert s.sources["calls"].arrivals.rate == 2.5
    assert s.places["queue"].patience.mean == 9
    text = BASE.replace("agents: 3", "agents: {staff: 3}")
    assert load_scenario_text(text, overrides=["pools.agents=7"]).pools["agents"].staff == 7


def test_set_override_errors_name_the_path():
    with pytest.raises(ScenarioError, match=r"pools\.nobody"):
        load_scenario_text(BASE, overrides=["pools.nobody.staff=3"])
    with pytest.raises(ScenarioError, match="PATH=VALUE"):
        load_scenario_text(BASE, overrides=["pools.agents"])
    with pytest.raises(ScenarioError, match=r"pools\.agents.*>= 0"):
        load_scenario_text(BASE, overrides=["pools.agents=-3"])


def _set(doc, path, value):
    node = doc
    keys = path.split(".")
    for k in keys[:-1]:
        node = node[k]
    if value is _DELETE:
        del node[keys[-1]]
    else:
        node[keys[-1]] = value


_DELETE = object()

# (edit path, new value, expected field path in the message, words expected in the message)
INVALID = [
    ("colour", "blue", "colour", "unknown key"),
    ("places.queue.colour", 1, "places.queue.colour", "unknown key"),
    ("sources.calls.rate", 0, "sources.calls.rate", "must be > 0"),
    ("sources.calls.rate", -1.0, "sources.calls.rate", "must be > 0"),
    ("sources.calls.into", "agents", "sources.calls.into", "cannot feed a pool"),
    ("sources.calls.into", "nowhere", "sources.calls.into", "unknown place"),
    ("pools.agents", -3, "pools.agents", ">= 0"),
    ("pools.agents", 2.5, "pools.agents", "whole number"),
    ("places.talk.hold", {"dist": "exponential", "mean": -2}, "places.talk.hold.mean", ">= 0"),
    ("places.talk.hold", {"dist": "lognormal", "mean": 2, "cv": -1}, "places.talk.hold.cv", ">= 0"),
    ("places.talk.hold", {"dist": "pareto", "mean": 2}, "places.talk.hold.dist", "must be one of"),
    ("places.talk.route", {"close": 0.6, "escalate": 0.3}, "places.talk.route", "sum to 0.9"),
    ("places.talk.route", {"close": 0.7, "answer": 0.3}, "places.talk.route", "not an output"),
    ("places.talk.route", _DELETE, "places.talk", "neither route nor priority"),
    ("places.queue.patience", -1, "places.queue.patience", ">= 0"),
    ("places.queue.abandon_to", "ghost", "places.queue.abandon_to", "unknown place"),
    ("places.second.abandon_to", "queue", "places.second.abandon_to", "needs patience"),
    ("transitions.answer.in", ["queue", "ghost"], "transitions.answer.in", "'ghost'"),
    ("transitions.close.out", ["agents", "queue", "second"], "transitions.close.out", "two places"),
    ("transitions.answer.in", ["queue", "second", "agents"], "transitions.answer.in", "joins of jobs"),
    ("transitions.answer.in", ["agents"], "transitions.answer.in", "takes no job"),
    ("transitions.answer.in", {"queue": 1, "agents": 0}, "transitions.answer.in.agents", ">= 1"),
    ("transitions.answer.in", {"queue": 2, "agents": 1}, "transitions.answer.in.queue", "weight 1"),
    ("targets.queue.goal", 1.5, "targets.queue.goal", "<= 1"),
    ("targets.talkx", {"within": 1, "goal": 0.5}, "targets.talkx", "must name a job place"),
    ("run.warmup", 200, "run.warmup", "below the horizon"),
    ("run.replications", 0, "run.replications", ">= 1"),
    ("pools.Agents", 3, "pools.Agents", "must match"),
    ("places.calls", {}, "sources.calls", "already used by places.calls"),
    ("sources.calls", {"rate": 1.0, "profile": {"step": 1, "rates": [1]}, "into": "queue"},
     "sources.calls", "exactly one of"),
    ("transitions.close.outcome", "gone", "transitions.close.outcome", "must be one of: served"),
    ("transitions.close.outcome", 1, "transitions.close.outcome", "must be one of"),
    ("transitions.escalate.outcome", "abandoned", "transitions.escalate.outcome",
     "only for a transition that ends jobs"),
    ("transitions.answer.outcome", "served", "transitions.answer.outcome",
     "moves them on to place talk"),
]


def test_outcome_marks_a_job_ending_transition():
    """``outcome`` (design.md §3): default served; abandoned or lost on a transition whose
    outputs hold no place (close gives its agent back and ends the job)."""
    assert load_scenario_text(BASE).transitions["close"].outcome == "served"
    for outcome in ("served", "abandoned", "lost"):
        doc = base_doc()
        doc["transitions"]["close"]["outcome"] = outcome
        s = load_doc(doc)
        assert s.transitions["close"].outcome == outcome
        assert s.transitions["second_done"].outcome == "served"
        assert with_changes(s, {"pools.agents": 4}).transitions["close"].outcome == outcome


@pytest.mark.parametrize("path,value,field,words", INVALID, ids=[f"{p}->{w}" for p, _, _, w in INVALID])
def test_invalid_scenarios_name_the_field(path, value, field, words):
    doc = base_doc()
    _set(doc, path, value)
    with pytest.raises(ScenarioError) as info:
        load_doc(doc)
    message = str(info.value)
    assert message.startswith("x.yaml: ")
    assert info.value.path == field
    assert words in message


def test_zero_time_circuit_is_refused():
    doc = base_doc()
    doc["places"]["loop_a"] = {}
    doc["places"]["loop_b"] = {}
    doc["places"]["talk"]["route"] = {"close": 0.7, "escalate": 0.2, "to_loop": 0.1}
    doc["transitions"]["to_loop"] = {"in": ["talk"], "out": ["agents", "loop_a"]}
    doc["transitions"]["a_to_b"] = {"in": ["loop_a"], "out": ["loop_b"]}
    doc["transitions"]["b_to_a"] = {"in": ["loop_b"], "out": ["loop_a"]}
    with pytest.raises(ScenarioError, match="zero-time circuit"):
        load_doc(doc)
    doc["places"]["loop_b"] = {"hold": 0.5}  # a holding time breaks the circuit
    load_doc(doc)


def test_duplicate_keys_are_refused():
    text = BASE.replace("pools:\n  agents: 3", "pools:\n  agents: 3\n  agents: 4")
    with pytest.raises(ScenarioError, match="duplicate key 'agents'"):
        load_scenario_text(text, file="dup.yaml")


def test_missing_file_and_bad_yaml():
    with pytest.raises(ScenarioError, match="no such file"):
        load_scenario("does/not/exist.yaml")
    with pytest.raises(ScenarioError, match="not valid YAML: line"):
        load_scenario_text("sources: [1, 2\nplaces: {", file="bad.yaml")
    with pytest.raises(ScenarioError, match="must be a mapping"):
        load_scenario_text("- 1\n- 2\n")


def test_trace_source_reads_relative_file(tmp_path):
    (tmp_path / "arrivals.csv").write_text("0.5\n1.25\n3\n")
    doc = base_doc()
    doc["sources"]["calls"] = {"trace": "arrivals.csv", "into": "queue"}
    (tmp_path / "s.yaml").write_text(yaml.safe_dump(doc))
    s = load_scenario(tmp_path / "s.yaml")
    assert s.sources["calls"].arrivals.times == (0.5, 1.25, 3.0)
    (tmp_path / "arrivals.csv").write_text("2\n1\n")
    with pytest.raises(ScenarioError, match="earlier than the line before"):
        load_scenario(tmp_path / "s.yaml")


def test_profile_and_schedule():
    doc = base_doc()
    doc["sources"]["calls"] = {"profile": {"step": 30, "rates": [1.0, 2.0]}, "into": "queue"}
    doc["pools"]["agents"] = {"schedule": {"step": 60, "staff": [2, 4]}}
    s = load_doc(doc)
    src = s.sources["calls"].arrivals
    # integral of the piecewise-constant rate, by hand: 30*1 + 30*2 + 40*2 (last value holds)
    assert src.cumulative(100) == pytest.approx(30 + 60 + 80)
    assert s.pools["agents"].staff == 2 and s.pools["agents"].staff_at(61) == 4
    assert s.pools["agents"].mean_staff(120) == pytest.approx(3.0)


def test_leaking_pool_warns():
    doc = base_doc()
    doc["transitions"]["second_done"]["out"] = []  # the agent never comes back from `second`
    with pytest.warns(ScenarioWarning, match="pools.agents"):
        load_doc(doc)


# --- fuzzing: whatever the text, the loader raises only ScenarioError ---------------------------

_scalars = st.one_of(
    st.none(), st.booleans(), st.integers(-5, 5), st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from(["queue", "agents", "talk", "close", "exponential", "x", "", "NaN"]),
)
_values = st.recursive(
    _scalars,
    lambda inner: st.one_of(st.lists(inner, max_size=4),
                            st.dictionaries(st.sampled_from(
                                ["in", "out", "rate", "into", "mean", "dist", "hold", "route",
                                 "staff", "priority", "patience", "step", "rates", "queue"]),
                                inner, max_size=4)),
    max_leaves=12,
)
_paths = st.sampled_from([
    "name", "run", "run.horizon", "sources", "sources.calls", "sources.calls.rate",
    "sources.calls.into", "pools", "pools.agents", "places", "places.queue", "places.talk.hold",
    "places.talk.route", "places.queue.patience", "transitions", "transitions.answer",
    "transitions.answer.in", "transitions.close.out", "targets", "targets.queue",
    "targets.abandonment",
])


@pytest.mark.filterwarnings("ignore::fluid.loading.ScenarioWarning")
@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(edits=st.lists(st.tuples(_paths, _values), min_size=1, max_size=3))
def test_fuzzed_documents_raise_only_scenario_error(edits):
    doc = base_doc()
    for path, value in edits:
        try:
            _set(doc, path, value)
        except (KeyError, TypeError):
            continue
    try:
        text = yaml.safe_dump(doc)
    except yaml.YAMLError:
        return
    try:
        load_scenario_text(text, file="fuzz.yaml")
    except ScenarioError:
        pass


@pytest.mark.filterwarnings("ignore::fluid.loading.ScenarioWarning")
@settings(max_examples=200, deadline=None)
@given(text=st.text(max_size=200))
def test_fuzzed_text_raises_only_scenario_error(text):
    try:
        load_scenario_text(text, file="fuzz.yaml")
    except ScenarioError:
        pass
