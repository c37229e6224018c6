"""The rehearsal's stages, on a process pool (embedded) or on Dask distributed.

1. spool every export file (one task per file), 2. partition the spool by patient with
DuckDB, 3. replay each partition's patients (one task per partition) and write its tally,
4. merge the tallies and write the report. The output folder keeps a manifest
(``manifest.jsonl``): the run's inputs, then one line per finished stage and partition, so
``--resume`` after an interruption redoes nothing that finished. ``work/`` under it holds the
spool, the partitions and the tallies: local working files with patient ids, never to be
sent anywhere; the report files next to it hold none.
"""

from __future__ import annotations

import hashlib
import os
import shutil
import sys
import time
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import asdict, dataclass
from datetime import datetime
from multiprocessing import get_context
from pathlib import Path
from typing import IO, Any

import orjson

from cds_service.errors import UserError
from cds_service.rehearsal import export, tally

MANIFEST = "manifest.jsonl"
FORMAT = 1  # of the manifest and the work folder


@dataclass(frozen=True, slots=True)
class Options:
    export_dir: str
    start: datetime
    end: datetime
    out: str
    config: str | None = None
    scheduler: str | None = None  # a Dask scheduler address, or "local" for a LocalCluster
    workers: int = 2
    partitions: int | None = None  # default: from the number of patients
    cases: str | None = None
    resume: bool = False
    stop_after: int | None = None  # stop after this many partitions (tests of --resume)


class Stopped(Exception):
    """Raised after ``Options.stop_after`` partitions, as an interruption would stop a run."""


# ---- tasks (run in worker processes) -------------------------------------------------------

_ENV: dict[tuple[Any, ...], Any] = {}


def _env(config: str | None, start: datetime, end: datetime) -> Any:
    from cds_service.rehearsal.patient import Env

    key = (config, start, end)
    if key not in _ENV:
        from cds_service.clinical.thresholds import load_thresholds
        from cds_service.config import load_settings

        settings = load_settings(config)
        _ENV.clear()
        _ENV[key] = Env(
            settings, load_thresholds(settings.clinical), alert_settings(settings), start, end
        )
    return _ENV[key]


def alert_settings(settings: Any) -> Any:
    """The configuration's alert-burden settings, built as the live service builds them
    (``alerts.live.settings_for`` with the service registry)."""
    from cds_service.alerts.live import settings_for
    from cds_service.hooks.registry import SERVICES

    return settings_for(settings, SERVICES)


def run_partition(task: dict[str, Any]) -> dict[str, Any]:
    """Replay one partition's patients and write its tally; a small summary comes back."""
    from cds_service.rehearsal.patient import rehearse_patient

    env = _env(task["config"], task["start"], task["end"])
    t = tally.empty()
    for _pid, lines in export.patients_of(Path(task["parts_dir"]), task["part"]):
        outcome = rehearse_patient(lines, env)
        if outcome is None:
            t["patients_without_patient_resource"] += 1
            t["lines_without_patient_resource"] += len(lines)
        else:
            tally.add_patient(t, outcome)
    _write_atomic(Path(task["result"]), orjson.dumps(t))
    return {
        "part": task["part"],
        "patients": t["patients"] + t["patients_without_patient_resource"],
    }


def _write_atomic(path: Path, data: bytes) -> None:
    tmp = path.with_suffix(path.suffix + ".tmp")
    tmp.write_bytes(data)
    os.replace(tmp, path)


# ---- where tasks run ------------------------------------------------------------------------


class Embedded:
    """A process pool on this machine (spawned processes: DuckDB's threads never fork)."""

    name = "embedded"

    def __init__(self, workers: int) -> None:
        self.pool = ProcessPoolExecutor(max_workers=workers, mp_context=get_context("spawn"))

    def run(self, fn: Callable[[Any], Any], items: Iterable[Any]) -> Iterator[Any]:
        futures = [self.pool.submit(fn, item) for item in items]
        try:
            for f in as_completed(futures):
                yield f.result()
        finally:
            for f in futures:
                f.cancel()

    def close(self) -> None:
        self.pool.shutdown(wait=True, cancel_futures=True)


