"""The limit flags of the command line (README, "Limits"): each refusal names the flag that
raises it, and the flag does raise it; the --set forms; warnings for plans shorter than the
horizon. (The hostile inputs themselves are in tests/hostile/, each run as a process.)"""

from __future__ import annotations

import json
import pathlib

import pytest

from compare.cli.main import main

ROOT = pathlib.Path(__file__).resolve().parents[3]
BASE = str(ROOT / "tests" / "hostile" / "base.yaml")
QUICK = ("--workers", "1", "--quiet", "--json")


def run(capsys, *argv):
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


@pytest.mark.parametrize("argv, refused, allowed", [
    # base.yaml: rate 1 per min, horizon 100, 3 replications
    (["--interval", "10"], ["--max-intervals", "9"], ["--max-intervals", "10"]),  # 10 of them
    (["--reps", "3"], ["--max-replications", "2"], ["--max-replications", "3"]),
    ([], ["--max-arrivals", "299"], ["--max-arrivals", "300"]),  # 100 arrivals x 3 expected
])
def test_a_limit_flag_sets_the_limit_it_names(capsys, argv, refused, allowed):
    code, out, err = run(capsys, "simulate", BASE, *argv, *refused, *QUICK)
    assert code == 2 and out == "" and err.count("\n") == 1
    assert allowed[0] in err
    code, out, err = run(capsys, "simulate", BASE, *argv, *allowed, *QUICK)
    assert code == 0, err
    assert json.loads(out)["replications"] == 3


def test_outside_files_and_file_values_flags(capsys, tmp_path):
    (tmp_path / "calls.txt").write_text("".join(f"{i}\n" for i in range(1, 40)))
    set_trace = f"sources.calls={{trace: {tmp_path / 'calls.txt'}, into: queue}}"
    code, _, err = run(capsys, "inspect", BASE, "--set", set_trace)
    assert code == 2 and "--allow-outside-files" in err
    code, _, err = run(capsys, "inspect", BASE, "--set", set_trace, "--allow-outside-files",
                       "--max-file-values", "10")
    assert code == 2 and "sources.calls.trace" in err and "--max-file-values" in err
    code, out, err = run(capsys, "inspect", BASE, "--set", set_trace, "--allow-outside-files",
                         "--json")
    assert code == 0, err
    assert json.loads(out)["sources"]["calls"]


def test_set_plus_adds_a_pool_and_a_typo_lists_the_pools(capsys):
    code, out, err = run(capsys, "inspect", BASE, "--set", "+pools.spare=2", "--json")
    assert code == 0, err
    assert "spare" in json.loads(out)["pools"]
    code, out, err = run(capsys, "inspect", BASE, "--set", "pools.agnets=5")
    assert code == 2 and out == ""
    assert err == (f"{BASE}: pools.agnets: no pool named agnets (pools: agents); to add one, "
                   "write --set +pools.agnets=VALUE\n")


def test_a_profile_shorter_than_the_horizon_warns_on_stderr(capsys):
    code, out, err = run(capsys, "fluid", BASE, "--set",
                         "sources.calls={profile: {step: 20, rates: [1, 2]}, into: queue}")
    assert code == 0
    assert err == (f"warning: {BASE}: sources.calls.profile: the profile (2 rates of step 20) "
                   "ends at 40 min, before the horizon 100: the last rate (2 per min) holds "
                   "from 40 on\n")


def test_flag_values_name_the_flag(capsys):
    for argv, words in ((["simulate", BASE, "--horizon", "inf"], "argument --horizon: must be a "
                         "finite number (got 'inf')"),
                        (["fluid", BASE, "--dt", "nan"], "argument --dt: must be a finite"),
                        (["simulate", BASE, "--reps", "1.5"], "argument --reps: must be a whole"),
                        (["scale", BASE, "--factors", "1", "nan"], "argument --factors")):
        code, out, err = run(capsys, *argv)
        assert code == 2 and out == "" and words in err and err.count("\n") == 1
