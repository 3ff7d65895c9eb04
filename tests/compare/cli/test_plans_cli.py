"""The ``phases`` and ``staff`` subcommands end to end (compare.cli.handlers, compare.cli.main): one or two
axes on every config in configs/, the figures they write, and the staff report.

Reference values are derived by hand beside each check (references.md, "Throughput LP": a single
pool of N agents with mean hold h fed at rate λ carries min(λ, N/h)).
"""

from __future__ import annotations

import json
import pathlib

import pytest
import yaml

from compare.cli.main import main
from compare.present.text import CAUTION

ROOT = pathlib.Path(__file__).resolve().parents[3]
CONFIGS = sorted((ROOT / "configs").glob("*.yaml"))
DEMO = str(ROOT / "configs" / "utility-line.yaml")
SINGLE = str(ROOT / "configs" / "single-station.yaml")
PNG_MAGIC = b"\x89PNG\r\n\x1a\n"


def run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def first_pool(path: pathlib.Path) -> str:
    return next(iter(yaml.safe_load(path.read_text())["pools"]))


@pytest.mark.parametrize("config", CONFIGS, ids=lambda p: p.stem)
def test_phases_runs_on_every_config(capsys, tmp_path, config):
    # every config has at least one pool, so one axis always works (three of them have only one)
    png = tmp_path / "phases.png"
    code, out, err = run(capsys, "phases", config, "--axes", first_pool(config), "--json",
                         "--png", png)
    assert code == 0, err
    doc = json.loads(out)
    assert doc["axes"] == [first_pool(config)] and doc["png"] == str(png)
    assert doc["pieces"] or doc["grid"]
    assert png.read_bytes()[:8] == PNG_MAGIC


def test_phases_one_axis_json_contract(capsys):
    # single-station.yaml: λ = 2 per min, exponential hold of mean 5 min, 12 agents (patience is
    # ignored by the fluid model): rate = min(2, N/5) for every N ≥ 0, kink at N = 10
    code, out, err = run(capsys, "phases", SINGLE, "--axes", "agents", "--json")
    assert code == 0, err
    doc = json.loads(out)
    assert doc["axes"] == ["agents"] and doc["method"] == "lp" and doc["exact"] is True
    assert doc["caution"] == CAUTION
    for piece in doc["pieces"]:
        assert set(piece["coef"]) == {"agents"}
        assert {"const", "coef", "limiting"} <= set(piece)
    for n in [0, 2.5, 10, 12, 24, 1e4]:
        rate = min(p["const"] + p["coef"]["agents"] * n for p in doc["pieces"])
        assert rate == pytest.approx(min(2.0, n / 5.0), abs=1e-9)


@pytest.mark.parametrize("axes, message", [
    (["agents", "agents"], "two different pools"),
    (["a", "b", "c"], "one or two pools (got 3)"),
    (["ghost"], "not a pool"),
])
def test_phases_bad_axes_exit_2(capsys, axes, message):
    code, out, err = run(capsys, "phases", SINGLE, "--axes", *axes)
    assert code == 2 and out == "" and message in err
    assert err.count("\n") == 1  # one clear line


def test_phases_one_axis_simulated_report(capsys, tmp_path):
    # a short overlay (2 replications of 300 min at 5 staff levels): the report holds one figure,
    # the overlay table and the command's JSON
    report = tmp_path / "report"
    code, out, err = run(capsys, "phases", SINGLE, "--axes", "agents", "--range", "agents=8:12",
                         "--simulate", "--reps", 2, "--horizon", 300, "--warmup", 30,
                         "--workers", 1, "--quiet", "--json", "--report", report)
    assert code == 0, err
    doc = json.loads(out)
    assert [row["a"] for row in doc["overlay"]] == [8, 9, 10, 11, 12]
    assert all("b" not in row for row in doc["overlay"])
    html = (report / "report.html").read_text()
    assert html.count("<img ") == 1
    assert {"pieces.csv", "overlay.csv", "phases.png", "result.json"} <= {
        p.name for p in report.iterdir()}
    assert json.loads((report / "result.json").read_text()) == doc


def test_staff_fluid_only_report(capsys, tmp_path):
    report = tmp_path / "staff"
    png = tmp_path / "staff.png"
    code, out, err = run(capsys, "staff", DEMO, "--fluid-only", "--quiet", "--json",
                         "--report", report, "--png", png)
    assert code == 0, err
    doc = json.loads(out)
    names = {p.name for p in report.iterdir()}
    assert {"report.html", "result.json", "fluid_plan.csv", "staffing.png"} <= names
    assert "plans.csv" not in names  # nothing was simulated
    html = (report / "report.html").read_text()
    assert html.count("<img ") == 1 and "Caution." in html
    assert json.loads((report / "result.json").read_text()) == doc
    assert png.read_bytes()[:8] == PNG_MAGIC
    # offered work by hand (see tests/fluid/test_configs_fluid.py): 13.2, 0.6, 5.7 agents
    csv = (report / "fluid_plan.csv").read_text().splitlines()
    assert csv[0] == "pool,fluid_plan,cost_per_agent,cost,work,scenario_staff,plan"
    assert csv[1].startswith("front_desk,14,")


def test_staff_simulated_report(capsys, tmp_path):
    # a short search on single-station.yaml (3 replications of 300 min per plan): the plans tried
    # become a table and a figure
    report = tmp_path / "staff"
    code, out, err = run(capsys, "staff", SINGLE, "--reps", 3, "--horizon", 300, "--warmup", 30,
                         "--workers", 1, "--quiet", "--json", "--report", report)
    assert code == 0, err
    doc = json.loads(out)
    assert doc["method"] == "simulation" and doc["tried"]
    html = (report / "report.html").read_text()
    assert html.count("<img ") == 1
    plans = (report / "plans.csv").read_text().splitlines()
    assert len(plans) == 1 + len(doc["tried"])
    assert plans[0].startswith("trial,step,agents,cost,meets")
    assert json.loads((report / "result.json").read_text()) == doc