class OnDask:
    """Dask distributed: a scheduler address, or ``local`` for a LocalCluster of processes.
    Workers must see the export and output folders at the same paths (a shared file system)."""

    name = "dask"

    def __init__(self, address: str, workers: int) -> None:
        from dask.distributed import Client, LocalCluster

        self.cluster = None
        if address == "local":
            self.cluster = LocalCluster(
                n_workers=workers,
                threads_per_worker=1,
                processes=True,
                dashboard_address=None,
                scheduler_port=0,
            )
            address = self.cluster.scheduler_address
        try:
            self.client = Client(address, timeout=30)
        except OSError as exc:
            if self.cluster is not None:
                self.cluster.close()
            raise UserError(f"cannot reach the Dask scheduler at {address}: {exc}") from None

    def run(self, fn: Callable[[Any], Any], items: Iterable[Any]) -> Iterator[Any]:
        from dask.distributed import as_completed as dask_completed

        futures = [self.client.submit(fn, item, pure=False) for item in items]
        try:
            for f in dask_completed(futures):
                yield f.result()
        finally:
            self.client.cancel(futures)

    def close(self) -> None:
        self.client.close()
        if self.cluster is not None:
            self.cluster.close()


# ---- progress ---------------------------------------------------------------------------


class Progress:
    """Patients done, rate and time left, on stderr: redrawn in place on a terminal, a line
    every few seconds otherwise."""

    def __init__(self, total: int, done: int = 0, stream: IO[str] | None = None) -> None:
        self.total, self.done, self.base = total, done, done
        self.stream = stream if stream is not None else sys.stderr
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)())
        self.started = self.last = time.monotonic()

    def add(self, n: int, final: bool = False) -> None:
        self.done += n
        now = time.monotonic()
        if not final and now - self.last < (0.5 if self.tty else 5.0):
            return
        self.last = now
        rate = (self.done - self.base) / max(now - self.started, 1e-9)
        left = (self.total - self.done) / rate if rate > 0 else float("nan")
        pct = 100 * self.done / self.total if self.total else 100.0
        text = (
            f"rehearsal: {self.done:,}/{self.total:,} patients ({pct:.0f} %), "
            f"{rate:,.0f} patients/s, " + (f"about {_duration(left)} left" if not final else "done")
        )
        self.stream.write(("\r" + text + " " * 8) if self.tty else text + "\n")
        if final and self.tty:
            self.stream.write("\n")
        self.stream.flush()


def _duration(seconds: float) -> str:
    if seconds != seconds:  # nan
        return "an unknown time"
    s = int(seconds)
    return f"{s // 60} min {s % 60} s" if s >= 60 else f"{s} s"


# ---- the manifest --------------------------------------------------------------------------


def _inputs(opts: Options, files: list[Path]) -> dict[str, Any]:
    config = Path(opts.config).read_bytes() if opts.config else b""
    return {
        "kind": "run",
        "format": FORMAT,
        "files": [[p.name, p.stat().st_size, p.stat().st_mtime_ns] for p in files],
        "from": opts.start.isoformat(),
        "to": opts.end.isoformat(),
        "config_sha256": hashlib.sha256(config).hexdigest(),
        "partitions": opts.partitions,
    }


def _read_manifest(path: Path) -> list[dict[str, Any]]:
    out = []
    for line in path.read_bytes().splitlines():
        try:
            out.append(orjson.loads(line))
        except orjson.JSONDecodeError:  # a line cut by the interruption: that step redoes
            break
    return out


class Manifest:
    def __init__(self, out: Path, inputs: dict[str, Any], resume: bool) -> None:
        self.path = out / MANIFEST
        self.lines: list[dict[str, Any]] = []
        if self.path.exists():
            if not resume:
                raise UserError(
                    f"{out} already holds a rehearsal ({MANIFEST}); pass --resume to finish "
                    "it, or choose another --out"
                )
            self.lines = _read_manifest(self.path)
            if not self.lines or self.lines[0] != inputs:
                raise UserError(
                    f"{out} holds a rehearsal of other inputs (export files, dates, "
                    "configuration or partitions differ); choose another --out"
                )
        else:
            work = out / "work"
            if work.exists():
                shutil.rmtree(work)
            self.add(inputs)

    def add(self, line: dict[str, Any]) -> None:
        with self.path.open("ab") as fh:
            fh.write(orjson.dumps(line) + b"\n")
            fh.flush()
            os.fsync(fh.fileno())
        self.lines.append(line)

    def find(self, kind: str) -> list[dict[str, Any]]:
        return [line for line in self.lines if line.get("kind") == kind]


