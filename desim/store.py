"""Run directories: every finished replication saved to disk as it completes, and resumed.

A run directory holds

* ``manifest.json``: what the run is (a fingerprint of the scenario, the base seed, horizon,
  warm-up, interval, job limit, recorded waits, the program version), written before anything
  else, and the sha256 of every replication file (``checksums``);
* ``.checksums.journal`` while a run is going: the sha256 of each replication file appended
  (and fsynced) just before the file itself is written, folded into the manifest when the store
  is closed or, after a kill, when the folder is opened again (one line per replication instead
  of rewriting the whole manifest each time);
* ``rep-000012.json``: one file per finished replication (a :class:`desim.run.RunResult`), written
  the moment it arrives;
* ``summary.json``: the combined result (:meth:`SimulationResult.to_json`), once all are done;
* ``.fluidgap.lock`` while a process uses the directory (see below).

Every file is written atomically (a temporary file in the same directory, flushed and fsynced,
then ``os.replace``), so a run killed at any instant leaves only whole files. Replication files
are JSON with every float written as its shortest exact representation (``repr``), so a
replication read back is bit-for-bit the one computed and a resumed run ends with numbers
identical to an uninterrupted one. Non-finite floats are written as ``null`` (nan), ``"inf"`` and
``"-inf"`` to keep the files strict JSON.

One run directory serves one process at a time: :meth:`RunStore.open` takes an exclusive
``fcntl.flock`` on ``.fluidgap.lock`` in it (the file holds the owner's process id and is removed
when the store is closed; the kernel drops the lock of a process that dies), and a second
process is refused with a :class:`StoreError` naming the directory and that process id. On
``--resume`` every replication file is read back only if its sha256 is the one recorded in the
manifest: a file edited, damaged or put there by hand (``rep-5.json``) is refused by its own
name.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import re
from contextlib import suppress
from pathlib import Path
from typing import Any, Iterable, Mapping

import numpy as np

from fluid.scenario import Scenario

from .run import DEFAULT_MAX_JOBS, RunResult
from .run_folder import LOCK, TEMP_PREFIX, FolderLock, StoreError, write_atomic, writing
from .warmup import MserResult

__all__ = ["RunStore", "StoreError", "FolderLock", "FORMAT", "run_from_json", "run_to_json",
           "scenario_fingerprint", "write_atomic"]

#: Version of the file layout; a directory written with another layout is refused.
#: 2: the manifest records the sha256 of every replication file; 3: window shares count the
#: same jobs in numerator and denominator (a run of layout 2 would mix the two definitions);
#: 4: the per-interval service level counts each job in the interval it became available.
FORMAT = 4
MANIFEST = "manifest.json"
SUMMARY = "summary.json"
JOURNAL = ".checksums.journal"
_JOURNAL_LINE = re.compile(r"([0-9a-f]{64}) (rep-\d+\.json)")
_REP_FILE = re.compile(r"rep-(\d+)\.json")
_REP_LIKE = re.compile(r"rep-.*\.json")  # what a user might take for a replication file


# --- exact JSON of a replication -------------------------------------------------------------------


def _enc(x: Any) -> Any:
    """Plain JSON values; floats kept exact (json writes ``float.__repr__``)."""
    if isinstance(x, (bool, np.bool_)):
        return bool(x)
    if isinstance(x, (int, np.integer)):
        return int(x)
    if isinstance(x, (float, np.floating)):
        x = float(x)
        if math.isnan(x):
            return None
        if math.isinf(x):
            return "inf" if x > 0 else "-inf"
        return x
    if isinstance(x, Mapping):
        return {str(k): _enc(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_enc(v) for v in x]
    if isinstance(x, np.ndarray):
        return [_enc(v) for v in x.tolist()]
    return x


def _num(x: Any) -> Any:
    """Inverse of :func:`_enc` for a number (ints stay ints)."""
    if x is None:
        return math.nan
    if x == "inf":
        return math.inf
    if x == "-inf":
        return -math.inf
    return x


def _array(values: list) -> np.ndarray:
    return np.array([_num(v) for v in values], dtype=float)


def _table(t: Mapping) -> dict:
    return {name: {m: _num(v) for m, v in metrics.items()} for name, metrics in t.items()}


_INTERVAL_COLUMNS = ("interval", "start", "end", "metric", "name", "value")
_NUMERIC_INTERVAL = (0, 1, 2, 5)


def run_to_json(run: RunResult) -> dict:
    """Every field of ``run`` as a JSON-ready document (see :func:`run_from_json`)."""
    intervals = None
    if run.intervals is not None:
        if tuple(run.intervals.columns) != _INTERVAL_COLUMNS:
            raise ValueError(f"unexpected interval columns {list(run.intervals.columns)}")
        intervals = [list(row) for row in run.intervals.itertuples(index=False, name=None)]
    return _enc({
        "replication": run.replication, "seed": run.seed, "horizon": run.horizon,
        "warmup": run.warmup, "end": run.end, "unstable": run.unstable,
        "transitions": run.transitions, "places": run.places, "pools": run.pools,
        "sources": run.sources, "totals": run.totals,
        "queue_series": run.queue_series, "sample_step": run.sample_step,
        "mser": {"truncation": run.mser.truncation, "batches": run.mser.batches,
                 "statistic": run.mser.statistic, "late_minimum": run.mser.late_minimum},
        "intervals": intervals,
        "waits": run.waits,
        "jobs": run.jobs,
        "events": run.events,
    })


def run_from_json(doc: Mapping) -> RunResult:
    """The :class:`RunResult` written by :func:`run_to_json`, identical to the original."""
    intervals = None
    if doc["intervals"] is not None:
        rows = [tuple(_num(v) if i in _NUMERIC_INTERVAL else v for i, v in enumerate(row))
                for row in doc["intervals"]]
        import pandas as pd

        # the same constructor as desim.run builds it with, so the dtypes come out the same
        intervals = pd.DataFrame(rows, columns=list(_INTERVAL_COLUMNS))
    waits = None
    if doc["waits"] is not None:
        waits = {p: {k: _array(v) for k, v in w.items()} for p, w in doc["waits"].items()}
    jobs = None
    if doc["jobs"] is not None:
        jobs = [(j, s, _num(a), _num(e), o) for j, s, a, e, o in doc["jobs"]]
    m = doc["mser"]
    return RunResult(
        replication=doc["replication"], seed=doc["seed"], horizon=_num(doc["horizon"]),
        warmup=_num(doc["warmup"]), end=_num(doc["end"]), unstable=doc["unstable"],
        transitions=_table(doc["transitions"]), places=_table(doc["places"]),
        pools=_table(doc["pools"]), sources=_table(doc["sources"]),
        totals={k: _num(v) for k, v in doc["totals"].items()},
        queue_series=_array(doc["queue_series"]), sample_step=_num(doc["sample_step"]),
        mser=MserResult(truncation=m["truncation"], batches=m["batches"],
                        statistic=_array(m["statistic"]), late_minimum=m["late_minimum"]),
        intervals=intervals, waits=waits, jobs=jobs, events=doc["events"],
    )


# --- what a run is -------------------------------------------------------------------------------


def scenario_fingerprint(scenario: Scenario) -> str:
    """sha256 of what the simulation reads from a scenario: its validated document without the
    ``run`` section (the settings that matter are compared one by one), with keys sorted, plus
    the data read from files (arrival traces, empirical samples), which the document names only
    by path."""
    doc = json.loads(scenario.document)
    doc.pop("run", None)
    files: dict[str, Any] = {}
    for name, src in scenario.sources.items():
        data = src.arrivals.file_data
        if data is not None:
            files[f"sources.{name}"] = list(data)
    for name, place in scenario.places.items():
        for part in ("hold", "patience"):
            values = getattr(getattr(place, part), "values", None)
            if values is not None:
                files[f"places.{name}.{part}"] = list(values)
    text = json.dumps({"document": doc, "files": _enc(files)}, sort_keys=True,
                      separators=(",", ":"))
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _version() -> str:
    try:
        from importlib.metadata import PackageNotFoundError, version
    except ImportError:  # pragma: no cover
        return "unknown"
    try:
        return version("fluidgap")
    except PackageNotFoundError:
        return "unknown"


def _normal_settings(settings: Mapping) -> dict:
    """Settings of :func:`desim.run_replication` in a canonical form (None -> default)."""
    out = dict(settings)
    for key in ("horizon", "warmup"):
        if key in out:
            out[key] = float(out[key])
    if "seed" in out:
        out["seed"] = int(out["seed"])
    if out.get("interval") is not None:
        out["interval"] = float(out["interval"])
    if "max_jobs" in out:
        out["max_jobs"] = DEFAULT_MAX_JOBS if out.get("max_jobs") is None else int(out["max_jobs"])
    for key in ("record_waits", "record_jobs"):
        if key in out:
            out[key] = bool(out[key])
    return _enc(out)


#: Manifest keys that must agree for a directory to be resumed, with how to name them.
_SAME = {"format": "file layout", "version": "fluidgap version", "scenario_sha256": "scenario"}


class RunStore:
    """A run directory (see the module docstring). Use :meth:`open` (as a context manager, or
    :meth:`close` when done, which lets go of the directory's lock)."""

    def __init__(self, directory: Path, manifest: dict):
        self.directory = directory
        self.manifest = manifest
        self._lock: FolderLock | None = None
        self._journal: int | None = None  # file descriptor, opened at the first save

    @classmethod
    def open(cls, directory: str | os.PathLike, scenario: Scenario, settings: Mapping, *,
             resume: bool = False) -> "RunStore":
        """Open ``directory`` for a run of ``scenario`` with ``settings`` (the keyword settings of
        :func:`desim.run_replication`: horizon, warmup, seed, ...), locked against other
        processes until :meth:`close`.

        Without ``resume`` the directory must be new or empty; it gets a manifest. With
        ``resume`` a directory holding a manifest must describe the same run (same scenario,
        seed, horizon, warm-up, ...), and its finished replications are reused; a new or empty
        directory starts afresh. Raises :class:`StoreError` otherwise (also when another process
        uses the directory, or the file system refuses to write)."""
        directory = Path(directory)
        if directory.is_symlink() and not directory.exists():
            raise StoreError(f"{directory} is a symbolic link to nothing "
                             f"({os.readlink(directory)})")
        if directory.exists() and not directory.is_dir():
            raise StoreError(f"{directory} exists and is not a directory")
        manifest = {
            "format": FORMAT,
            "kind": "fluidgap replications",
            "version": _version(),
            "scenario": scenario.name,
            "scenario_sha256": scenario_fingerprint(scenario),
            **_normal_settings(settings),
            "checksums": {},
        }
        with writing(directory):
            directory.mkdir(parents=True, exist_ok=True)
        # the lock comes before anything is read or removed: another process's temporary files
        # are its own business
        lock = FolderLock(directory).acquire()
        try:
            store = cls._opened(directory, manifest, resume)
        except BaseException:
            lock.release()
            raise
        store._lock = lock
        return store

    @classmethod
    def _opened(cls, directory: Path, manifest: dict, resume: bool) -> "RunStore":
        path = directory / MANIFEST
        if path.exists():
            if not resume:
                raise StoreError(f"{directory} already holds a run; use --resume or another "
                                 "directory")
            store = cls(directory, cls._read_manifest(path))
            store._check_same(manifest)
            store.manifest.setdefault("checksums", {})
            store._remove_temporaries()
            store._fold_journal()
            return store
        others = [p.name for p in directory.iterdir()
                  if not p.name.startswith(TEMP_PREFIX) and p.name != LOCK]
        if others:
            raise StoreError(f"{directory} is not empty and holds no run (no {MANIFEST}); "
                             "use a new or empty directory")
        store = cls(directory, manifest)
        store._remove_temporaries()
        store._write_manifest()
        return store

    def close(self) -> None:
        """Record the checksums in the manifest and let go of the directory (its lock)."""
        try:
            if self._journal is not None:
                os.close(self._journal)
                self._journal = None
                self._write_manifest()
                with suppress(FileNotFoundError):
                    os.unlink(self.directory / JOURNAL)
        finally:
            if self._lock is not None:
                self._lock.release()
                self._lock = None

    def _fold_journal(self) -> None:
        """The checksums a killed run appended to the journal, into the manifest."""
        path = self.directory / JOURNAL
        try:
            text = path.read_text(encoding="ascii", errors="replace")
        except FileNotFoundError:
            return
        except OSError as exc:
            raise StoreError(f"{path}: cannot read the checksums of the run ({exc})") from exc
        checksums = self.manifest["checksums"]
        for line in text.splitlines():
            m = _JOURNAL_LINE.fullmatch(line)
            if m:  # (a torn last line: its file was never written, it is run again)
                checksums[m.group(2)] = m.group(1)
        self._write_manifest()
        with writing(path):
            os.unlink(path)

    def __enter__(self) -> "RunStore":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def _write_manifest(self) -> None:
        path = self.directory / MANIFEST
        with writing(path):
            write_atomic(path, json.dumps(self.manifest, indent=2) + "\n")

    @staticmethod
    def _read_manifest(path: Path) -> dict:
        try:
            doc = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, ValueError) as exc:
            raise StoreError(f"{path}: cannot read the run manifest ({exc})") from exc
        if not isinstance(doc, dict) or doc.get("kind") != "fluidgap replications":
            raise StoreError(f"{path} is not a fluidgap run manifest")
        if not isinstance(doc.get("checksums", {}), dict):
            raise StoreError(f"{path}: 'checksums' is not a mapping of file names")
        return doc

    def _check_same(self, wanted: dict) -> None:
        have = self.manifest
        for key in sorted(set(have) | set(wanted), key=lambda k: (k not in _SAME, k)):
            if key in ("kind", "scenario", "checksums"):
                continue
            old, new = have.get(key), wanted.get(key)
            if old == new or (key == "version" and "unknown" in (old, new)):
                continue  # (a version is unknown when running from a source tree)
            if key == "scenario_sha256":
                raise StoreError(
                    f"{self.directory} holds a run of a different scenario "
                    f"({have.get('scenario')!r}, fingerprint {str(old)[:12]}; this one: "
                    f"{wanted.get('scenario')!r}, {str(new)[:12]}); use another directory")
            what = _SAME.get(key, key)
            raise StoreError(f"{self.directory} holds a run with {what} {old!r}, this run has "
                             f"{what} {new!r}; resume with the same settings or use another "
                             "directory")

    def _remove_temporaries(self) -> None:
        # half-written files of a killed run; whole files are never named like this
        for p in self.directory.glob(TEMP_PREFIX + "*"):
            with suppress(OSError):
                p.unlink()

    # --- replications ----------------------------------------------------------------------

    def path_of(self, replication: int) -> Path:
        return self.directory / f"rep-{replication:06d}.json"

    def finished(self) -> list[int]:
        """Indices of the replications saved so far, in order. A file that looks like a
        replication file but is not named as this store names them (``rep-5.json``) is refused
        by its own name: it was not written by a run."""
        out = []
        for p in self.directory.iterdir():
            if not _REP_LIKE.fullmatch(p.name):
                continue
            m = _REP_FILE.fullmatch(p.name)
            if m is None or self.path_of(int(m.group(1))).name != p.name:
                raise StoreError(f"{p} is not a replication file of this run (they are named "
                                 "like rep-000012.json); move it out of the directory")
            out.append(int(m.group(1)))
        return sorted(out)

    def save(self, run: RunResult) -> Path:
        """Save one finished replication (atomically): its sha256 goes into the journal first
        (fsynced), then the file, so that a run killed between the two leaves a replication to
        run again, never a file without its checksum."""
        doc = {"format": FORMAT, "run": run_to_json(run)}
        text = json.dumps(doc, separators=(",", ":"), allow_nan=False) + "\n"
        path = self.path_of(run.replication)
        digest = _sha256(text.encode("utf-8"))
        journal = self.directory / JOURNAL
        with writing(journal):
            if self._journal is None:
                self._journal = os.open(journal, os.O_WRONLY | os.O_APPEND | os.O_CREAT
                                        | os.O_CLOEXEC, 0o644)
            os.write(self._journal, f"{digest} {path.name}\n".encode("ascii"))
            os.fsync(self._journal)
        self.manifest.setdefault("checksums", {})[path.name] = digest
        with writing(path):
            return write_atomic(path, text)

    def load(self, replication: int) -> RunResult:
        """Read one saved replication back, checking that it is the file this run wrote (its
        sha256 in the manifest) and that it belongs to this run."""
        path = self.path_of(replication)
        again = "; delete it to have that replication run again"
        try:
            data = path.read_bytes()
        except OSError as exc:
            raise StoreError(f"{path} is damaged ({type(exc).__name__}: {exc}){again}") from exc
        recorded = self.manifest.get("checksums", {}).get(path.name)
        if recorded is None:
            raise StoreError(f"{path} was not saved by the run described by {MANIFEST} (no "
                             f"checksum recorded for it){again}")
        if _sha256(data) != recorded:
            raise StoreError(f"{path} is damaged or was edited after it was saved (its sha256 "
                             f"differs from the one in {MANIFEST}){again}")
        try:
            doc = json.loads(data.decode("utf-8"))
            run = run_from_json(doc["run"])
        except (ValueError, KeyError, TypeError) as exc:
            raise StoreError(f"{path} is damaged ({type(exc).__name__}: {exc}){again}") from exc
        m = self.manifest
        if (run.replication, run.seed, run.horizon, run.warmup) != (
                replication, m.get("seed"), m.get("horizon"), m.get("warmup")):
            raise StoreError(f"{path} does not belong to the run described by {MANIFEST}")
        return run

    def load_all(self, replications: Iterable[int]) -> dict[int, RunResult]:
        """The saved replications among ``replications``, by index."""
        wanted = set(replications)
        return {r: self.load(r) for r in self.finished() if r in wanted}

    def save_summary(self, result) -> Path:
        """Save the combined :class:`desim.SimulationResult` as ``summary.json``."""
        path = self.directory / SUMMARY
        with writing(path):
            return write_atomic(path, json.dumps(_enc(result.to_json()), indent=2,
                                                 allow_nan=False) + "\n")


def _sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()
