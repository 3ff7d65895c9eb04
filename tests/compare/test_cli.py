"""The command line contract of design.md §5: exit codes, one-line errors, JSON keys."""

from __future__ import annotations

import json
import pathlib
import subprocess
import sys

import pytest

from compare.cli import main

ROOT = pathlib.Path(__file__).resolve().parents[2]
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