# ---- the run ---------------------------------------------------------------------------------


def _executor(opts: Options) -> Embedded | OnDask:
    if opts.scheduler:
        return OnDask(opts.scheduler, opts.workers)
    return Embedded(opts.workers)


def rehearse(opts: Options, stream: IO[str] | None = None) -> dict[str, Any]:
    """Run (or finish) a rehearsal; returns the report (as written to ``rehearsal.json``)."""
    from cds_service.rehearsal import report

    if opts.end <= opts.start:
        raise UserError("--to must be after --from")
    if opts.workers < 1:
        raise UserError("--workers must be at least 1")
    files = export.export_files(Path(opts.export_dir))
    out = Path(opts.out)
    out.mkdir(parents=True, exist_ok=True)
    manifest = Manifest(out, _inputs(opts, files), opts.resume)
    work = out / "work"
    spool, parts, results = work / "spool", work / "parts", work / "results"
    for d in (spool, parts, results):
        d.mkdir(parents=True, exist_ok=True)
    started = time.monotonic()
    marks = [started]
    reused = 0
    executor = _executor(opts)
    try:
        files_done = {line["file"]: line for line in manifest.find("file")}
        todo = [
            export.SpoolTask(i, str(p), str(spool / f"{i:04d}.parquet"))
            for i, p in enumerate(files)
            if p.name not in files_done
        ]
        for summary in executor.run(export.spool_file, todo):
            manifest.add({"kind": "file", **summary})
        read = [{k: v for k, v in line.items() if k != "kind"} for line in manifest.find("file")]
        read.sort(key=lambda f: f["file"])
        marks.append(time.monotonic())
        layout = manifest.find("partitioned")
        if not layout:
            counts = export.count_patients(spool)
            n = opts.partitions or max(4 * opts.workers, -(-counts // 250), 1)
            n = min(n, export.BUCKETS)
            shutil.rmtree(parts, ignore_errors=True)  # a partitioning cut short
            per_part = export.partition(spool, parts, n, opts.workers)
            manifest.add(
                {
                    "kind": "partitioned",
                    "partitions": n,
                    "patients": {str(k): v for k, v in sorted(per_part.items())},
                }
            )
            layout = manifest.find("partitioned")
        n_parts = layout[0]["partitions"]
        per_part = {int(k): v for k, v in layout[0]["patients"].items()}
        marks.append(time.monotonic())
        finished = {
            line["part"]
            for line in manifest.find("partition")
            if (results / f"{line['part']:04d}.json").exists()
        }
        reused = len(finished)
        total = sum(per_part.values())
        progress = Progress(total, sum(per_part.get(p, 0) for p in finished), stream)
        tasks = [
            {
                "part": p,
                "parts_dir": str(parts),
                "result": str(results / f"{p:04d}.json"),
                "config": opts.config,
                "start": opts.start,
                "end": opts.end,
            }
            for p in range(n_parts)
            if p not in finished
        ]
        done_now = 0
        for summary in executor.run(run_partition, tasks):
            manifest.add({"kind": "partition", **summary})
            progress.add(summary["patients"])
            done_now += 1
            if opts.stop_after is not None and done_now >= opts.stop_after:
                raise Stopped(f"stopped after {done_now} partitions")
        progress.add(0, final=True)
        marks.append(time.monotonic())
    finally:
        executor.close()
    merged = tally.merge(
        orjson.loads((results / f"{p:04d}.json").read_bytes()) for p in range(n_parts)
    )
    run = {
        "engine": executor.name,
        "workers": opts.workers,
        "partitions": n_parts,
        "partitions_reused": reused,
        "seconds": round(time.monotonic() - started, 2),
        "stage_seconds": {
            name: round(b - a, 3)
            for name, a, b in zip(("read", "partition", "replay"), marks, marks[1:], strict=False)
        },
    }
    built = report.build(merged, read, opts, run)
    report.write_all(built, merged, read, out, opts.cases)
    manifest.add({"kind": "report", **{k: run[k] for k in ("engine", "partitions_reused")}})
    return built


__all__ = ["Options", "Stopped", "asdict", "rehearse", "run_partition"]
