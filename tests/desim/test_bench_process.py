"""The whole-process part of the benchmark (desim.bench_process): that it measures what it says
and reports a failing command instead of a time. Speed is never asserted."""

from __future__ import annotations

import pathlib
import subprocess
import sys

import pytest

from desim import bench_process
from desim.bench import _simpy_station, station_scenario, station_yaml

ROOT = pathlib.Path(__file__).resolve().parents[2]


def test_console_module_and_executable():
    assert bench_process.console_module() == "compare.cli"  # pyproject: compare.cli:main
    assert bench_process.fluidgap_executable().name == "fluidgap"


def test_import_time_reads_the_last_line():
    assert bench_process._import_us("json", ROOT, 1) > 0
    with pytest.raises(bench_process._Failed, match="import no_such_module_here"):
        bench_process._import_us("no_such_module_here", ROOT, 1)


def test_a_failing_command_is_reported_not_timed(tmp_path):
    timing = bench_process.measure_startup(tmp_path / "missing.yaml", ROOT, repeats=1)
    assert timing.inspect_seconds is None and timing.help_seconds > 0
    assert any("missing.yaml" in e for e in timing.errors), timing.errors
    assert "failed" in bench_process.startup_line(timing, 1)
    process = bench_process.measure_whole_process("name: [unclosed", 10.0, 1, ROOT, repeats=1)
    assert process.fluidgap_seconds is None and process.simpy_seconds is None
    assert process.ratio is None and len(process.errors) == 2
    assert bench_process.process_row(process)[1:] == ("failed", "failed", "-")


def test_the_simpy_script_runs_the_benchmark_model(tmp_path):
    # the reference process prints the callers and mean wait of desim.bench's own model
    path = tmp_path / "station.yaml"
    path.write_text(station_yaml(seed=3))
    out = subprocess.run([sys.executable, "-c", bench_process.SIMPY_SCRIPT, str(path), "50.0",
                          "3"], capture_output=True, text=True, check=True, cwd=ROOT)
    callers, wait = _simpy_station(station_scenario(seed=3), 50.0, 3)
    assert out.stdout.split() == [str(callers), repr(wait)]
