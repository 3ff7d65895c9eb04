"""Bounded, safe reading of a scenario (the hardening issue, input half): data files
(fluid.datafiles), --set that adds nothing by mistake (fluid.overrides), numbers within bounds,
near-zero-time circuits, profiles and schedules shorter than the horizon, the limits a scenario
keeps through its variants."""

from __future__ import annotations

import os
import warnings

import pytest
import yaml

from fluid.datafiles import DataFolder, open_regular, NotARegularFile
from fluid.errors import FieldError, ScenarioError
from fluid.loading import ScenarioWarning, load_scenario, load_scenario_text, with_changes
from fluid.scenario import Limits

BASE = """
name: bounds (invented)
run: {horizon: 100, warmup: 10}
sources:
  calls: {rate: 1.0, into: queue}
pools:
  agents: 2
places:
  queue: {patience: {dist: exponential, mean: 4.0}}
  talk: {hold: 1.5}
transitions:
  answer: {in: [queue, agents], out: [talk]}
  close: {in: [talk], out: [agents]}
"""


def load(text=BASE, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("error", ScenarioWarning)  # no warning unless a test asks
        return load_scenario_text(text, file="b.yaml", **kw)


# --- data files ----------------------------------------------------------------------------------


def test_numbers_are_read_with_their_line_numbers(tmp_path):
    (tmp_path / "t.txt").write_text("0.5 1,\n\n2.25\n")
    values, lines = DataFolder(tmp_path).read_numbers("t.txt", "f", strip=",")
    assert values == [0.5, 1.0, 2.25] and list(lines) == [1, 1, 3]


@pytest.mark.parametrize("content, words", [
    (b"1\n2\nroot:x:0:0\n", "t.txt: entry 3 is not a number (line 3)"),
    (b"1\n\xff\xfe\n", "line 2 of t.txt is not UTF-8 text"),
    (b"1 " * 40_000, "line 1 of t.txt is longer than 65,536 bytes"),
])
def test_bad_files_are_named_by_line_never_quoted(tmp_path, content, words):
    (tmp_path / "t.txt").write_bytes(content)
    with pytest.raises(FieldError) as info:
        DataFolder(tmp_path).read_numbers("t.txt", "sources.calls.trace")
    assert info.value.path == "sources.calls.trace" and words in info.value.message
    assert "root" not in str(info.value)


def test_a_file_beyond_the_limit_is_refused_before_it_is_read_whole(tmp_path):
    (tmp_path / "t.txt").write_text("1\n" * 11)
    folder = DataFolder(tmp_path, max_values=10)
    with pytest.raises(FieldError, match="more than the limit of 10 numbers.*--max-file-values"):
        folder.read_numbers("t.txt", "f")
    (tmp_path / "t.txt").write_text("1 " * 300 + "\n")  # 600 bytes: over 64 bytes x 5 numbers
    with pytest.raises(FieldError, match="320 bytes"):
        DataFolder(tmp_path, max_values=5).read_numbers("t.txt", "f")
    (tmp_path / "t.txt").write_text("1\n" * 10)
    assert len(folder.read_numbers("t.txt", "f")[0]) == 10


def test_only_regular_files_are_opened(tmp_path):
    os.mkfifo(tmp_path / "pipe")
    (tmp_path / "folder").mkdir()
    for path, kind in ((tmp_path / "pipe", "a FIFO"), (tmp_path / "folder", "a folder"),
                       ("/dev/null", "a device")):
        with pytest.raises(NotARegularFile, match=kind):  # at once: a FIFO never blocks
            open_regular(path)
    handle, size = open_regular(__file__)
    handle.close()
    assert size > 0


def test_files_must_lie_in_the_scenario_folder(tmp_path):
    (tmp_path / "in.txt").write_text("1\n")
    (tmp_path / "sub").mkdir()
    (tmp_path / "sub" / "deep.txt").write_text("2\n")
    (tmp_path / "link.txt").symlink_to("/etc/hostname")
    folder = DataFolder(tmp_path)
    assert folder.read_numbers("sub/deep.txt", "f")[0] == [2.0]
    assert folder.read_numbers("sub/../in.txt", "f")[0] == [1.0]
    for name in ("/etc/hostname", "../../../../etc/hostname", "link.txt", "sub/../../x"):
        with pytest.raises(FieldError, match="outside the scenario's folder.*--allow-outside"):
            folder.locate(name, "f")
    assert DataFolder(tmp_path, outside_files=True).locate("/etc/hostname", "f").name == "hostname"


def test_a_trace_outside_needs_the_limit_and_the_limit_stays_with_variants(tmp_path):
    other = tmp_path / "other"
    other.mkdir()
    (other / "calls.txt").write_text("1\n2\n")
    doc = yaml.safe_load(BASE)
    doc["sources"]["calls"] = {"trace": str(other / "calls.txt"), "into": "queue"}
    (tmp_path / "s").mkdir()
    (tmp_path / "s" / "s.yaml").write_text(yaml.safe_dump(doc))
    with pytest.raises(ScenarioError, match="sources.calls.trace: .* outside"):
        load_scenario(tmp_path / "s" / "s.yaml")
    s = load_scenario(tmp_path / "s" / "s.yaml", limits=Limits(outside_files=True))
    assert s.sources["calls"].arrivals.times == (1.0, 2.0)
    assert with_changes(s, {"pools.agents": 3}).limits.outside_files  # re-reads the trace


def test_the_scenario_file_must_be_a_regular_file(tmp_path):
    os.mkfifo(tmp_path / "pipe.yaml")
    with pytest.raises(ScenarioError, match="pipe.yaml: is a FIFO"):
        load_scenario(tmp_path / "pipe.yaml")
    with pytest.raises(ScenarioError, match="is a folder"):
        load_scenario(tmp_path)


# --- --set ---------------------------------------------------------------------------------------


def test_set_refuses_a_name_the_scenario_does_not_have():
    with pytest.raises(ScenarioError) as info:
        load(overrides=["pools.agent=8"])
    assert info.value.path == "pools.agent"
    assert "no pool named agent (pools: agents); to add one, write --set +pools.agent=VALUE" in (
        str(info.value))
    for path in ("places.qeue.hold=2", "sources.cals.rate=2", "transitions.anser.in=[queue]"):
        with pytest.raises(ScenarioError, match="no (place|source|transition) named"):
            load(overrides=[path])


def test_set_adds_keys_inside_an_entry_and_plus_adds_an_entry():
    s = load(overrides=["places.talk.route={close: 1.0}", "+pools.spare=3"])
    assert s.places["talk"].route == {"close": 1.0} and s.pools["spare"].staff == 3
    with pytest.raises(ScenarioError, match="exists already"):
        load(overrides=["+pools.agents=3"])
    with pytest.raises(ScenarioError, match=r"\+ adds a whole pool"):
        load(overrides=["+pools.spare.staff=3"])
    with pytest.raises(ScenarioError, match=r"\+ adds a pool, place, source or transition"):
        load(overrides=["+run.horizon=3"])


def test_set_gives_fields_of_a_section_left_out_and_refuses_an_index_on_a_section():
    s = load(overrides=["targets.queue={within: 1, goal: 0.5}"])
    assert s.targets.service["queue"].goal == 0.5
    assert load(BASE.replace("run: {horizon: 100, warmup: 10}\n", ""),
                overrides=["run.horizon=50"]).run.horizon == 50
    with pytest.raises(ScenarioError, match=r"pools\[0\]: no such list item"):
        load(overrides=["pools[0]=1"])


def test_set_on_a_scheduled_pool_names_the_real_problem():
    text = BASE.replace("  agents: 2", "  agents: {schedule: {step: 50, staff: [2, 3]}}")
    with pytest.raises(ScenarioError) as info:
        load(text, overrides=["pools.agents=abc"])
    assert str(info.value) == "b.yaml: pools.agents: must be a whole number (got 'abc')"
    with pytest.raises(ScenarioError, match="has a schedule.*pools.agents.schedule.staff.*"
                                            r"pools.agents=\{staff: 4\}"):
        load(text, overrides=["pools.agents=4"])
    assert load(text, overrides=["pools.agents={staff: 4}"]).pools["agents"].staff == 4


def test_set_reads_numbers_as_yaml_1_2():
    s = load(overrides=["sources.calls.rate=1e-3", "run.horizon=1e3", "pools.agents=1e1"])
    assert s.sources["calls"].arrivals.rate == 0.001 and s.run.horizon == 1000.0
    assert s.pools["agents"].staff == 10


def test_names_are_matched_whole():
    with pytest.raises(ScenarioError, match="must match"):
        load(BASE.replace("  queue: {", '  "queue\\n": {'))
    with pytest.raises(ScenarioError, match="at most 64 characters"):
        load(BASE.replace("agents", "a" * 65))


# --- numbers within bounds -----------------------------------------------------------------------


@pytest.mark.parametrize("override, path, words", [
    ("sources.calls.rate=" + "9" * 400, "sources.calls.rate", "at most 1e+12"),
    ("pools.agents=" + "9" * 400, "pools.agents", "at most 1,000,000,000"),
    ("run.horizon=1e13", "run.horizon", "at most 1e+12"),
    ("run.seed=" + "9" * 50, "run.seed", "at most"),
    ("places.talk.hold={dist: gamma, mean: 1, cv: 1.0e-200}", "places.talk.hold.cv",
     "must be 0 or at least 1e-06"),
    ("places.talk.hold={dist: lognormal, mean: 1, cv: 101}", "places.talk.hold.cv",
     "at most 100"),
    ("places.talk.hold={dist: weibull, mean: 1, shape: 0.001}", "places.talk.hold.shape",
     "must be at least 0.02"),
    ("places.talk.hold={dist: erlang, mean: 1, k: 2000000}", "places.talk.hold.k",
     "at most 1,000,000"),
    ("places.talk.hold={dist: empirical, values: [1.7e+308]}", "places.talk.hold.values[0]",
     "at most 1e+12"),
    ("places.talk.hold=" + "3" * 5000, "places.talk.hold", "an integer of 5000 digits"),
])
def test_numbers_beyond_their_bounds_name_the_field(override, path, words):
    with pytest.raises(ScenarioError) as info:
        load(overrides=[override])
    assert info.value.path == path and words in str(info.value)
    assert len(str(info.value)) < 200


def test_bounds_leave_ordinary_values_alone():
    s = load(overrides=["places.talk.hold={dist: gamma, mean: 1, cv: 1.0e-6}",
                        "places.queue.patience={dist: weibull, mean: 4, shape: 0.02}",
                        "run.seed=" + str(2**128 - 1)])
    assert s.places["talk"].hold.cv == 1e-6 and s.run.seed == 2**128 - 1


# --- near-zero-time circuits ---------------------------------------------------------------------

LOOP = BASE.replace("  talk: {hold: 1.5}", "  talk: {hold: 1.5}\n  loop_a: {hold: HOLD}\n"
                    "  loop_b: {hold: HOLD}").replace(
    "close: {in: [talk], out: [agents]}", "close: {in: [talk], out: [agents, loop_a]}\n"
    "  a_to_b: {in: [loop_a], out: [loop_b]}\n  b_to_a: {in: [loop_b], out: [loop_a]}")


def test_a_circuit_of_holds_below_a_billionth_of_the_horizon_is_refused():
    # horizon 100: holds below 1e-7 count as none
    with pytest.raises(ScenarioError, match=r"zero-time circuit.*below 1e-09 × the horizon "
                                            r"100 = 1e-07 min"):
        load(LOOP.replace("HOLD", "1.0e-300"))
    with pytest.raises(ScenarioError, match="zero-time circuit"):
        load(LOOP.replace("HOLD", "9.0e-8"))
    assert load(LOOP.replace("HOLD", "2.0e-7")).places["loop_a"].hold_mean == 2e-7
    with pytest.raises(ScenarioError, match="zero-time circuit"):  # over the horizon given
        load(LOOP.replace("HOLD", "2.0e-7"), horizon=1000.0)


def test_a_near_zero_patience_back_into_its_queue_is_a_circuit():
    text = BASE.replace("queue: {patience: {dist: exponential, mean: 4.0}}",
                        "queue: {patience: 1.0e-300, abandon_to: redial}\n  redial: {}").replace(
        "close: {in: [talk], out: [agents]}",
        "close: {in: [talk], out: [agents]}\n  again: {in: [redial], out: [queue]}")
    with pytest.raises(ScenarioError, match="zero-time circuit: jobs could cycle"):
        load(text)
    assert load(text.replace("1.0e-300", "0.5")).places["queue"].patience.mean == 0.5


# --- limits on steps, warnings on coverage -------------------------------------------------------


def test_steps_over_the_horizon_are_bounded_by_the_intervals_limit():
    profile = "sources.calls={profile: {step: STEP, rates: [1, 2]}, into: queue}"
    with pytest.raises(ScenarioError, match=r"profile.step: cuts the horizon 100 into 1e\+302 "
                                            "intervals.*--max-intervals"):
        load(overrides=[profile.replace("STEP", "1.0e-300")])
    with pytest.raises(ScenarioError, match="pools.agents.schedule.step"):
        load(overrides=["pools.agents={schedule: {step: 0.001, staff: [2]}}"])
    s = load_scenario_text(BASE, overrides=[profile.replace("STEP", "0.001")],
                           limits=Limits(intervals=100_000), horizon=0.002)
    assert s.sources["calls"].arrivals.step == 0.001


def test_a_profile_or_schedule_shorter_than_the_horizon_warns():
    text = BASE.replace("calls: {rate: 1.0, into: queue}",
                        "calls: {profile: {step: 30, rates: [1.0, 2.5]}, into: queue}").replace(
        "  agents: 2", "  agents: {schedule: {step: 40, staff: [2, 1]}}")
    with pytest.warns(ScenarioWarning) as caught:
        load_scenario_text(text, file="b.yaml")
    assert [str(w.message) for w in caught] == [
        "b.yaml: sources.calls.profile: the profile (2 rates of step 30) ends at 60 min, "
        "before the horizon 100: the last rate (2.5 per min) holds from 60 on",
        "b.yaml: pools.agents.schedule: the schedule (2 staff levels of step 40) ends at 80 "
        "min, before the horizon 100: the last level (1 agent) holds from 80 on"]
    with warnings.catch_warnings():
        warnings.simplefilter("error", ScenarioWarning)
        load_scenario_text(text, file="b.yaml", horizon=60.0)  # both cover [0, 60]
