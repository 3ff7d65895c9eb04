"""The hostile-input corpus: every input here must end fast and clean.

Each case runs ``python -m compare.cli ARGS`` as its own process, in this folder, under a time
limit (:data:`SECONDS`) and a memory limit (:data:`MEMORY_BYTES` of address space, set with
``resource.setrlimit(RLIMIT_AS)`` in the child; two cases run at a time), and must exit with code 2, print nothing on
stdout and exactly one line on stderr that names the field or flag at fault (the words given)
and quotes nothing it should not (``absent``).

The YAML files beside this module are small copies of ``base.yaml`` with one field broken (each
says how in its first line); ``data/`` holds the files they name. Cases that need a FIFO, a
folder or a large file build it in a temporary folder (``setup``). The alias bombs, 400-digit
integers, extreme floats, ``/dev/zero`` and FIFOs reproduce the findings of the hardening issue
("hostile input ends fast and clean").
"""

from __future__ import annotations

import os
import resource
import subprocess
import sys
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import pytest

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]
SECONDS = 20
MEMORY_BYTES = 1536 * 2**20
BIG = "9" * 400


@dataclass(frozen=True)
class Case:
    """``argv`` after ``fluidgap`` ("{tmp}" stands for a temporary folder made by ``setup``),
    the words the one line on stderr must hold, and the words it must not."""

    name: str
    argv: tuple[str, ...]
    words: tuple[str, ...]
    absent: tuple[str, ...] = ()
    setup: Callable[[Path], None] | None = field(default=None, compare=False)


def case(name: str, argv: str | list[str], *words: str, absent: tuple[str, ...] = (),
         setup: Callable[[Path], None] | None = None) -> Case:
    return Case(name, tuple(argv.split() if isinstance(argv, str) else argv), words, absent,
                setup)


# --- what the temporary cases need ----------------------------------------------------------------

BASE = (HERE / "base.yaml").read_text()


def _fifo(name: str) -> Callable[[Path], None]:
    def make(tmp: Path) -> None:
        os.mkfifo(tmp / name)
        (tmp / "trace.yaml").write_text(BASE.replace("calls: {rate: 1.0, into: queue}",
                                                     "calls: {trace: pipe, into: queue}"))
        (tmp / "empirical.yaml").write_text(BASE.replace(
            "talk: {hold: {dist: exponential, mean: 1.5}}",
            "talk: {hold: {dist: empirical, file: pipe}}"))
    return make


def _folder(tmp: Path) -> None:
    (tmp / "scenario.yaml").mkdir()


def _sparse_scenario(tmp: Path) -> None:
    with open(tmp / "huge.yaml", "wb") as f:  # 17 MiB of zero bytes, written as a hole
        f.truncate(17 * 2**20)


def _long_line(tmp: Path) -> None:
    (tmp / "long.txt").write_text("1 " * 40_000 + "\n")
    (tmp / "s.yaml").write_text(BASE.replace("calls: {rate: 1.0, into: queue}",
                                             "calls: {trace: long.txt, into: queue}"))


def _symlink_out(tmp: Path) -> None:
    (tmp / "link.txt").symlink_to("/etc/passwd")
    (tmp / "s.yaml").write_text(BASE.replace("calls: {rate: 1.0, into: queue}",
                                             "calls: {trace: link.txt, into: queue}"))


def _many_lines(tmp: Path) -> None:
    (tmp / "blank.txt").write_text("\n" * 100)
    (tmp / "s.yaml").write_text(BASE.replace("calls: {rate: 1.0, into: queue}",
                                             "calls: {trace: blank.txt, into: queue}"))


