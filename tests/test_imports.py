"""What importing fluid and desim brings in (issue: start-up time). A check of which modules
are imported, never a timing: scipy.stats, pandas, matplotlib and dask are imported only by the
functions that need them, so that loading and validating a scenario stays cheap."""

from __future__ import annotations

import pathlib
import subprocess
import sys

ROOT = pathlib.Path(__file__).resolve().parents[1]
HEAVY = "('scipy.stats', 'pandas', 'matplotlib', 'dask')"


def _imported(code: str) -> str:
    """Run ``code`` in a fresh interpreter and return which HEAVY modules it left imported."""
    probe = f"{code}\nimport sys\nprint(sorted(m for m in {HEAVY} if m in sys.modules))"
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True,
                         check=True, cwd=ROOT)
    return out.stdout.strip()


def test_importing_the_packages_imports_none_of_the_heavy_libraries():
    assert _imported("import fluid, desim, fluid.loading, fluid.invariants, desim.run") == "[]"


def test_inspecting_a_scenario_imports_none_of_them():
    # what `fluidgap inspect` asks of fluid: load and validate, semiflows, uncovered pools
    code = ("from fluid.loading import load_scenario\n"
            "from fluid.invariants import p_semiflows, uncovered_pools\n"
            "s = load_scenario('configs/utility-line.yaml')\n"
            "assert p_semiflows(s) and uncovered_pools(s) == []")
    assert _imported(code) == "[]"


def test_a_simulation_run_imports_none_of_them():
    # one replication in this process (the work of each worker process)
    code = ("import desim, fluid\n"
            "s = fluid.load_scenario('configs/single-station.yaml')\n"
            "desim.run_replication(s, 0, horizon=50.0, warmup=5.0, seed=1)")
    assert _imported(code) == "[]"


def test_the_command_line_starts_without_them():
    # what every `fluidgap` command pays before it does anything (`--help`, `inspect`)
    assert _imported("import compare.cli, compare.cli.handlers, compare.cli.destinations") == "[]"


def test_simulate_without_a_report_imports_no_plotting():
    # `fluidgap simulate --json`: matplotlib (half a second) only for --report or --csv; the
    # summary's t quantile needs scipy.stats, and one replication per worker here needs no pandas
    code = ("import contextlib, io\n"
            "from compare.cli.main import main\n"
            "with contextlib.redirect_stdout(io.StringIO()):\n"
            "    assert main(['simulate', 'configs/single-station.yaml', '--reps', '2',\n"
            "                 '--workers', '1', '--horizon', '100', '--warmup', '10',\n"
            "                 '--quiet', '--json']) == 0")
    assert "matplotlib" not in _imported(code)
