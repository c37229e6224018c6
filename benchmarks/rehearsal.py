"""Rehearsal benchmark: cost against export size, memory, parallel speed-up, reading rate.

    python -m benchmarks.rehearsal [--quick] [--sizes 1000,10000,50000] [--ratio-size 4000]

Prints one JSON object:

- ``linear``: end-to-end seconds per size of an invented export (embedded, 2 workers), the
  least-squares line through them and its R²;
- ``memory``: peak resident memory of the main process and of the largest worker per size
  (each size runs in its own process, so the figures do not mix);
- ``speedup``: throughput (patients per second of the replay stage, and end to end) with one
  and with two workers, embedded and on a Dask local cluster, and the two-to-one ratios;
- ``patient_days_per_second_per_core`` of the replay stage;
- ``reading``: lines per second of the rehearsal's NDJSON reader (``export.spool_file``, in
  this process) against a bare ``orjson`` parse of the same files in the same run.

Exports are written by ``cds_service.rehearsal.synthetic`` into a temporary folder first;
their writing is not timed.
"""

from __future__ import annotations

import argparse
import gzip
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import orjson

DAYS = 90
START = datetime(2026, 1, 1, tzinfo=UTC)
END = datetime(2026, 4, 1, tzinfo=UTC)


def _one(export: str, out: str, workers: int, scheduler: str | None) -> dict[str, Any]:
    """One rehearsal in this process (run as a child: ``--one``)."""
    from cds_service.rehearsal import Options, rehearse

    opts = Options(
        export_dir=export, start=START, end=END, out=out, workers=workers, scheduler=scheduler
    )
    t0 = time.perf_counter()
    with open(os.devnull, "w") as quiet:
        report = rehearse(opts, stream=quiet)
    wall = time.perf_counter() - t0
    return {
        "seconds": round(wall, 2),
        "stage_seconds": report["run"]["stage_seconds"],
        "patients": report["population"]["patients"],
        "patient_days": report["population"]["patient_days"],
        "breaches": len(report["breaches"]),
        "peak_rss_mib_main": round(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024, 1),
        "peak_rss_mib_largest_worker": round(
            resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024, 1
        ),
    }


def _child(export: Path, out: Path, workers: int, scheduler: str | None = None) -> dict:
    cmd = [
        sys.executable,
        "-m",
        "benchmarks.rehearsal",
        "--one",
        str(export),
        str(out),
        str(workers),
    ]
    if scheduler:
        cmd.append(scheduler)
    done = subprocess.run(cmd, capture_output=True, text=True, check=False)
    if done.returncode != 0:
        raise SystemExit(f"rehearsal run failed: {done.stderr.strip()[-2000:]}")
    return json.loads(done.stdout)


def _export(root: Path, patients: int) -> Path:
    from cds_service.rehearsal.synthetic import generate

    folder = root / f"export-{patients}"
    if not folder.exists():
        generate(folder, patients, days=DAYS)
    return folder


def _fit(xs: list[float], ys: list[float]) -> dict[str, float]:
    n = len(xs)
    mx, my = sum(xs) / n, sum(ys) / n
    sxx = sum((x - mx) ** 2 for x in xs)
    slope = sum((x - mx) * (y - my) for x, y in zip(xs, ys, strict=True)) / sxx
    intercept = my - slope * mx
    ss_res = sum((y - (intercept + slope * x)) ** 2 for x, y in zip(xs, ys, strict=True))
    ss_tot = sum((y - my) ** 2 for y in ys)
    return {
        "ms_per_patient": round(1000 * slope, 3),
        "intercept_seconds": round(intercept, 2),
        "r_squared": round(1 - ss_res / ss_tot, 5) if ss_tot else 1.0,
    }