CASES = [
    # --- YAML that would expand without end --------------------------------------------------
    case("alias bomb as the name", "inspect alias-bomb-name.yaml",
         "alias-bomb-name.yaml", "aliases are expanded"),
    case("alias bomb as staff", "fluid alias-bomb-staff.yaml", "alias-bomb-staff.yaml", "aliases"),
    case("alias bomb under an unknown key", "inspect alias-bomb-unknown-key.yaml", "aliases"),
    case("alias bomb in a --set value",
         ["inspect", "base.yaml", "--set", "pools.agents=[&a [x,x,x,x,x,x,x,x,x,x], "
          + ", ".join(f"&a{i} [" + ",".join([f"*a{i - 1}" if i > 1 else "*a"] * 10) + "]"
                      for i in range(1, 8)) + "]"],
         "--set pools.agents", "aliases"),
    case("recursive alias", "inspect alias-recursive.yaml", "alias refers to the value that contains it"),
    case("deep nesting", "inspect deep-nesting.yaml", "deep-nesting.yaml", "nested too deeply"),
    # --- numbers no field can mean ----------------------------------------------------------
    case("400-digit rate", "fluid huge-int-rate.yaml", "sources.calls.rate", "400 digits"),
    case("400-digit staff", "fluid huge-int-staff.yaml", "pools.agents", "at most"),
    case("400-digit excluded_within", "inspect target-excluded-within-huge.yaml",
         "targets.queue.abandoned.excluded_within", "at most"),
    case("400-digit horizon", "simulate huge-int-horizon.yaml", "run.horizon"),
    case("5000-digit hold", "inspect giant-int-hold.yaml", "places.talk.hold", "5000 digits"),
    case("400-digit seed", "simulate huge-int-seed.yaml", "run.seed"),
    case("run.start 25:000...", "compare run-start-bad.yaml", "run.start", "HH:MM"),
    case("400-digit arc weight", "fluid huge-int-weight.yaml", "transitions.answer.in.agents"),
    case("a trillion replications", "simulate huge-replications.yaml", "run.replications"),
    case("gamma cv 1e-200", "simulate gamma-cv-tiny.yaml", "places.talk.hold.cv", "at least 1e-06"),
    case("gamma cv 1e+200", "simulate gamma-cv-huge.yaml", "places.talk.hold.cv", "at most 100"),
    case("day factor cv 1e+200", ["simulate", "base.yaml", "--set",
                                   "sources.calls.random_rate.cv=1e200"],
         "sources.calls.random_rate.cv", "at most 1"),
    case("lognormal cv 1e+160", "simulate lognormal-cv-huge.yaml", "places.talk.hold.cv"),
    case("weibull shape 0.001", "compare weibull-shape-tiny.yaml", "places.queue.patience.shape"),
    case("erlang k 10^400", "fluid erlang-k-huge.yaml", "places.talk.hold.k"),
    case("schedule step 1e-300", "fluid schedule-step-tiny.yaml", "pools.agents.schedule.step",
         "--max-intervals"),
    case("profile step 1e-300", "simulate profile-step-tiny.yaml", "sources.calls.profile.step",
         "--max-intervals"),
    case("rate 1e+308", "fluid rate-max-float.yaml", "sources.calls.rate", "at most 1e+12"),
    case("shift starts every 1e-300", "staff shift-starts-huge.yaml --shifts",
         "shifts.early.starts", "more than 10,000"),
    case("shift break of 1e300", "inspect shift-break-huge.yaml", "shifts.early.breaks",
         "at most 1e+12"),
    case("hold .inf", "inspect hold-infinite.yaml", "places.talk.hold", "finite"),
    case("uniform up to 1e300", "simulate uniform-huge.yaml", "places.talk.hold.high"),
    case("empirical values near 1.7e308", "simulate empirical-near-max.yaml",
         "places.talk.hold.values[0]"),
    case("empirical file near 1.7e308", "simulate empirical-file-near-max.yaml",
         "places.talk.hold.file", "entry 1"),
    # --- files that are not what they seem ---------------------------------------------------
    case("empirical file not UTF-8", "fluid empirical-not-utf8.yaml", "places.talk.hold.file",
         "line 3", "not UTF-8"),
    case("empirical file outside the folder", "inspect empirical-outside.yaml",
         "places.talk.hold.file", "outside", "--allow-outside-files"),
    case("empirical /dev/zero", "inspect empirical-dev-zero.yaml --allow-outside-files",
         "places.talk.hold.file", "a device"),
    case("trace /etc/passwd", "inspect trace-etc-passwd.yaml", "sources.calls.trace", "outside",
         absent=("root:",)),
    case("trace ../../../../etc/passwd", "simulate trace-dotdot.yaml", "sources.calls.trace",
         "outside", absent=("root:",)),
    case("trace /proc/self/environ", "inspect trace-proc-environ.yaml", "sources.calls.trace",
         "outside", absent=("PATH=",)),
    case("trace /proc/self/environ allowed", "inspect trace-proc-environ.yaml "
         "--allow-outside-files", "sources.calls.trace", absent=("PATH=", "HOME=")),
    case("trace /dev/zero", "simulate trace-dev-zero.yaml --allow-outside-files",
         "sources.calls.trace", "a device"),
    case("trace a folder", "inspect trace-folder.yaml", "sources.calls.trace", "a folder"),
    case("trace text never echoed", "inspect trace-secret-text.yaml", "sources.calls.trace",
         "entry 1 is not a number (line 1)", absent=("root", "bash")),
    case("trace going back in time", "inspect trace-backwards.yaml", "sources.calls.trace",
         "line 3", "earlier"),
    case("trace beyond --max-file-values", "inspect trace-ten.yaml --max-file-values 5",
         "sources.calls.trace", "--max-file-values"),
    case("trace as a FIFO", "simulate {tmp}/trace.yaml", "sources.calls.trace", "FIFO",
         setup=_fifo("pipe")),
    case("empirical as a FIFO", "fluid {tmp}/empirical.yaml", "places.talk.hold.file", "FIFO",
         setup=_fifo("pipe")),
    case("scenario a FIFO", "inspect {tmp}/pipe", "pipe", "FIFO", setup=_fifo("pipe")),
    case("scenario /dev/zero", "inspect /dev/zero", "/dev/zero", "a device"),
    case("scenario a folder", "fluid {tmp}/scenario.yaml", "scenario.yaml", "a folder",
         setup=_folder),
    case("scenario of 17 MiB", "inspect {tmp}/huge.yaml", "huge.yaml", "larger than",
         setup=_sparse_scenario),
    case("trace line of 80 kB", "inspect {tmp}/s.yaml", "sources.calls.trace", "longer than",
         setup=_long_line),
    case("trace a link out of the folder", "inspect {tmp}/s.yaml", "sources.calls.trace",
         "outside", absent=("root:",), setup=_symlink_out),
    case("trace of blank lines beyond the limit", "inspect {tmp}/s.yaml --max-file-values 10",
         "sources.calls.trace", "--max-file-values", setup=_many_lines),
    case("scenario not UTF-8", "inspect not-utf8.yaml", "not-utf8.yaml", "not UTF-8"),
    # --- YAML shapes no scenario has ---------------------------------------------------------
    case("hold 1e-300 loop", "simulate hold-tiny-loop.yaml", "places.loop_a", "zero-time circuit"),
    case("patience 1e-300 loop", "simulate patience-tiny-loop.yaml", "zero-time circuit"),
    case("name with a trailing newline", "inspect name-trailing-newline.yaml", "places.queue\\n",
         "must match"),
    case("name of 10,000 characters", "inspect name-long.yaml", "name", "at most 200"),
    case("pool name of 20,000 characters", "inspect key-huge.yaml", "pools.aaaa",
         "at most 64 characters"),
    case("a list as a key", "inspect key-list.yaml", "a mapping key must be a plain value"),
    case("duplicate pool", "inspect duplicate-key.yaml", "duplicate key 'agents'"),
    case("a date that does not exist", "inspect bad-date.yaml", "bad-date.yaml", "cannot be read"),
    case("tagged float abc", "inspect bad-tagged-float.yaml", "bad-tagged-float.yaml"),
    case("python object tag", "inspect python-object.yaml", "python-object.yaml", "not valid YAML"),
    case("a list as the document", "inspect not-a-mapping.yaml", "must be a mapping"),
    # --- --set -------------------------------------------------------------------------------
    case("--set a typo of a pool", "inspect base.yaml --set pools.agent=8", "pools.agent",
         "no pool named agent", "(pools: agents)", "+pools.agent"),
    case("--set a typo of a source", "simulate base.yaml --set sources.cals.rate=3",
         "sources.cals", "no source named"),
    case("--set abc on a scheduled pool", "inspect schedule.yaml --set pools.agents=abc",
         "pools.agents", "whole number", absent=("either staff or schedule",)),
    case("--set a number on a scheduled pool", "inspect schedule.yaml --set pools.agents=4",
         "pools.agents", "has a schedule", "schedule.staff"),
    case("--set + inside an entry", "inspect base.yaml --set +pools.agents.staff=3",
         "+ adds a whole pool"),
    case("--set + outside the named sections", "inspect base.yaml --set +run.horizon=3",
         "+ adds a pool"),
    case("--set + an existing pool", "inspect base.yaml --set +pools.agents=3", "exists already"),
    case("--set a 400-digit horizon", f"fluid base.yaml --set run.horizon={BIG}", "run.horizon"),
    case("--set staff 1e10", "inspect base.yaml --set pools.agents=1e10", "pools.agents",
         "at most"),
    case("--set a trace outside", ["inspect", "base.yaml", "--set",
                                   "sources.calls={trace: /etc/shadow, into: queue}"],
         "sources.calls.trace", "outside"),
    case("--set a list index on a section", "inspect base.yaml --set pools[0]=1", "pools[0]",
         "no such list item"),
    case("--set text for a rate", "inspect base.yaml --set sources.calls.rate=1e6x",
         "sources.calls.rate", "finite number"),
    # --- flags -------------------------------------------------------------------------------
    case("--horizon inf", "simulate base.yaml --horizon inf", "--horizon", "finite"),
    case("--horizon 1e12", "simulate base.yaml --horizon 1e12", "--horizon", "--max-arrivals"),
    case("--horizon 1e13", "compare base.yaml --horizon 1e13", "--horizon", "at most 1e+12"),
    case("--interval nan", "simulate base.yaml --interval nan", "--interval", "finite"),
    case("--interval 1e-6", "simulate base.yaml --interval 1e-6", "--interval", "--max-intervals"),
    case("--reps 100000000", "simulate base.yaml --reps 100000000", "--reps",
         "--max-replications"),
    case("--reps abc", "simulate base.yaml --reps abc", "--reps", "whole number"),
    case("--seed of 5000 digits", ["simulate", "base.yaml", "--seed", "7" * 5000], "--seed",
         "at most 40 digits"),
    case("--workers 100000", "simulate base.yaml --workers 100000", "--workers", "at most"),
    case("--warmup nan", "compare base.yaml --warmup nan", "--warmup", "finite"),
    case("--max-arrivals 0", "simulate base.yaml --max-arrivals 0", "--max-arrivals"),
    case("--max-intervals -1", "fluid base.yaml --max-intervals -1", "--max-intervals"),
    case("--dt nan", "fluid base.yaml --dt nan", "--dt", "finite"),
    case("--dt inf", "fluid base.yaml --dt inf", "--dt", "finite"),
    case("--dt 1e-9", "fluid base.yaml --dt 1e-9", "--dt", "grid points"),
    case("--dt 1e300", "fluid base.yaml --dt 1e300", "--dt"),
    case("--dt beyond the horizon", "fluid base.yaml --dt 1000", "--dt", "half the horizon"),
    case("--method lp with priorities", "fluid priority.yaml --method lp", "--method lp",
         "priorities"),
    case("--method lp with a schedule", "fluid schedule.yaml --method lp", "--method lp",
         "schedules"),
    case("--factors inf", "scale base.yaml --factors inf", "--factors", "finite"),
    case("--factors 1e11", "scale base.yaml --factors 1 1e11", "--max-arrivals"),
    case("--range POOL=0:inf", "phases base.yaml --axes agents --range agents=0:inf", "--range",
         "finite"),
    case("--range up to 1e15", "phases base.yaml --axes agents --range agents=0:1e15",
         "--range", "HI <= 1,000,000,000"),
    case("--cost POOL=inf", "staff base.yaml --fluid-only --cost agents=inf", "--cost"),
    case("--cost POOL=1e300", "staff base.yaml --fluid-only --cost agents=1e300", "--cost"),
    case("station --rate nan", "station --servers 2 --rate nan --mean-hold 1", "--rate", "finite"),
    case("station --servers 10^11", "station --servers 100000000000 --rate 1 --mean-hold 1",
         "--servers", "at most"),
    case("station --mean-hold inf", "station --servers 2 --rate 1 --mean-hold inf",
         "--mean-hold", "finite"),
    case("simulate --horizon with a profile beyond --max-intervals",
         ["simulate", "base.yaml", "--set",
          "sources.calls={profile: {step: 1, rates: [1, 2]}, into: queue}",
          "--horizon", "100000"], "sources.calls.profile.step", "--max-intervals"),
]

