"""The command line contract of design.md §5: exit codes, one-line errors, JSON keys."""

from __future__ import annotations

import json
import pathlib
import subprocess
import sys

import pytest

from compare.cli.main import main

ROOT = pathlib.Path(__file__).resolve().parents[3]
DEMO = str(ROOT / "configs" / "utility-line.yaml")
CONFIGS = sorted(str(p) for p in (ROOT / "configs").glob("*.yaml"))


def run(capsys, *argv):
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def test_inspect_tables_and_json(capsys):
    code, out, err = run(capsys, "inspect", DEMO)
    assert code == 0 and err == ""
    assert "front_desk" in out and "conservation invariants" in out
    code, out, _ = run(capsys, "inspect", DEMO, "--json")
    doc = json.loads(out)
    assert code == 0
    assert set(doc["pools"]) == {"front_desk", "supervisors", "billing_desk"}
    assert doc["uncovered_pools"] == []
    # every pool of the demo is covered by an invariant that holds it
    for pool in doc["pools"]:
        assert any(pool in inv for inv in doc["invariants"])


@pytest.mark.parametrize("config", CONFIGS)
def test_fluid_json_keys_on_every_config(capsys, config):
    code, out, err = run(capsys, "fluid", config, "--json")
    assert code == 0, err
    doc = json.loads(out)
    assert {"throughput", "bottlenecks", "load", "method"} <= set(doc)
    assert doc["method"] in ("lp", "counters")
    assert set(doc["throughput"]) == set(
        json.loads(main_json(capsys, "inspect", config))["transitions"]
    )


def test_fluid_cross_check_only_when_asked(capsys):
    # single-station is an LP net: the counters run only with --cross-check (the JSON key stays,
    # null when not run); below capacity both give 2 per minute exactly (holds on the grid)
    station = str(ROOT / "configs" / "single-station.yaml")
    doc = json.loads(main_json(capsys, "fluid", station))
    assert doc["method"] == "lp" and doc["cross_check"] is None and doc["dt"] is None
    doc = json.loads(main_json(capsys, "fluid", station, "--cross-check"))
    assert doc["cross_check"] is not None and doc["cross_check"] < 1e-9
    assert doc["rounding"] == 0.0


def main_json(capsys, *argv) -> str:
    main([*argv, "--json"])
    return capsys.readouterr().out


def test_fluid_text_on_demo(capsys):
    code, out, _ = run(capsys, "fluid", DEMO)
    assert code == 0
    for word in ("front_answer", "bottleneck", "load", "Decision support"):
        assert word in out


@pytest.mark.parametrize(
    "argv,words",
    [
        (["fluid", "nope.yaml"], "nope.yaml: no such file"),
        (["fluid", DEMO, "--set", "pools.front_desk=-2"], "pools.front_desk"),
        (["fluid", DEMO, "--set", "places.front_talk.route.front_close=0.5"],
         "places.front_talk.route: proportions sum to"),
        (["inspect", DEMO, "--set", "nonsense"], "expected PATH=VALUE"),
        (["fluid", DEMO, "--dt", "-1"], "--dt must be > 0"),
        (["fluid"], "fluidgap fluid:"),
        (["frobnicate"], "fluidgap:"),
    ],
)
def test_bad_input_gives_one_line_and_exit_2(capsys, argv, words):
    code, out, err = run(capsys, *argv)
    assert code == 2
    assert out == ""
    assert err.count("\n") == 1 and words in err
    assert "Traceback" not in err


def test_console_script_runs_as_module():
    proc = subprocess.run(
        [sys.executable, "-m", "compare.cli", "fluid", DEMO, "--set", "pools.front_desk=x"],
        capture_output=True, text=True, cwd=ROOT,
    )
    assert proc.returncode == 2
    assert proc.stderr.strip().startswith(f"{DEMO}: pools.front_desk")


# --- compare, station, scale (short runs: the statistics are tested in their own modules) -------


def test_compare_without_scenario_runs_the_demo(capsys, tmp_path):
    code, out, err = run(capsys, "compare", "--reps", "3", "--horizon", "240", "--warmup", "30",
                         "--workers", "1", "--quiet", "--report", str(tmp_path / "rep"))
    assert code == 0, err
    assert "Fernhollow" in out and "flags" in out and "near critical" in out
    assert (tmp_path / "rep" / "report.html").exists()
    assert "Decision support" in (tmp_path / "rep" / "report.html").read_text()


def test_compare_json_contract(capsys):
    code, out, err = run(capsys, "compare", str(ROOT / "configs" / "priority-desk.yaml"),
                         "--reps", "3", "--horizon", "300", "--warmup", "30", "--workers", "1",
                         "--json")
    assert code == 0, err
    doc = json.loads(out)
    assert {"fluid", "simulation", "gaps", "flags"} <= set(doc)
    for flag in doc["flags"]:
        assert set(flag) == {"kind", "where", "message"}
    assert doc["simulation"]["replications"] == 3


