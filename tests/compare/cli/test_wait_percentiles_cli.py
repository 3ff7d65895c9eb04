"""``--percentiles`` on simulate and compare (issue 13, item 3): the wait percentiles and the
average speed of answer per waiting place, in the text and the JSON; a bad percentile is one
line and exit code 2. (The figures themselves are checked against Erlang C in
tests/desim/test_wait_percentiles.py.)"""

from __future__ import annotations

import json
import pathlib

from compare.cli.main import main

ROOT = pathlib.Path(__file__).resolve().parents[3]
SINGLE = str(ROOT / "configs" / "single-station.yaml")


def run(capsys, *argv):
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def test_simulate_default_percentiles_in_text_and_json(capsys):
    code, out, _ = run(capsys, "simulate", SINGLE, "--reps", "2", "--horizon", "400", "--warmup", "20", "--quiet")
    assert code == 0
    assert "the ASA, average speed of answer" in out and "mean (min)" in out
    # the served jobs' waits and the abandoners' times are shown apart (issue 13, item 1)
    assert all(who in out for who in ("all who left", "taken", "abandoning"))
    for q in ("p50", "p80", "p90", "p95"):
        assert q in out
    code, out, _ = run(capsys, "simulate", SINGLE, "--reps", "2", "--horizon", "400", "--warmup", "20", "--quiet",
                       "--json")
    queue = json.loads(out)["wait_distribution"]["queue"]
    assert list(queue["wait_percentiles"]) == ["50", "80", "90", "95"]
    assert {"mean", "low", "high", "n"} == set(queue["asa"])
    assert json.loads(out)["interval_methods"]["places"]["asa"].startswith("student t")


def test_compare_other_percentiles(capsys):
    code, out, _ = run(capsys, "compare", SINGLE, "--reps", "2", "--horizon", "400", "--warmup", "20", "--quiet",
                       "--json", "--percentiles", "75", "99")
    assert code == 0
    queue = json.loads(out)["simulation"]["wait_distribution"]["queue"]["wait_percentiles"]
    assert list(queue) == ["75", "99"]
    assert queue["75"]["mean"] <= queue["99"]["mean"]


def test_bad_percentile_is_one_line_exit_2(capsys):
    code, out, err = run(capsys, "simulate", SINGLE, "--percentiles", "101")
    assert code == 2 and out == ""
    assert err.strip().count("\n") == 0 and "--percentiles" in err