#: The cases of the default run: one or two per finding of the issue (about 10 s of processes);
#: the rest of the corpus is marked slow (the whole corpus takes about 40 s on two cores).
DEFAULT = {
    "alias bomb as the name", "alias bomb in a --set value", "recursive alias",
    "400-digit rate", "5000-digit hold", "gamma cv 1e+200", "schedule step 1e-300",
    "profile step 1e-300", "rate 1e+308", "shift starts every 1e-300", "empirical file not UTF-8",
    "empirical file near 1.7e308", "trace ../../../../etc/passwd",
    "trace /proc/self/environ allowed", "trace /dev/zero", "trace as a FIFO", "scenario a FIFO",
    "trace text never echoed", "trace beyond --max-file-values", "hold 1e-300 loop",
    "patience 1e-300 loop", "name with a trailing newline", "--set a typo of a pool",
    "--set abc on a scheduled pool", "--horizon inf", "--horizon 1e12", "--interval 1e-6",
    "--reps 100000000", "--dt 1e-9", "--method lp with priorities", "--factors inf",
    "run.start 25:000...",
}


def _limits() -> None:  # in the child, before it runs Python
    resource.setrlimit(resource.RLIMIT_AS, (MEMORY_BYTES, MEMORY_BYTES))


def _run(argv: list[str]) -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": str(ROOT), "OPENBLAS_NUM_THREADS": "1",
           "OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1", "NUMBA_NUM_THREADS": "1"}
    env.pop("FLUIDGAP_DEBUG", None)
    return subprocess.run([sys.executable, "-m", "compare.cli", *argv], cwd=HERE, env=env,
                          capture_output=True, text=True, timeout=SECONDS,
                          preexec_fn=_limits)