def _reading(folder: Path) -> dict[str, Any]:
    from cds_service.rehearsal.export import SpoolTask, export_files, spool_file

    files = export_files(folder)
    lines = sum(
        1 for p in files for _ in (gzip.open(p) if p.name.endswith(".gz") else open(p, "rb"))
    )
    t0 = time.perf_counter()
    for p in files:
        with gzip.open(p, "rb") if p.name.endswith(".gz") else p.open("rb") as fh:
            for line in fh:
                orjson.loads(line)
    bare = time.perf_counter() - t0
    with tempfile.TemporaryDirectory() as tmp:
        t0 = time.perf_counter()
        for i, p in enumerate(files):
            spool_file(SpoolTask(i, str(p), str(Path(tmp) / f"{i}.parquet")))
        ours = time.perf_counter() - t0
    return {
        "lines": lines,
        "orjson_lines_per_second": round(lines / bare),
        "rehearsal_reader_lines_per_second": round(lines / ours),
        "reader_vs_bare_orjson": round(bare / ours, 3),
    }


def _throughput(run: dict[str, Any]) -> dict[str, float]:
    replay = run["stage_seconds"]["replay"]
    return {
        "patients_per_second_replay": round(run["patients"] / replay, 1),
        "patients_per_second_end_to_end": round(run["patients"] / run["seconds"], 1),
    }


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m benchmarks.rehearsal")
    parser.add_argument("--quick", action="store_true", help="sizes 300, 1000, 3000")
    parser.add_argument("--sizes", default=None)
    parser.add_argument("--ratio-size", type=int, default=None)
    parser.add_argument("--one", nargs="+", help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.one:
        export, out, workers, *rest = args.one
        print(json.dumps(_one(export, out, int(workers), rest[0] if rest else None)))
        return 0
    sizes = [
        int(s)
        for s in (args.sizes or ("300,1000,3000" if args.quick else "1000,10000,50000")).split(",")
    ]
    ratio_size = args.ratio_size or (1000 if args.quick else 4000)
    result: dict[str, Any] = {
        "benchmark": "rehearsal",
        "machine": {"cpu_count": os.cpu_count(), "load_average_at_start": os.getloadavg()},
        "sizes": sizes,
    }
    with tempfile.TemporaryDirectory(prefix="tonicity-rehearsal-bench-") as tmp:
        root = Path(tmp)
        runs = {}
        for n in sizes:
            runs[n] = _child(_export(root, n), root / f"out-{n}-e2", 2)
        result["linear"] = {
            "runs": {
                str(n): {
                    k: r[k]
                    for k in ("seconds", "stage_seconds", "patients", "patient_days", "breaches")
                }
                for n, r in runs.items()
            },
            "fit_seconds_vs_patients": _fit(
                [float(n) for n in sizes], [runs[n]["seconds"] for n in sizes]
            ),
            "fit_replay_seconds_vs_patients": _fit(
                [float(n) for n in sizes], [runs[n]["stage_seconds"]["replay"] for n in sizes]
            ),
        }
        result["memory"] = {
            str(n): {k: r[k] for k in ("peak_rss_mib_main", "peak_rss_mib_largest_worker")}
            for n, r in runs.items()
        }
        folder = _export(root, ratio_size)
        speed: dict[str, Any] = {"patients": ratio_size}
        for engine, scheduler in (("embedded", None), ("dask", "local")):
            one = _child(folder, root / f"out-r-{engine}-1", 1, scheduler)
            two = _child(folder, root / f"out-r-{engine}-2", 2, scheduler)
            t1, t2 = _throughput(one), _throughput(two)
            speed[engine] = {
                "one_worker": t1,
                "two_workers": t2,
                "ratio_replay": round(
                    t2["patients_per_second_replay"] / t1["patients_per_second_replay"], 3
                ),
                "ratio_end_to_end": round(
                    t2["patients_per_second_end_to_end"] / t1["patients_per_second_end_to_end"], 3
                ),
                "patient_days_per_second_per_core": round(
                    one["patient_days"] / one["stage_seconds"]["replay"], 1
                ),
            }
        result["speedup"] = speed
        result["reading"] = _reading(_export(root, sizes[0]))
    result["machine"]["load_average_at_end"] = os.getloadavg()
    print(json.dumps(result, indent=2))
    return 0


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