def test_station_json_contract(capsys):
    code, out, err = run(capsys, "station", "--servers", "5", "--rate", "1", "--mean-hold", "3",
                         "--reps", "4", "--horizon", "2000", "--workers", "1", "--json")
    assert code == 0, err
    doc = json.loads(out)
    assert doc["model"] == "Erlang C"
    for check in doc["checks"]:
        assert {"metric", "formula", "simulation", "agrees", "source"} <= set(check)
        assert set(check["simulation"]) == {"mean", "low", "high", "n"}


@pytest.mark.parametrize("argv,words", [
    (["station", "--servers", "0", "--rate", "1", "--mean-hold", "3"], "--servers must be >= 1"),
    (["station", "--servers", "2", "--rate", "-1", "--mean-hold", "3"], "--rate must be > 0"),
    (["station", "--servers", "2", "--rate", "1", "--mean-hold", "3", "--class-rates", "0.2",
      "0.3"], "class rates sum"),
    (["scale", DEMO, "--factors", "0"], "--factors must be positive"),
    (["compare", DEMO, "--warmup", "900"], "--warmup must be"),
])
def test_bad_flags_exit_2(capsys, argv, words):
    code, out, err = run(capsys, *argv, "--quiet")
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and words in err


def test_scale_json(capsys):
    code, out, err = run(capsys, "scale", str(ROOT / "configs" / "single-station.yaml"),
                         "--factors", "1", "2", "--reps", "3", "--horizon", "300",
                         "--warmup", "30", "--workers", "1", "--json")
    assert code == 0, err
    doc = json.loads(out)
    assert [row["factor"] for row in doc["table"]] == [1.0, 2.0]
    assert "throughput_shortfall" in doc["fits"]


def test_out_and_resume_flags(capsys, tmp_path):
    cfg = str(ROOT / "configs" / "single-station.yaml")
    base = ["simulate", cfg, "--reps", "3", "--horizon", "200", "--warmup", "20",
            "--workers", "1", "--quiet"]
    code, _, err = run(capsys, *base, "--resume")
    assert code == 2 and "--resume needs --out" in err
    code, first, _ = run(capsys, *base, "--out", str(tmp_path / "run"), "--json")
    assert code == 0
    code, _, err = run(capsys, *base, "--out", str(tmp_path / "run"))
    assert code == 2 and "already holds a run" in err
    code, again, _ = run(capsys, *base, "--out", str(tmp_path / "run"), "--resume", "--json")
    assert code == 0 and json.loads(again)["places"] == json.loads(first)["places"]


def test_unreachable_dask_scheduler_exits_2(capsys):
    pytest.importorskip("distributed")
    code, out, err = run(capsys, "simulate", str(ROOT / "configs" / "single-station.yaml"),
                         "--reps", "2", "--horizon", "100", "--warmup", "10", "--quiet",
                         "--dask", "tcp://127.0.0.1:9")
    assert code == 2 and out == "" and "Dask scheduler" in err


# --- phases and staff ----------------------------------------------------------------------------

TANDEM = """
name: tandem (test net)
time_unit: min
sources: {calls: {rate: 3.0, into: q1}}
pools: {first: 4, second: 3}
places:
  q1: {}
  s1: {hold: 1.0}
  q2: {}
  s2: {hold: 0.5}
transitions:
  a1: {in: [q1, first], out: [s1]}
  d1: {in: [s1], out: [first, q2]}
  a2: {in: [q2, second], out: [s2]}
  d2: {in: [s2], out: [second]}
"""


def test_phases_json_pieces_give_the_rate(capsys, tmp_path):
    path = tmp_path / "tandem.yaml"
    path.write_text(TANDEM)
    code, out, err = run(capsys, "phases", str(path), "--axes", "first", "second", "--json",
                         "--png", str(tmp_path / "p.png"))
    assert code == 0, err
    doc = json.loads(out)
    assert doc["axes"] == ["first", "second"] and doc["of"] == ["d2"]
    # tandem by hand: rate = min(3, first / 1.0, second / 0.5)
    for a, b in [(0, 0), (1, 5), (2, 0.5), (10, 10), (2.5, 1.0)]:
        rate = min(p["const"] + p["coef"]["first"] * a + p["coef"]["second"] * b
                   for p in doc["pieces"])
        assert rate == pytest.approx(min(3.0, a / 1.0, b / 0.5), abs=1e-9)
    assert (tmp_path / "p.png").stat().st_size > 0


def test_phases_bad_axes_exit_2(capsys):
    code, out, err = run(capsys, "phases", DEMO, "--axes", "front_desk", "ghost")
    assert code == 2 and "not a pool" in err


def test_staff_fluid_only_json(capsys):
    code, out, err = run(capsys, "staff", DEMO, "--fluid-only", "--json", "--quiet")
    assert code == 0, err
    doc = json.loads(out)
    assert {"fluid_plan", "plan", "tried"} <= set(doc)
    # offered work by hand (see tests/fluid/test_configs_fluid.py): 13.2, 0.6, 5.7 agents
    assert doc["plan"]["staff"] == {"front_desk": 14, "supervisors": 1, "billing_desk": 6}


def test_staff_bad_cost_exit_2(capsys):
    code, out, err = run(capsys, "staff", DEMO, "--cost", "front_desk=-1", "--fluid-only")
    assert code == 2 and "--cost expects POOL=C" in err