@pytest.fixture(scope="module")
def outcomes(request, tmp_path_factory):
    """The finished process of every case selected in this session, by case name: the cases
    run two at a time (the machine has two cores), each in a temporary folder of its own."""
    chosen = [item.callspec.params["hostile"] for item in request.session.items
              if "hostile" in getattr(getattr(item, "callspec", None), "params", {})]
    with ThreadPoolExecutor(max_workers=2) as pool:
        futures = {}
        for c in chosen:
            tmp = tmp_path_factory.mktemp("hostile")
            if c.setup is not None:
                c.setup(tmp)
            futures[c.name] = pool.submit(_run, [a.replace("{tmp}", str(tmp)) for a in c.argv])
        yield futures
        for f in futures.values():
            f.cancel()


def test_the_corpus_is_large_and_its_files_are_used():
    assert len(CASES) >= 60 and len({c.name for c in CASES}) == len(CASES)
    assert DEFAULT <= {c.name for c in CASES}
    named = {word for c in CASES for word in c.argv}
    for path in HERE.glob("*.yaml"):
        assert path.name in named, f"{path.name} is used by no case"


@pytest.mark.parametrize("hostile", [
    pytest.param(c, id=c.name, marks=[] if c.name in DEFAULT else [pytest.mark.slow])
    for c in CASES])
def test_hostile_input_exits_2_with_one_line(hostile: Case, outcomes):
    proc = outcomes[hostile.name].result()
    assert proc.returncode == 2, (proc.returncode, proc.stderr[-2000:])
    assert proc.stdout == ""
    assert proc.stderr.count("\n") == 1 and proc.stderr.endswith("\n"), proc.stderr[:2000]
    assert len(proc.stderr) < 2100 and "Traceback" not in proc.stderr
    for word in hostile.words:
        assert word in proc.stderr, (word, proc.stderr)
    for word in hostile.absent:
        assert word not in proc.stderr, (word, proc.stderr)
